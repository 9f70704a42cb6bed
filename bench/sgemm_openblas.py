#!/usr/bin/python3
"""Time OpenBLAS SGEMM (through Debian's numpy) at n×n×n; print GFLOP/s.

Run by sgemm_openblas.sh, which sets the OpenBLAS environment. Prints
'openblas core=<name> threads=<n> gflops=<best>' on the last line.
"""
import ctypes
import sys
import time

import numpy as np

n = int(sys.argv[1]) if len(sys.argv) > 1 else 1024
reps = int(sys.argv[2]) if len(sys.argv) > 2 else 10

a = np.random.default_rng(1).standard_normal((n, n), dtype=np.float32)
b = np.random.default_rng(2).standard_normal((n, n), dtype=np.float32)
c = a @ b  # warm up, loads the BLAS

libs = sorted({line.split()[-1] for line in open("/proc/self/maps") if "blas" in line and ".so" in line})
openblas = [l for l in libs if "openblas" in l]
if not openblas:
    sys.exit("numpy is not linked against OpenBLAS: " + ", ".join(libs))
lib = ctypes.CDLL(openblas[0])
core, threads = "?", "?"
try:
    lib.openblas_get_corename.restype = ctypes.c_char_p
    core = lib.openblas_get_corename().decode()
    threads = lib.openblas_get_num_threads()
except AttributeError:
    pass

best = float("inf")
for _ in range(reps):
    t = time.perf_counter()
    np.matmul(a, b, out=c)
    best = min(best, time.perf_counter() - t)
print(f"openblas lib={openblas[0]} core={core} threads={threads} gflops={2 * n**3 / best / 1e9:.1f}")
