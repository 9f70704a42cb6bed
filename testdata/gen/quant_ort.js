// ONNX Runtime reference outputs for the quantized test models of
// quant_models.py: runs every model in testdata/quant on the first 64 images of
// testdata/ref/digits_sample_nchw.npy and writes each graph output to
// testdata/quant/ort/<model>.<output>.npy (the output's own type).
// Graph optimisations are off: with them ONNX Runtime fuses Q/DQ pairs into
// integer kernels with other rounding, and the reference is the graph as written.
//
//   cd testdata/gen && ONNXRUNTIME_NODE_INSTALL=skip npm install --no-audit --no-fund
//   node quant_ort.js
//
// (package.json beside this file pins onnxruntime-node 1.30.0; its CPU binary
// ships in the npm package, the skip avoids the optional GPU download.)
'use strict';
const fs = require('fs');
const path = require('path');
const ort = require('onnxruntime-node');

const repo = path.resolve(__dirname, '..', '..');
const dir = path.join(repo, 'testdata', 'quant');
const samples = 64;

function readNpy(p) {
  const buf = fs.readFileSync(p);
  const major = buf[6];
  const hlen = major === 1 ? buf.readUInt16LE(8) : buf.readUInt32LE(8);
  const start = major === 1 ? 10 : 12;
  const header = buf.toString('latin1', start, start + hlen);
  if (!/'descr':\s*'<f4'/.test(header) || /'fortran_order':\s*True/.test(header)) throw new Error(p + ': need float32 C order');
  const shape = header.match(/'shape':\s*\(([^)]*)\)/)[1].split(',').filter((s) => s.trim() !== '').map(Number);
  const off = start + hlen;
  return { shape, data: new Float32Array(buf.buffer.slice(buf.byteOffset + off, buf.byteOffset + buf.length)) };
}

const descr = { float32: '<f4', uint8: '|u1', int8: '|i1', int32: '<i4', int64: '<i8' };

function writeNpy(p, t) {
  let header = `{'descr': '${descr[t.type]}', 'fortran_order': False, 'shape': (${t.dims.join(', ')}${t.dims.length === 1 ? ',' : ''}), }`;
  while ((10 + header.length + 1) % 64 !== 0) header += ' ';
  header += '\n';
  const pre = Buffer.alloc(10);
  pre.write('\x93NUMPY', 0, 'latin1');
  pre[6] = 1; pre[7] = 0;
  pre.writeUInt16LE(header.length, 8);
  const d = t.data;
  fs.writeFileSync(p, Buffer.concat([pre, Buffer.from(header, 'latin1'), Buffer.from(d.buffer, d.byteOffset, d.byteLength)]));
}

async function main() {
  const x = readNpy(path.join(repo, 'testdata', 'ref', 'digits_sample_nchw.npy'));
  const item = x.data.length / x.shape[0];
  const input = new ort.Tensor('float32', x.data.slice(0, samples * item), [samples, ...x.shape.slice(1)]);
  fs.mkdirSync(path.join(dir, 'ort'), { recursive: true });
  // fp16.onnx is left out: ONNX Runtime computes it in float16, vitals in float32
  // (on purpose: it reports what float16 would lose), so outputs differ by design.
  for (const f of fs.readdirSync(dir).filter((f) => f.endsWith('.onnx') && f !== 'fp16.onnx').sort()) {
    const s = await ort.InferenceSession.create(path.join(dir, f), { executionProviders: ['cpu'], intraOpNumThreads: 1, graphOptimizationLevel: 'disabled' });
    const out = await s.run({ input });
    for (const name of s.outputNames) {
      writeNpy(path.join(dir, 'ort', `${f.replace(/\.onnx$/, '')}.${name}.npy`), out[name]);
    }
    console.log(f, s.outputNames.join(' '));
  }
  console.log('onnxruntime-node', require('onnxruntime-node/package.json').version);
}

main().catch((e) => { console.error(e); process.exit(1); });
