#!/bin/sh
# Writes testdata/transformer/ops: one-node models of the transformer
# operators (transformer_ops.py, onnx 1.12 + NumPy) with their outputs from
# ONNX Runtime (npm onnxruntime-node 1.30.0, the version bench/ort uses;
# transformer_ops.js). Needs Node 20, npm and /usr/bin/python3 with onnx.
set -e
repo=$(cd "$(dirname "$0")/../.." && pwd)
out="$repo/testdata/transformer/ops"
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
cp "$repo/bench/ort/package.json" "$tmp/"
# --ignore-scripts: the CPU library ships in the package; its install script
# only fetches optional GPU libraries
(cd "$tmp" && npm install --no-audit --no-fund --ignore-scripts >/dev/null)
rm -rf "$out"
/usr/bin/python3 "$repo/testdata/gen/transformer_ops.py" "$out"
cp "$repo/testdata/gen/transformer_ops.js" "$tmp/"
node "$tmp/transformer_ops.js" "$out"
