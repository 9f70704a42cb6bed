#!/usr/bin/env bash
# vitals' executor against ONNX Runtime (CPU) on the same models, inputs,
# batch and cores, in one run.
#
# Models (exported once into $VITALS_BENCH_DIR, default ~/.cache/vitals-bench,
# by bench/gen/export.py with Debian's python3-torch/torchvision, random
# He-initialised weights): torchvision resnet18 and mobilenet_v2 at 224×224,
# a 4-layer MLP (784-2048-2048-1024-10), a 4-layer transformer encoder
# (d=256, 4 heads, ff=1024, 128 tokens). Input: seeded Gaussian items, 1,000
# per model (8192 for the MLP, whose items take 0.2 ms each): the size of a
# real check, over which the fixed start-up of `vitals check` (reading the
# model, packing weights, the first batch with its first-touch page faults:
# 0.2 s for the MLP to 0.8 s for mobilenet_v2 with 8 items) is spread.
#
# vitals: `vitals check MODEL --data X.npy --batch 8` over every item (every
# statistics hook on; wall time of the whole command, model loading and the
# report included) and, from bench/hookcost, the executor alone with an
# empty hook and with the statistics hook, over the first 64 items (2048
# for the MLP), the first batch of 8 a warm-up left out, and with a hook that
# only takes each output's moments (-floor: what any pass reading the outputs
# after the kernels wrote them costs at least).
# ONNX Runtime: onnxruntime-node (pinned in bench/ort/package.json), 2 intra-op
# threads, sequential, all graph optimisations, inference time only.
# Each figure is the best of $REPS rounds (default 3), the two sides alternating.
#
# Usage: bench/executor.sh [model ...]   (default: all four)
set -euo pipefail
cd "$(dirname "$0")/.."
REPS=${REPS:-3}
BATCH=8
# items for the executor-alone figures: 64, or 2048 for the MLP, whose
# 8-item batches take under a millisecond (64 items gave ±15% between runs)
hookcost_items() { if [ "$1" = mlp ]; then echo 2048; else echo 64; fi; }
# items in NAME.npy (its first axis)
npy_items() {
	"$PY" -c 'import sys, numpy; print(numpy.load(sys.argv[1], mmap_mode="r").shape[0])' "$1"
}
DIR=${VITALS_BENCH_DIR:-$HOME/.cache/vitals-bench}
PY=/usr/bin/python3
models=("$@")
[ ${#models[@]} -eq 0 ] && models=(resnet18 mobilenet_v2 mlp transformer)

if ! "$PY" -c 'import torch, torchvision' 2>/dev/null; then
	apt-get install -y python3-torch python3-torchvision
fi
want_items() { if [ "$1" = mlp ]; then echo 8192; else echo 1000; fi; }
for m in "${models[@]}"; do
	if [ ! -f "$DIR/$m.onnx" ] || [ ! -f "$DIR/$m.npy" ] || [ "$(npy_items "$DIR/$m.npy")" != "$(want_items "$m")" ]; then
		"$PY" bench/gen/export.py "$DIR"
		break
	fi
done
# onnxruntime-node ships its CPU binary in the npm package; its install step
# would also fetch optional CUDA files from outside the npm registry, which
# this machine cannot reach, so that step is skipped.
if [ ! -d bench/ort/node_modules/onnxruntime-node ]; then
	(cd bench/ort && ONNXRUNTIME_NODE_INSTALL=skip npm install --no-audit --no-fund --silent)
fi
go build -o /tmp/vitals-bench-vitals ./cmd/vitals
go build -o /tmp/vitals-bench-hookcost ./bench/hookcost

echo "machine: $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2- | sed 's/^ //'), $(nproc) cores, GOMAXPROCS=${GOMAXPROCS:-$(nproc)}, gemm kernel $(go run ./bench/hookcost -kernel)"
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
echo "batch $BATCH, best of $REPS"
rows=()
for m in "${models[@]}"; do
	SAMPLES=$(npy_items "$DIR/$m.npy")
	best_v=1e18
	best_o=1e18
	for r in $(seq "$REPS"); do
		t0=$(date +%s.%N)
		set +e
		/tmp/vitals-bench-vitals check "$DIR/$m.onnx" --data "$DIR/$m.npy" --batch $BATCH --samples $SAMPLES --format json >/dev/null 2>/tmp/vitals-bench-err.txt
		rc=$?
		set -e
		t1=$(date +%s.%N)
		if [ $rc -gt 1 ]; then
			echo "vitals check failed on $m:" >&2
			cat /tmp/vitals-bench-err.txt >&2
			exit 1
		fi
		v=$(awk -v a="$t0" -v b="$t1" -v n=$SAMPLES 'BEGIN {printf "%.3f", (b - a) * 1000 / n}')
		o=$(cd bench/ort && node run.js "$DIR/$m.onnx" "$DIR/$m.npy" $BATCH $SAMPLES 2 1 | sed 's/.*=//')
		best_v=$(awk -v a="$best_v" -v b="$v" 'BEGIN {print (b < a) ? b : a}')
		best_o=$(awk -v a="$best_o" -v b="$o" 'BEGIN {print (b < a) ? b : a}')
	done
	hc=$(/tmp/vitals-bench-hookcost -model "$DIR/$m.onnx" -data "$DIR/$m.npy" -batch $BATCH -samples "$(hookcost_items "$m")" -reps "$REPS" -terse -floor)
	rows+=("$(printf '| %s | %s | %s | %s | %s | %s |' "$m" "$SAMPLES" "$best_v" "$hc" "$best_o" \
		"$(awk -v a="$best_v" -v b="$best_o" 'BEGIN {printf "%.2f×", a / b}')")")
done
echo
echo "| model | items | vitals check ms/image | executor ms/image: empty hook / statistics hook / moments-only hook | ONNX Runtime ms/image | vitals check / ORT |"
echo "|---|---|---|---|---|---|"
printf '%s\n' "${rows[@]}"
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
