#!/bin/sh
# measure-memory.sh: peak resident memory of `vitals check` (the figures in
# docs/memory.md).
#   1. a large MLP (default 6 layers of 4096×4096 float32, about 400 MB) whose
#      weights live in an external data file, on 64 synthetic samples;
#   2. the small residual CNN testdata/ref/resnet_tiny.onnx on 1,000 and on
#      10,000 synthetic samples (memory must not grow with the sample).
# Needs GNU time (/usr/bin/time). Usage: scripts/measure-memory.sh [WIDTH LAYERS]
set -eu
cd "$(dirname "$0")/.."
width=${1:-4096}
layers=${2:-6}
work=$(mktemp -d "${TMPDIR:-/tmp}/vitals-memory.XXXXXX")
trap 'rm -rf "$work"' EXIT INT TERM

go build -o "$work/vitals" ./cmd/vitals
go run ./scripts/genbig -out "$work/big" -width "$width" -layers "$layers"

# peak RSS (MiB) and wall seconds of one run; vitals exits 1 on findings, which is fine
measure() {
	/usr/bin/time -f 'RSS %M WALL %e' "$work/vitals" "$@" >/dev/null 2>"$work/time" || true
	if ! grep -q '^RSS ' "$work/time"; then
		cat "$work/time" >&2
		exit 1
	fi
	grep '^RSS ' "$work/time" | tail -n 1 | awk '{printf "%8.0f %8.1f", $2/1024, $4}'
}
mib() { du -m --apparent-size "$1" | cut -f1; }

weights=$(mib "$work/big/big.weights.bin")
printf '%-46s %12s %8s %9s %8s\n' "run" "weights MiB" samples "peak MiB" "wall s"
printf '%-46s %12s %8s %s\n' "big MLP ${layers}x${width}x${width}, external data" "$weights" 64 \
	"$(measure check "$work/big/big.onnx" --samples 64 --batch 32)"
cnn=testdata/ref/resnet_tiny.onnx
cnnw=$(mib "$cnn")
for n in 1000 10000; do
	printf '%-46s %12s %8s %s\n' "resnet_tiny (residual CNN, 3x32x32 input)" "$cnnw" "$n" \
		"$(measure check "$cnn" --samples "$n" --batch 32)"
done
