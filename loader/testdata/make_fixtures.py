#!/usr/bin/python3
"""Writes the small NumPy fixtures the loader tests read (run from this folder
with a Python that has numpy: /usr/bin/python3 make_fixtures.py).

Values are simple formulas so the Go tests can recompute them:
  f4_c.npy       float32 (4, 3, 2), C order:      x[i] = 0.5*i - 3 (flat index i)
  f8_fortran.npy float64 (3, 4), Fortran order:   x[r, c] = 10*r + c
  bool.npy       bool (2, 3):                      [[1,0,1],[0,0,1]]
  i8.npy         int64 (5,):                       [-2**62, -1, 0, 7, 2**40]
  be_i4.npy      big-endian int32 (5, 2):          x[r, c] = (r - 2) * 1000003 + c
  be_f4.npy      big-endian float32 (2, 2):        [[1.5, -2.25], [3e38, -0.0]]
  f2.npy         float16 (4,):                     [0.5, -2, 65504, 2**-24]
  v2.npy, v3.npy float32 (2, 3), format 2.0 / 3.0: x[i] = i + 0.25
  u1.npy         uint8 (3, 2, 2):                  x[i] = 20*i (flat index)
  samples.npz    stored:   x = f4_c values, y = int64 [0, 1, 2, 3]
  samples_z.npz  deflated: x = f4_c values, y = int64 [0, 1, 2, 3]
"""
import numpy as np
from numpy.lib import format as npf

f4 = (np.arange(24, dtype='<f4') * 0.5 - 3).reshape(4, 3, 2)
np.save('f4_c.npy', f4)
r, c = np.mgrid[0:3, 0:4]
f8 = np.asfortranarray((10 * r + c).astype('<f8'))
assert f8.flags.f_contiguous and not f8.flags.c_contiguous
np.save('f8_fortran.npy', f8)
np.save('bool.npy', np.array([[1, 0, 1], [0, 0, 1]], dtype=bool))
np.save('i8.npy', np.array([-2**62, -1, 0, 7, 2**40], dtype='<i8'))
r, c = np.mgrid[0:5, 0:2]
np.save('be_i4.npy', ((r - 2) * 1000003 + c).astype('>i4'))
np.save('be_f4.npy', np.array([[1.5, -2.25], [3e38, -0.0]], dtype='>f4'))
np.save('f2.npy', np.array([0.5, -2, 65504, 2**-24], dtype='<f2'))
v = np.arange(6, dtype='<f4').reshape(2, 3) + 0.25
for ver in (2, 3):
    with open('v%d.npy' % ver, 'wb') as f:
        npf.write_array(f, v, version=(ver, 0))
np.save('u1.npy', (np.arange(12) * 20).astype('u1').reshape(3, 2, 2))
y = np.arange(4, dtype='<i8')
np.savez('samples.npz', x=f4, y=y)
np.savez_compressed('samples_z.npz', x=f4, y=y)
