#!/usr/bin/env bash
# Compare vitals/gemm with OpenBLAS's SGEMM at 1024³ on this machine, in one run.
#
# OpenBLAS is used through Debian's numpy (python3-numpy, libopenblas0-pthread).
# For this measurement only, OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE (which the
# machines here set, capping OpenBLAS at its Haswell kernels) are unset, so
# OpenBLAS picks its AVX-512 kernels, and OPENBLAS_NUM_THREADS=2.
# The machine is shared, so both sides are timed the same way, as the best of
# 10 single products (Go: -benchtime 1x -count 10 after a warm-up product;
# Python: best of 10 timed matmul calls), in alternating rounds, and the best
# figure of each is kept.
#
# Usage: bench/sgemm_openblas.sh [rounds]   (default 3)
set -euo pipefail
cd "$(dirname "$0")/.."
rounds=${1:-3}
PY=/usr/bin/python3   # Debian's python, where python3-numpy lives

if ! "$PY" -c 'import numpy' 2>/dev/null || ! ls /usr/lib/x86_64-linux-gnu/libopenblas.so.0 >/dev/null 2>&1; then
	apt-get install -y python3-numpy libopenblas0-pthread
fi

go test -c -o /tmp/vitals-gemm.test ./gemm/
echo "load average: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores; $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2-)"

best_go=0
best_ob=0
for r in $(seq "$rounds"); do
	out=$(/tmp/vitals-gemm.test -test.run '^$' -test.bench 'Sgemm/1024$' -test.benchtime 1x -test.count 10)
	g=$(echo "$out" | awk '/^BenchmarkSgemm\/1024/ {for (i=1;i<=NF;i++) if ($i=="GFLOP/s" && $(i-1) > b) b = $(i-1)} END {print b}')
	echo "go test -bench 'Sgemm/1024\$' -benchtime 1x -count 10: best $g GFLOP/s ($(echo "$out" | grep -c '^BenchmarkSgemm/1024') runs)"
	ob=$(env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE OPENBLAS_NUM_THREADS=2 "$PY" bench/sgemm_openblas.py 1024 10)
	echo "$ob"
	o=${ob##*gflops=}
	best_go=$(awk -v a="$best_go" -v b="$g" 'BEGIN {print (b > a) ? b : a}')
	best_ob=$(awk -v a="$best_ob" -v b="$o" 'BEGIN {print (b > a) ? b : a}')
done
echo "best of $rounds rounds at 1024³: vitals/gemm $best_go GFLOP/s, OpenBLAS $best_ob GFLOP/s," \
	"ratio $(awk -v a="$best_go" -v b="$best_ob" 'BEGIN {printf "%.0f%%", 100 * a / b}')"
