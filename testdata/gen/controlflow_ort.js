// Checks the golden statistics of testdata/controlflow a second way, with
// ONNX Runtime (npm onnxruntime-node), and prints one line per layer.
//
//   node controlflow_ort.js REPO_DIR EXPOSED_DIR
//
// EXPOSED_DIR holds the branch and body graphs as models of their own with
// every inner tensor exposed as an output (controlflow_models.py --exposed).
// The full models run as shipped and their outputs are compared with the
// golden outputs; the branch models run on the batches that took the branch,
// the body models once per iteration (Loop) or step (Scan) with the state
// carried here; every inner tensor's count, mean, std (population), min and
// max over all executions are compared with the golden layer of the same
// qualified name (docs/subgraphs.md). Exit status 1 on any mismatch.
// Run it through controlflow_ort.sh.
'use strict';
const fs = require('fs');
const path = require('path');
const ort = require('onnxruntime-node');

function readNpy(p) {
  const buf = fs.readFileSync(p);
  const major = buf[6];
  const hlen = major === 1 ? buf.readUInt16LE(8) : buf.readUInt32LE(8);
  const start = major === 1 ? 10 : 12;
  const header = buf.toString('latin1', start, start + hlen);
  if (!/'descr':\s*'<f4'/.test(header)) throw new Error(p + ': need float32, got ' + header);
  const shape = header.match(/'shape':\s*\(([^)]*)\)/)[1].split(',').filter((s) => s.trim() !== '').map(Number);
  const off = start + hlen;
  return { shape, data: new Float32Array(buf.buffer.slice(buf.byteOffset + off, buf.byteOffset + buf.length)) };
}

function rows(x, lo, hi) {
  const item = x.data.length / x.shape[0];
  return new ort.Tensor('float32', x.data.slice(lo * item, hi * item), [hi - lo, ...x.shape.slice(1)]);
}

// Acc keeps every value of one tensor over all executions (float64 sums, two passes).
class Acc {
  constructor() { this.parts = []; }
  add(t) { this.parts.push(Float32Array.from(t.data)); }
  stats() {
    let n = 0, s = 0, mn = Infinity, mx = -Infinity;
    for (const p of this.parts) for (const v of p) { n++; s += v; mn = Math.min(mn, v); mx = Math.max(mx, v); }
    const mean = s / n;
    let q = 0;
    for (const p of this.parts) for (const v of p) q += (v - mean) * (v - mean);
    return { count: n, mean, std: Math.sqrt(q / n), min: mn, max: mx };
  }
}

function qualify(prefix, name) {
  return prefix + '/' + (name.startsWith('/') ? name.slice(1) : name);
}

let failures = 0;
function compare(model, accs, prefix, golden) {
  for (const [name, acc] of Object.entries(accs)) {
    const out = qualify(prefix, name);
    const g = golden.layers.find((l) => l.output === out);
    if (!g) continue; // a formal output (the loop condition) or a value with no golden layer
    const s = acc.stats();
    const mag = Math.max(Math.abs(g.min), Math.abs(g.max));
    const ok = s.count === g.count &&
      Math.abs(s.mean - g.mean) <= 1e-5 * Math.max(Math.abs(g.mean), g.std) &&
      Math.abs(s.std - g.std) <= 1e-5 * g.std &&
      Math.abs(s.min - g.min) <= 1e-5 * mag && Math.abs(s.max - g.max) <= 1e-5 * mag;
    if (!ok) failures++;
    console.log(`${ok ? 'ok  ' : 'FAIL'} ${model} ${g.node}: count ${s.count}/${g.count} mean ${s.mean.toPrecision(7)}/${g.mean.toPrecision(7)} ` +
      `std ${s.std.toPrecision(7)}/${g.std.toPrecision(7)} min ${s.min.toPrecision(6)}/${g.min.toPrecision(6)} max ${s.max.toPrecision(6)}/${g.max.toPrecision(6)} (ORT/NumPy)`);
    g.checked = true;
  }
  for (const g of golden.layers) {
    if (g.node.startsWith(prefix + '/') && !g.checked) {
      failures++;
      console.log(`FAIL ${model} ${g.node}: no ONNX Runtime tensor for ${g.output}`);
    }
  }
}

function compareOutput(model, got, golden) {
  const want = golden.output.flat();
  let worst = 0;
  for (let i = 0; i < want.length; i++) worst = Math.max(worst, Math.abs(got[i] - want[i]));
  const ok = got.length === want.length && worst <= 1e-5;
  if (!ok) failures++;
  console.log(`${ok ? 'ok  ' : 'FAIL'} ${model} output: ${got.length} values, max |ORT − NumPy| ${worst.toExponential(2)}`);
}

