#!/usr/bin/env bash
# What writing the report costs: `vitals check` on a deep model (torchvision
# Swin-T, random He-initialised weights, 8 seeded Gaussian items, batch 8)
# without --out, with --out (the figures drawn in memory in parallel,
# histogram pages capped) and with --out --all (every histogram page).
# Prints, per configuration, the best of $REPS runs (default 3, the
# configurations alternating) of the wall time and of the CPU time
# (user + system), and the files written. The model is exported once into
# $VITALS_BENCH_DIR (default ~/.cache/vitals-bench) by
# bench/gen/export_deep.py with Debian's python3-torch/torchvision.
#
# Usage: bench/report.sh
set -euo pipefail
cd "$(dirname "$0")/.."
REPS=${REPS:-3}
DIR=${VITALS_BENCH_DIR:-$HOME/.cache/vitals-bench}
PY=/usr/bin/python3
if [ ! -f "$DIR/swin_t.onnx" ]; then
	(cd bench/gen && "$PY" export_deep.py "$DIR")
fi
BIN=$(mktemp -d)
trap 'rm -rf "$BIN"' EXIT
go build -o "$BIN/vitals" ./cmd/vitals
declare -A wall cpu
configs=(none out all)
for c in "${configs[@]}"; do wall[$c]=999999; cpu[$c]=999999; done
for ((r = 0; r < REPS; r++)); do
	for c in "${configs[@]}"; do
		rm -rf "$BIN/out"
		args=()
		case $c in
		out) args=(--out "$BIN/out") ;;
		all) args=(--out "$BIN/out" --all) ;;
		esac
		/usr/bin/time -f "%e %U %S" -o "$BIN/time" "$BIN/vitals" check "$DIR/swin_t.onnx" --data "$DIR/swin_t.npy" --batch 8 "${args[@]}" >/dev/null
		read -r w u s <"$BIN/time"
		t=$(echo "$u + $s" | bc)
		if (($(echo "$w < ${wall[$c]}" | bc))); then wall[$c]=$w; fi
		if (($(echo "$t < ${cpu[$c]}" | bc))); then cpu[$c]=$t; fi
		if [ "$c" != none ] && [ "$r" = 0 ]; then
			echo "$c: $(ls "$BIN/out" | wc -l) files, $(du -sk "$BIN/out" | cut -f1) KiB"
		fi
	done
done
printf '%-22s %8s %8s\n' configuration "wall s" "CPU s"
printf '%-22s %8s %8s\n' "no --out" "${wall[none]}" "${cpu[none]}"
printf '%-22s %8s %8s\n' "--out" "${wall[out]}" "${cpu[out]}"
printf '%-22s %8s %8s\n' "--out --all" "${wall[all]}" "${cpu[all]}"
echo "load average: $(cut -d' ' -f1-3 /proc/loadavg)"
