// ONNX Runtime reference outputs for bench/detectcheck.
//
//   node outputs.js MODEL.onnx INPUT.npy ITEMS OUT.json
//
// Runs the model on each of the first ITEMS items of the .npy (float32, C
// order) alone, fed with the item's own shape (models without a batch
// axis, such as torchvision's detection exports), and writes every output
// of every item as {"items": [{name: {"dims": [...], "data": [...]}}]}.
'use strict';
const fs = require('fs');
const ort = require('onnxruntime-node');
const { readNpy } = require('./npy');

async function main() {
  const [model, npy, itemsS, out] = process.argv.slice(2);
  const x = readNpy(npy);
  const items = Math.min(Number(itemsS), x.shape[0]);
  const size = x.data.length / x.shape[0];
  const session = await ort.InferenceSession.create(model, {
    executionProviders: ['cpu'], intraOpNumThreads: 2, graphOptimizationLevel: 'all',
  });
  const res = [];
  for (let i = 0; i < items; i++) {
    const t = new ort.Tensor('float32', x.data.slice(i * size, (i + 1) * size), x.shape.slice(1));
    const o = await session.run({ [session.inputNames[0]]: t });
    const item = {};
    for (const name of session.outputNames) {
      item[name] = { dims: o[name].dims, data: Array.from(o[name].data, Number) };
    }
    res.push(item);
  }
  fs.writeFileSync(out, JSON.stringify({ items: res }));
}

main().catch((e) => { console.error(e); process.exit(2); });
