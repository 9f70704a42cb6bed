#!/usr/bin/env bash
# vitals against ONNX Runtime (CPU) on a breadth of standard architectures,
# in one run: time per image of `vitals check` (every statistics hook on,
# the whole command) with the load time cancelled by differencing two sample
# counts, (t(B items) − t(A items)) / (B − A), against ONNX Runtime's
# inference time per image (onnxruntime-node pinned in bench/ort, 2 intra-op
# threads, all graph optimisations, session creation left out).
#
# Models: bench/gen/export.py --breadth (torchvision 0.14, untrained
# weights, 224×224 but SSDLite at 320×320), exported into $VITALS_BREADTH_DIR
# (default /tmp/vitals-breadth, outside the repository) when missing. Batch
# 8, except SSDLite, whose export takes one image a run (no batch axis).
# At the end, SSDLite's outputs (detections: boxes, scores, labels) are
# compared with ONNX Runtime's on its first 4 images (bench/detectcheck).
#
# Usage: bench/breadth.sh [model ...]   (default: all twelve)
# With SPLIT=1 a last column splits vitals' time (bench/hookcost over the
# first B images, batch 8, best of REPS, the first batch a warm-up left out):
# the executor with an empty hook, and with the statistics hook.
# Environment: A, B (sample counts, default 8 and 40), REPS (best of, default
# 2; the best t(A) and the best t(B) are differenced), SPLIT, VITALS (a
# vitals binary to time instead of building this tree's, e.g. an older build
# for a before/after table), VITALS_BREADTH_DIR (the models),
# VITALS_BREADTH_TMP (the run's binaries and scratch files; default a fresh
# directory per run, so two runs at once do not overwrite each other's).
set -euo pipefail
cd "$(dirname "$0")/.."
A=${A:-8}
B=${B:-40}
REPS=${REPS:-2}
BATCH=8
DIR=${VITALS_BREADTH_DIR:-/tmp/vitals-breadth}
TMPD=${VITALS_BREADTH_TMP:-$(mktemp -d /tmp/vitals-breadth-run.XXXXXX)}
mkdir -p "$TMPD"
PY=/usr/bin/python3
all=(efficientnet_b0 mobilenet_v3_large mnasnet1_0 deeplabv3_mobilenet_v3 regnet_y_800mf densenet121
	convnext_tiny swin_t googlenet inception_v3 resnet50 ssdlite)
models=("$@")
[ ${#models[@]} -eq 0 ] && models=("${all[@]}")

missing=()
for m in "${models[@]}"; do
	[ -f "$DIR/$m.onnx" ] && [ -f "$DIR/$m.npy" ] || missing+=("$m")
done
if [ ${#missing[@]} -gt 0 ]; then
	"$PY" bench/gen/export.py --breadth "$DIR" "${missing[@]}"
fi
if [ ! -d bench/ort/node_modules/onnxruntime-node ]; then
	(cd bench/ort && ONNXRUNTIME_NODE_INSTALL=skip npm install --no-audit --no-fund --silent)
fi
if [ -n "${VITALS:-}" ]; then
	cp "$VITALS" "$TMPD/vitals"
else
	go build -o "$TMPD/vitals" ./cmd/vitals
fi
go build -o "$TMPD/detectcheck" ./bench/detectcheck
[ -n "${SPLIT:-}" ] && go build -o "$TMPD/hookcost" ./bench/hookcost

# seconds of one whole `vitals check` over the first $2 items of model $1
vitals_time() {
	local m=$1 n=$2 batch=(--batch $BATCH) t0 t1 rc
	[ "$m" = ssdlite ] && batch=()
	t0=$(date +%s.%N)
	set +e
	"$TMPD/vitals" check "$DIR/$m.onnx" --data "$DIR/$m.npy" "${batch[@]}" --samples "$n" --format json >/dev/null 2>"$TMPD/err.txt"
	rc=$?
	set -e
	t1=$(date +%s.%N)
	if [ $rc -gt 1 ]; then
		echo "vitals check failed on $m:" >&2
		cat "$TMPD/err.txt" >&2
		exit 1
	fi
	awk -v a="$t0" -v b="$t1" 'BEGIN {printf "%.4f", b - a}'
}

echo "machine: $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2- | sed 's/^ //'), $(nproc) cores"
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
echo "batch $BATCH (SSDLite 1), vitals: (best t($B) − best t($A)) / $((B - A)) images, best of $REPS"
echo
if [ -n "${SPLIT:-}" ]; then
	echo "| model | vitals check ms/image | ONNX Runtime ms/image | vitals / ORT | executor ms/image: empty hook / statistics hook |"
	echo "|---|---|---|---|---|"
else
	echo "| model | vitals check ms/image | ONNX Runtime ms/image | vitals / ORT |"
	echo "|---|---|---|---|"
fi
for m in "${models[@]}"; do
	best_a=1e18
	best_b=1e18
	best_o=1e18
	mode=()
	[ "$m" = ssdlite ] && mode=(item)
	for r in $(seq "$REPS"); do
		ta=$(vitals_time "$m" "$A")
		tb=$(vitals_time "$m" "$B")
		o=$(cd bench/ort && node run.js "$DIR/$m.onnx" "$DIR/$m.npy" $BATCH "$B" 2 1 "${mode[@]}" | sed 's/.*=//')
		best_a=$(awk -v a="$best_a" -v b="$ta" 'BEGIN {print (b < a) ? b : a}')
		best_b=$(awk -v a="$best_b" -v b="$tb" 'BEGIN {print (b < a) ? b : a}')
		best_o=$(awk -v a="$best_o" -v b="$o" 'BEGIN {print (b < a) ? b : a}')
	done
	# the best time of each sample count, then their difference: the best of
	# the per-round differences would favour a round whose short run was slowed
	best_v=$(awk -v a="$best_a" -v b="$best_b" -v n=$((B - A)) 'BEGIN {printf "%.2f", (b - a) * 1000 / n}')
	split=""
	if [ -n "${SPLIT:-}" ] && [ "$m" != ssdlite ]; then
		hc=$("$TMPD/hookcost" -model "$DIR/$m.onnx" -data "$DIR/$m.npy" -batch $BATCH -samples "$B" -reps "$REPS" -terse)
		split=" $(echo "$hc" | awk -F' / ' '{split($2, s, " "); printf "%s / %s |", $1, s[1]}')"
	elif [ -n "${SPLIT:-}" ]; then
		split=" – |"
	fi
	printf '| %s | %s | %s | %s |%s\n' "$m" "$best_v" "$best_o" "$(awk -v a="$best_v" -v b="$best_o" 'BEGIN {printf "%.2f×", a / b}')" "$split"
done
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"

for m in "${models[@]}"; do
	if [ "$m" = ssdlite ]; then
		echo
		echo "SSDLite outputs against ONNX Runtime (first 4 images):"
		(cd bench/ort && node outputs.js "$DIR/ssdlite.onnx" "$DIR/ssdlite.npy" 4 "$TMPD/ort.json")
		"$TMPD/detectcheck" -model "$DIR/ssdlite.onnx" -data "$DIR/ssdlite.npy" -ort "$TMPD/ort.json" -items 4
	fi
done
