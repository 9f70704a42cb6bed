// ONNX Runtime CPU reference timing for bench/executor.sh.
//
//   node run.js MODEL.onnx INPUT.npy BATCH SAMPLES THREADS REPS [item]
//
// With "item" the model has no batch axis: each item is fed alone with its
// own shape (BATCH is then ignored and taken as 1).
//
// Runs the model over the first SAMPLES items of the .npy (float32 or int64, C order)
// in batches of BATCH with THREADS intra-op threads (sequential execution,
// all graph optimisations), after one warm-up batch, REPS times; prints the
// best total time per item in milliseconds as "ort_ms_per_item=X".
'use strict';
const ort = require('onnxruntime-node');

const { readNpy } = require('./npy');

async function main() {
  const [model, npy, batchS, samplesS, threadsS, repsS, mode] = process.argv.slice(2);
  const perItem = mode === 'item';
  const batch = perItem ? 1 : Number(batchS), threads = Number(threadsS), reps = Number(repsS);
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
    const dims = perItem ? x.shape.slice(1) : [batch, ...x.shape.slice(1)];
    batches.push(new ort.Tensor(x.type, d, dims));
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
