// Runs each one-node model of transformer_ops.py with ONNX Runtime (npm
// onnxruntime-node) and writes its outputs next to it as <case>.out<i>.npy,
// the expected values of probe's transformer operator tests.
//
//   node transformer_ops.js DIR
'use strict';
const fs = require('fs');
const path = require('path');
const ort = require('onnxruntime-node');

const DESCR = { '<f4': ['float32', Float32Array], '<i8': ['int64', BigInt64Array], '<i4': ['int32', Int32Array], '|b1': ['bool', Uint8Array] };

function readNpy(p) {
  const buf = fs.readFileSync(p);
  const major = buf[6];
  const hlen = major === 1 ? buf.readUInt16LE(8) : buf.readUInt32LE(8);
  const start = major === 1 ? 10 : 12;
  const header = buf.toString('latin1', start, start + hlen);
  const descr = header.match(/'descr':\s*'([^']*)'/)[1];
  const shape = header.match(/'shape':\s*\(([^)]*)\)/)[1].split(',').filter((s) => s.trim() !== '').map(Number);
  const [type, Arr] = DESCR[descr];
  const off = start + hlen;
  const bytes = buf.buffer.slice(buf.byteOffset + off, buf.byteOffset + buf.length);
  const data = type === 'bool' ? Array.from(new Uint8Array(bytes), (v) => v !== 0) : new Arr(bytes);
  return new ort.Tensor(type, data, shape);
}

function writeNpy(p, t) {
  const descr = { float32: '<f4', int32: '<i4', int64: '<i8' }[t.type];
  if (!descr) throw new Error(p + ': output type ' + t.type);
  let header = `{'descr': '${descr}', 'fortran_order': False, 'shape': (${t.dims.join(', ')}${t.dims.length === 1 ? ',' : ''}), }`;
  while ((10 + header.length + 1) % 64 !== 0) header += ' ';
  header += '\n';
  const head = Buffer.alloc(10);
  head.write('\x93NUMPY', 0, 'latin1');
  head[6] = 1; head[7] = 0;
  head.writeUInt16LE(header.length, 8);
  const data = Buffer.from(t.data.buffer, t.data.byteOffset, t.data.byteLength);
  fs.writeFileSync(p, Buffer.concat([head, Buffer.from(header, 'latin1'), data]));
}

async function main() {
  const dir = process.argv[2];
  const models = fs.readdirSync(dir).filter((f) => f.endsWith('.onnx')).sort();
  for (const m of models) {
    const name = m.slice(0, -5);
    if (fs.existsSync(path.join(dir, `${name}.out0.npy`))) {
      console.log(`${name}: expected output written by the generator (NumPy)`);
      continue;
    }
    const sess = await ort.InferenceSession.create(path.join(dir, m));
    const feeds = {};
    sess.inputNames.forEach((n, i) => { feeds[n] = readNpy(path.join(dir, `${name}.in${i}.npy`)); });
    const res = await sess.run(feeds);
    sess.outputNames.forEach((n, i) => writeNpy(path.join(dir, `${name}.out${i}.npy`), res[n]));
    console.log(`${name}: ${sess.outputNames.map((n) => `${n} [${res[n].dims}]`).join(', ')}`);
  }
}
main().catch((e) => { console.error(e); process.exit(1); });