function add(accs, outs, skip) {
  for (const [k, v] of Object.entries(outs)) {
    if (skip.includes(k) || v.type !== 'float32') continue;
    (accs[k] = accs[k] || new Acc()).add(v);
  }
}

async function main() {
  const [repo, exposed] = process.argv.slice(2);
  const dir = path.join(repo, 'testdata', 'controlflow');
  const golden = (n) => JSON.parse(fs.readFileSync(path.join(dir, n + '.golden.json'), 'utf8'));
  const opts = { executionProviders: ['cpu'], intraOpNumThreads: 1, interOpNumThreads: 1, graphOptimizationLevel: 'disabled' };

  // If on the sample rate: the full model per batch, each branch alone on its batches
  {
    const g = golden('if_rate');
    const x = readNpy(path.join(dir, g.input));
    const full = await ort.InferenceSession.create(path.join(dir, g.model), opts);
    const branch = {
      '/If/then': await ort.InferenceSession.create(path.join(exposed, 'if_rate.then.onnx'), opts),
      '/If/else': await ort.InferenceSession.create(path.join(exposed, 'if_rate.else.onnx'), opts),
    };
    const accs = { '/If/then': {}, '/If/else': {} };
    const got = [];
    for (let k = 0; k < g.scalar_per_batch.length; k++) {
      const sr = g.scalar_per_batch[k];
      const xb = rows(x, k * g.batch, (k + 1) * g.batch);
      const o = await full.run({ input: xb, sr: new ort.Tensor('int64', BigInt64Array.from([BigInt(sr)]), []) });
      got.push(...o.output.data);
      const p = sr === 16000 ? '/If/then' : '/If/else';
      add(accs[p], await branch[p].run({ input: xb }), []);
    }
    compareOutput('if_rate', got, g);
    for (const p of Object.keys(accs)) compare('if_rate', accs[p], p, g);
  }

  // Loop: the body once per iteration, the state carried here
  {
    const g = golden('loop_rnn');
    const x = readNpy(path.join(dir, g.input));
    const full = await ort.InferenceSession.create(path.join(dir, g.model), opts);
    const body = await ort.InferenceSession.create(path.join(exposed, 'loop_rnn.body.onnx'), opts);
    const [N, T] = x.shape;
    const H = 8;
    const accs = {};
    const got = [];
    for (let lo = 0; lo < N; lo += g.batch) {
      const hi = Math.min(lo + g.batch, N);
      const xb = rows(x, lo, hi);
      got.push(...(await full.run({ input: xb })).output.data);
      let h = new ort.Tensor('float32', new Float32Array((hi - lo) * H), [hi - lo, H]);
      for (let t = 0; t < T; t++) {
        const o = await body.run({ i: new ort.Tensor('int64', BigInt64Array.from([BigInt(t)]), []),
          cond_in: new ort.Tensor('bool', Uint8Array.from([1]), []), h, input: xb });
        add(accs, o, ['cond_out']);
        h = o.h_next;
      }
    }
    compareOutput('loop_rnn', got, g);
    compare('loop_rnn', accs, '/Loop/body', g);
  }

  // Scan: the body once per step over axis 1, the state carried here
  {
    const g = golden('scan_seq');
    const x = readNpy(path.join(dir, g.input));
    const full = await ort.InferenceSession.create(path.join(dir, g.model), opts);
    const body = await ort.InferenceSession.create(path.join(exposed, 'scan_seq.body.onnx'), opts);
    const [N, T, F] = x.shape;
    const H = 8;
    const accs = {};
    const got = [];
    for (let lo = 0; lo < N; lo += g.batch) {
      const hi = Math.min(lo + g.batch, N);
      got.push(...(await full.run({ input: rows(x, lo, hi) })).output.data);
      let h = new ort.Tensor('float32', new Float32Array((hi - lo) * H), [hi - lo, H]);
      for (let t = 0; t < T; t++) {
        const xt = new Float32Array((hi - lo) * F);
        for (let n = 0; n < hi - lo; n++) for (let f = 0; f < F; f++) xt[n * F + f] = x.data[((lo + n) * T + t) * F + f];
        const o = await body.run({ h, x_t: new ort.Tensor('float32', xt, [hi - lo, F]) });
        add(accs, o, []);
        h = o.h_next;
      }
    }
    compareOutput('scan_seq', got, g);
    compare('scan_seq', accs, '/Scan/body', g);
  }
  console.log(failures === 0 ? 'all layers agree' : failures + ' mismatches');
  process.exit(failures === 0 ? 0 : 1);
}

main().catch((e) => { console.error(e); process.exit(2); });
