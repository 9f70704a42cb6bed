#!/usr/bin/env bash
# Runs the shard Job, waits until every index has completed, then the merge
# Job (a Job cannot wait for another by itself). The model and the sample
# must already be on the volume as /work/model.onnx and /work/sample.npy,
# and the image "vitals:latest" must have vitals on PATH.
#
#   deploy/kubernetes/run.sh [TIMEOUT]     (default 24h)
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
timeout="${1:-24h}"
kubectl apply -f "$here/volume.json"
kubectl apply -f "$here/shards.json"
kubectl wait --for=condition=complete --timeout="$timeout" job/vitals-shards
kubectl apply -f "$here/merge.json"
kubectl wait --for=condition=complete --timeout=1h job/vitals-merge
echo "report: /work/report on volume vitals-work"
