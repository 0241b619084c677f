#!/usr/bin/env bash
# The Slurm path of `gravgrad batch` exercised for real: a single-node Slurm cluster on localhost
# (munge, slurmctld and slurmd, no cgroups, no accounting database) runs the script written by
# `gravgrad batch --emit slurm` for the demo survey (two flights: a job array of two tasks and the
# dependent merge job); its products must equal, byte for byte, those of a local `gravgrad batch` of
# the same recipe in the same folder. Runs as root on Debian; installs the packages when missing.
#
# Usage: tests/slurm/check_slurm.sh GRAVGRAD_BINARY
set -euo pipefail
cd "$(dirname "$0")/../.."
bin="$(readlink -f "${1:?usage: $0 GRAVGRAD_BINARY}")"
[ -x "$bin" ] || { echo "not an executable: $bin" >&2; exit 2; }

if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null || ! command -v munged >/dev/null; then
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurmctld slurmd munge >/dev/null
fi

work="$(mktemp -d /tmp/gravgrad-slurm.XXXXXX)"
chmod 0755 "$work" # munged runs as the munge user and keeps its files here
pids=()
dump_logs() {
  for f in "$work"/slurmctld.log "$work"/slurmd.log "$work"/jobs/*.log; do
    [ -f "$f" ] || continue
    echo "---- $f"
    tail -n 60 "$f"
  done
}
stop() {
  local rc=$?
  if [ "$rc" -ne 0 ]; then
    echo "Slurm check failed (exit $rc); daemon and job logs follow." >&2
    dump_logs >&2
  fi
  # Stop only the daemons this script started, newest first.
  for ((k = ${#pids[@]} - 1; k >= 0; k--)); do
    kill "${pids[$k]}" 2>/dev/null || true
  done
  for p in "${pids[@]}"; do
    for _ in $(seq 50); do kill -0 "$p" 2>/dev/null || break; sleep 0.1; done
  done
  rm -rf "$work"
  exit "$rc"
}
trap stop EXIT

# Waits up to $1 seconds for the command in the other arguments to succeed.
wait_for() {
  local limit=$1
  shift
  for _ in $(seq "$limit"); do
    if "$@" >/dev/null 2>&1; then return 0; fi
    sleep 1
  done
  echo "timed out after ${limit} s waiting for: $*" >&2
  return 1
}

echo "== munge"
mkdir -p "$work/munge" /run/munge
chown munge:munge "$work/munge" /run/munge
if [ ! -s /etc/munge/munge.key ]; then
  dd if=/dev/urandom of=/etc/munge/munge.key bs=1 count=1024 status=none
fi
chown munge:munge /etc/munge/munge.key
chmod 0400 /etc/munge/munge.key
socket="$work/munge/munge.socket"
runuser -u munge -- munged --socket="$socket" --pid-file="$work/munge/munged.pid" \
  --log-file="$work/munge/munged.log" --seed-file="$work/munge/munged.seed"
wait_for 20 test -s "$work/munge/munged.pid"
pids+=("$(cat "$work/munge/munged.pid")")
wait_for 20 munge --socket="$socket" -n

echo "== slurm.conf for one node on localhost"
node="$(hostname -s)"
cpus="$(nproc)"
mkdir -p "$work/state" "$work/spool" "$work/jobs"
export SLURM_CONF="$work/slurm.conf"
cat >"$SLURM_CONF" <<EOF
ClusterName=gravgrad-ci
SlurmctldHost=$node(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
AuthInfo=socket=$socket
CredType=cred/munge
SlurmctldPort=6817
SlurmdPort=6818
StateSaveLocation=$work/state
SlurmdSpoolDir=$work/spool
SlurmctldPidFile=$work/slurmctld.pid
SlurmdPidFile=$work/slurmd.pid
SlurmctldLogFile=$work/slurmctld.log
SlurmdLogFile=$work/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
MpiDefault=none
ReturnToService=2
SchedulerType=sched/backfill
MinJobAge=600
NodeName=$node NodeAddr=127.0.0.1 CPUs=$cpus State=UNKNOWN
PartitionName=ci Nodes=$node Default=YES MaxTime=INFINITE State=UP
EOF

echo "== slurmctld and slurmd"
slurmctld -D -i -f "$SLURM_CONF" >>"$work/slurmctld.out" 2>&1 &
pids+=("$!")
wait_for 60 scontrol ping
slurmd -D -f "$SLURM_CONF" >>"$work/slurmd.out" 2>&1 &
pids+=("$!")
node_idle() { sinfo -h -n "$node" -o %T | grep -qx idle; }
wait_for 60 node_idle
sinfo

echo "== the demo survey, two flights, through Slurm"
survey="$work/survey"
mkdir -p "$survey/flights"
cp data/demo/recipe.toml data/demo/instrument.toml data/demo/dem.tif "$survey/"
cp data/demo/flights/kestrand-flats-demo-f*.parquet "$survey/flights/"
[ "$(ls "$survey"/flights/*.parquet | wc -l)" -eq 2 ] || { echo "the demo should have two flights" >&2; exit 1; }
"$bin" --threads 1 batch "$survey/recipe.toml" --emit slurm --out-script "$work/jobs.sh" --logs "$work/jobs"
grep -q -- "--array=0-1 " "$work/jobs.sh"
submitted="$(bash "$work/jobs.sh")"
echo "$submitted"
merge_id="$(sed -n 's/.*merge: job \([0-9]\+\).*/\1/p' <<<"$submitted")"
[ -n "$merge_id" ] || { echo "no merge job id in: $submitted" >&2; exit 1; }
merge_state() { scontrol show job "$merge_id" | grep -o 'JobState=[A-Z_]*' | cut -d= -f2; }
merge_over() { case "$(merge_state)" in COMPLETED | FAILED | CANCELLED | TIMEOUT | NODE_FAIL | OUT_OF_MEMORY) return 0 ;; *) return 1 ;; esac; }
wait_for 900 merge_over
state="$(merge_state)"
echo "merge job $merge_id: $state"
squeue || true
[ "$state" = COMPLETED ] || { echo "the merge job did not complete: $state" >&2; exit 1; }
mv "$survey/products" "$work/from-slurm"

echo "== the same recipe by a local gravgrad batch"
"$bin" batch "$survey/recipe.toml" --jobs 2 --logs "$work/local-logs"

echo "== products equal"
cd "$work/from-slurm"
files="$(find . -type f ! -name provenance.json ! -path './logs/*' | sort)"
cd - >/dev/null
local_files="$(cd "$survey/products" && find . -type f ! -name provenance.json ! -path './logs/*' | sort)"
[ "$files" = "$local_files" ] || { echo "different files:"; diff <(echo "$files") <(echo "$local_files"); exit 1; }
for f in $files; do
  cmp "$work/from-slurm/$f" "$survey/products/$f"
done
for f in lines.parquet grids.nc survey.h5; do
  grep -qx "./$f" <<<"$files" || { echo "missing product $f" >&2; exit 1; }
done
echo "$(wc -l <<<"$files") files equal, among them lines.parquet, grids.nc and survey.h5"
echo "== Slurm ok"
