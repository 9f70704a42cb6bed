// ONNX Runtime CPU reference timing for bench/executor.sh.
//
//   node run.js MODEL.onnx INPUT.npy BATCH SAMPLES THREADS REPS
//
// Runs the model over the first SAMPLES items of the .npy (float32 or int64, C order)
// in batches of BATCH with THREADS intra-op threads (sequential execution,
// all graph optimisations), after one warm-up batch, REPS times; prints the
// best total time per item in milliseconds as "ort_ms_per_item=X".
'use strict';
const fs = require('fs');
const ort = require('onnxruntime-node');

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

async function main() {
  const [model, npy, batchS, samplesS, threadsS, repsS] = process.argv.slice(2);
  const batch = Number(batchS), threads = Number(threadsS), reps = Number(repsS);
  const x = readNpy(npy);
  const samples = Math.min(Number(samplesS), x.shape[0]);
  const item = x.data.length / x.shape[0];
  const session = await ort.InferenceSession.create(model, {
    executionProviders: ['cpu'],
    intraOpNumThreads: threads,
    interOpNumThreads: 1,
    executionMode: 'sequential',
    graphOptimizationLevel: 'all',
  });
  const name = session.inputNames[0];
  const batches = [];
  for (let s = 0; s + batch <= samples; s += batch) {
    const d = x.data.slice(s * item, (s + batch) * item);
    batches.push(new ort.Tensor(x.type, d, [batch, ...x.shape.slice(1)]));
  }
  await session.run({ [name]: batches[0] }); // warm-up
  let best = Infinity;
  for (let r = 0; r < reps; r++) {
    const t0 = process.hrtime.bigint();
    for (const b of batches) await session.run({ [name]: b });
    best = Math.min(best, Number(process.hrtime.bigint() - t0) / 1e6);
  }
  console.log('ort_ms_per_item=' + (best / (batches.length * batch)).toFixed(3));
}

main().catch((e) => { console.error(e); process.exit(2); });
