// Reading a float32 .npy file (NumPy format version 1 or 2, C order) for the
// ONNX Runtime scripts of bench/.
'use strict';
const fs = require('fs');

function readNpy(path) {
  const buf = fs.readFileSync(path);
  if (buf.toString('latin1', 1, 6) !== 'NUMPY') throw new Error(path + ': not a .npy file');
  const major = buf[6];
  const hlen = major === 1 ? buf.readUInt16LE(8) : buf.readUInt32LE(8);
  const start = major === 1 ? 10 : 12;
  const header = buf.toString('latin1', start, start + hlen);
  if (!/'descr':\s*'<f4'/.test(header) || /'fortran_order':\s*True/.test(header)) {
    throw new Error(path + ': need little-endian float32 in C order, got ' + header);
  }
  const shape = header.match(/'shape':\s*\(([^)]*)\)/)[1].split(',').filter((s) => s.trim() !== '').map(Number);
  const off = start + hlen;
  const data = new Float32Array(buf.buffer.slice(buf.byteOffset + off, buf.byteOffset + buf.length));
  return { shape, data };
}

module.exports = { readNpy };
