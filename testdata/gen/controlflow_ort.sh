#!/bin/sh
# Checks testdata/controlflow's golden statistics with ONNX Runtime
# (npm onnxruntime-node 1.30.0, the version bench/ort uses) and writes the
# per-layer comparison to testdata/controlflow/ort_check.txt. Needs Node 20,
# npm and /usr/bin/python3 with onnx. Only for regenerating testdata.
set -e
repo=$(cd "$(dirname "$0")/../.." && pwd)
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
cp "$repo/bench/ort/package.json" "$tmp/"
# --ignore-scripts: the CPU library ships in the package; its install script
# only fetches optional GPU libraries
(cd "$tmp" && npm install --no-audit --no-fund --ignore-scripts >/dev/null)
/usr/bin/python3 "$repo/testdata/gen/controlflow_models.py" --exposed "$tmp/models"
cp "$repo/testdata/gen/controlflow_ort.js" "$tmp/"
node "$tmp/controlflow_ort.js" "$repo" "$tmp/models" | tee "$repo/testdata/controlflow/ort_check.txt"
