#!/bin/sh
# Time of `check` with the backward pass against without it (issue 18's
# target: at most 3x), on the demo MLP (2,000 samples) and on resnet_tiny,
# vgg_bn and mobile_hardswish (64 synthetic samples). Runs
# BenchmarkCheckGradients COUNT times (default 5) and prints, per model, the
# fastest run of each and their ratio (the fastest run is the one least
# disturbed by other processes).
set -e
cd "$(dirname "$0")/.."
COUNT=${COUNT:-5}
go test ./check -run '^$' -bench CheckGradients -benchtime 5x -count "$COUNT" | awk '
/^BenchmarkCheckGradients\// {
	split($1, p, "/"); model = p[2]; kind = p[3]; sub(/-[0-9]+$/, "", kind)
	ns = $3 + 0
	key = model " " kind
	if (!(key in best) || ns < best[key]) best[key] = ns
	models[model] = 1
}
END {
	for (m in models) {
		f = best[m " forward"]; g = best[m " gradients"]
		printf "%-17s forward %8.1f ms  with gradients %8.1f ms  ratio %.2fx\n", m, f / 1e6, g / 1e6, g / f
	}
}'
