#!/usr/bin/env bash
# Submits a vitals check of a large sample to Slurm: an array of N shard
# tasks, then a merge job that starts only if all of them succeed.
#
#   deploy/slurm/submit.sh N MODEL DATA BATCH PARTS_DIR OUT_DIR [extra check flags...]
#
# Prints the two job ids. vitals must be on PATH on the compute nodes, or
# VITALS_BIN set to it; PARTS_DIR and OUT_DIR on a shared file system.
set -euo pipefail
if [ $# -lt 6 ]; then
  sed -n '2,9p' "$0" >&2
  exit 2
fi
N=$1 MODEL=$2 DATA=$3 BATCH=$4 PARTS=$5 OUT=$6
shift 6
here="$(cd "$(dirname "$0")" && pwd)"
mkdir -p "$PARTS" "$OUT"
export VITALS_MODEL="$MODEL" VITALS_DATA="$DATA" VITALS_BATCH="$BATCH" VITALS_PARTS="$PARTS" \
  VITALS_OUT="$OUT" VITALS_SHARDS="$N" VITALS_ARGS="$*"
array=$(sbatch --parsable --array="0-$((N - 1))" --export=ALL "$here/shard.sbatch")
array=${array%%;*}
merge=$(sbatch --parsable --dependency="afterok:$array" --export=ALL "$here/merge.sbatch")
echo "$array $merge"
