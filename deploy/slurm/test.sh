#!/usr/bin/env bash
# End-to-end test of the Slurm deployment on a one-node cluster started here:
# installs Debian's slurm-wlm and munge when root with apt (skips with a
# message otherwise), starts munged, slurmctld and slurmd with a minimal
# slurm.conf in a temporary folder, submits a 4-task shard array over the
# demo sample and the merge job after it (submit.sh), waits, and compares
# the merged report.json with a single run's: integers and strings equal,
# other numbers within 1e-12 relative. Stops the daemons it started and
# removes the folder on exit. Exit 0: passed or skipped; 1: failed.
set -euo pipefail
repo="$(cd "$(dirname "$0")/../.." && pwd)"
skip() { echo "slurm test: SKIP: $*"; exit 0; }

if ! command -v slurmctld >/dev/null 2>&1 || ! command -v munged >/dev/null 2>&1; then
  if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null 2>&1; then
    echo "slurm test: installing slurm-wlm and munge"
    (DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurm-wlm munge >/dev/null 2>&1 ||
      (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurm-wlm munge >/dev/null)) ||
      skip "slurm-wlm and munge could not be installed"
  else
    skip "slurm-wlm and munge are not installed and this is not root with apt-get"
  fi
fi
[ "$(id -u)" = "0" ] || skip "the one-node cluster runs its daemons as root"
py=/usr/bin/python3
[ -x "$py" ] || skip "/usr/bin/python3 is needed to compare the reports"

T="$(mktemp -d /tmp/vitals-slurm.XXXXXX)"
pids=()
cleanup() {
  for p in "${pids[@]}"; do kill "$p" 2>/dev/null || true; done
  for p in "${pids[@]}"; do
    for _ in $(seq 50); do kill -0 "$p" 2>/dev/null || break; sleep 0.1; done
    kill -9 "$p" 2>/dev/null || true
  done
  rm -rf "$T"
}
trap cleanup EXIT

host="$(hostname -s)"
base=$((20000 + ($$ % 20000)))
mkdir -p "$T/state" "$T/spool" "$T/parts" "$T/out" "$T/bin"
(cd "$repo" && go build -o "$T/bin/vitals" ./cmd/vitals)

# munge: its own key, socket and files in the temporary folder
dd if=/dev/urandom of="$T/munge.key" bs=1024 count=1 status=none
chmod 600 "$T/munge.key"
munged --force --key-file="$T/munge.key" --socket="$T/munge.sock" --pid-file="$T/munged.pid" \
  --log-file="$T/munged.log" --seed-file="$T/munged.seed"
for _ in $(seq 50); do [ -s "$T/munged.pid" ] && break; sleep 0.1; done
pids+=("$(cat "$T/munged.pid")")

cat > "$T/slurm.conf" <<CONF
ClusterName=vitalstest
SlurmctldHost=$host
SlurmctldPort=$base
SlurmdPort=$((base + 1))
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
AuthInfo=socket=$T/munge.sock
CredType=cred/munge
StateSaveLocation=$T/state
SlurmdSpoolDir=$T/spool
SlurmctldPidFile=$T/slurmctld.pid
SlurmdPidFile=$T/slurmd.pid
SlurmctldLogFile=$T/slurmctld.log
SlurmdLogFile=$T/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SchedulerType=sched/builtin
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
ReturnToService=2
MpiDefault=none
JobCompType=jobcomp/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
MinJobAge=600
NodeName=$host NodeAddr=127.0.0.1 CPUs=$(nproc) State=UNKNOWN
PartitionName=test Nodes=ALL Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$T/slurm.conf"
slurmctld -D -f "$SLURM_CONF" > "$T/slurmctld.out" 2>&1 &
pids+=("$!")
slurmd -D -f "$SLURM_CONF" -N "$host" > "$T/slurmd.out" 2>&1 &
pids+=("$!")

state=""
for _ in $(seq 100); do
  state="$(sinfo -h -o %t 2>/dev/null || true)"
  [ "$state" = "idle" ] && break
  sleep 0.3
done
if [ "$state" != "idle" ]; then
  echo "slurm test: FAIL: the node did not come up (state '$state')"
  tail -n 20 "$T"/slurmctld.log "$T"/slurmd.log "$T"/*.out 2>/dev/null || true
  exit 1
fi

demo="$repo/testdata/demo"
export VITALS_BIN="$T/bin/vitals"
cd "$T"
read -r array merge < <("$repo/deploy/slurm/submit.sh" 4 "$demo/spindle-overdriven.onnx" "$demo/readings.npy" 64 \
  "$T/parts" "$T/out" --labels "$demo/conditions.npy")
echo "slurm test: array job $array (4 shards), merge job $merge"

final=""
for _ in $(seq 300); do
  final="$(scontrol show job "$merge" 2>/dev/null | sed -n 's/.*JobState=\([A-Z_]*\).*/\1/p')"
  case "$final" in COMPLETED|FAILED|CANCELLED|TIMEOUT|NODE_FAIL|OUT_OF_MEMORY) break ;; esac
  # a merge whose dependency can never be met stays PENDING: stop then
  if scontrol show job "$merge" 2>/dev/null | grep -q 'Reason=DependencyNeverSatisfied'; then final=DEPENDENCY; break; fi
  sleep 0.5
done
if [ "$final" != "COMPLETED" ]; then
  echo "slurm test: FAIL: merge job ended $final"
  scontrol show job "$array" || true
  cat "$T"/vitals-*.log 2>/dev/null || true
  exit 1
fi
ls "$T/parts"

# the single run, and the comparison
rc=0
"$VITALS_BIN" check "$demo/spindle-overdriven.onnx" --data "$demo/readings.npy" --batch 64 \
  --labels "$demo/conditions.npy" --gradients=false --format json > "$T/single.json" || rc=$?
[ "$rc" -le 1 ] || { echo "slurm test: FAIL: single run exit $rc"; exit 1; }
"$py" - "$T/single.json" "$T/out/report.json" <<'PY'
import json, sys
def same(p, a, b):
    if isinstance(a, dict):
        assert isinstance(b, dict) and a.keys() == b.keys(), p
        for k in a: same(p + "." + k, a[k], b[k])
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), p
        for i, (x, y) in enumerate(zip(a, b)): same("%s[%d]" % (p, i), x, y)
    elif isinstance(a, float) or isinstance(b, float):
        assert abs(a - b) <= 1e-12 * max(abs(a), abs(b)), "%s: %r vs %r" % (p, a, b)
    else:
        assert a == b, "%s: %r vs %r" % (p, a, b)
a, b = (json.load(open(f)) for f in sys.argv[1:3])
a.pop("version", None); b.pop("version", None)
same("", a, b)
print("slurm test: merged report equals the single run (%d layers, %d findings)" % (len(a["layers"]), len(a["findings"])))
PY
echo "slurm test: PASS"
