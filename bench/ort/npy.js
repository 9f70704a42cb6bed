// Reading a float32 or int64 .npy file (NumPy format version 1 or 2, C order) for the
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
  const i64 = /'descr':\s*'<i8'/.test(header);
  if ((!/'descr':\s*'<f4'/.test(header) && !i64) || /'fortran_order':\s*True/.test(header)) {
    throw new Error(path + ': need little-endian float32 or int64 in C order, got ' + header);
  }
  const shape = header.match(/'shape':\s*\(([^)]*)\)/)[1].split(',').filter((s) => s.trim() !== '').map(Number);
  const off = start + hlen;
  const bytes = buf.buffer.slice(buf.byteOffset + off, buf.byteOffset + buf.length);
  const data = i64 ? new BigInt64Array(bytes) : new Float32Array(bytes);
  return { shape, data, type: i64 ? 'int64' : 'float32' };
}

module.exports = { readNpy };
