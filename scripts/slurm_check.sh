#!/usr/bin/env bash
# Runs the Slurm job-array recipe of docs/CLUSTER.md for real on this
# machine and checks that the merged results.json equals the single run's,
# provenance aside.
#
# Needs root and, when Slurm or MUNGE is missing, apt-get (Debian's
# slurm-wlm and munge packages are installed then). Sets up a single-node
# Slurm in a temporary folder (slurm.conf, a MUNGE key, munged, slurmctld
# and slurmd started here), submits the shard array and the dependent merge
# job, waits, compares, and stops the daemons it started by their process
# ids. Exit status 0 when the results agree, 1 when they differ or a job
# fails, 77 when it cannot run here (not root, no apt-get or package
# archive, or the daemons do not start on this machine).
#
# Usage: scripts/slurm_check.sh [FITAUDIT_BINARY] [SHARDS]
set -euo pipefail

ROOT="$(cd "$(dirname "$0")/.." && pwd)"
BIN="$(realpath "${1:-$ROOT/target/debug/fitaudit}")"
N="${2:-4}"
STUDY="$ROOT/demo-data/cooling.toml"
ARGS=(--replicates 200 --starts 16 --quiet)
T0=$(date +%s)

skip() { echo "slurm_check: SKIPPED: $*"; exit 77; }
say() { echo "slurm_check: $*"; }

[ "$(id -u)" = 0 ] || skip "needs root to install and start Slurm"
[ -x "$BIN" ] || { echo "slurm_check: no fitaudit binary at $BIN (cargo build first)"; exit 1; }

if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null || ! command -v munged >/dev/null; then
    command -v apt-get >/dev/null || skip "Slurm is not installed and apt-get is not available"
    say "installing slurm-wlm and munge from the Debian archive"
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq >/dev/null || skip "apt-get update failed (no package archive reachable?)"
    apt-get install -y -qq slurm-wlm munge >/dev/null || skip "apt-get could not install slurm-wlm and munge"
fi

TMP="$(mktemp -d /tmp/fitaudit-slurm.XXXXXX)"
PIDS=()
cleanup() {
    local pid
    for pid in "${PIDS[@]}"; do
        kill "$pid" 2>/dev/null || true
    done
    for pid in "${PIDS[@]}"; do
        # Wait (bounded) for each daemon we started to go away.
        for _ in $(seq 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
        kill -9 "$pid" 2>/dev/null || true
    done
    if [ "${KEEP_TMP:-0}" != 1 ]; then rm -rf "$TMP"; else say "kept $TMP"; fi
}
trap cleanup EXIT

HOST="$(hostname -s)"
CPUS="$(nproc)"
# Free-looking ports derived from our pid, so parallel runs do not collide.
PORT=$(( 20000 + ($$ % 20000) ))
mkdir -p "$TMP"/{state,spool,munge,key,work}
chmod 755 "$TMP" "$TMP/munge"
chmod 700 "$TMP/key"

# MUNGE with its own key and socket.
dd if=/dev/urandom of="$TMP/key/munge.key" bs=1024 count=1 status=none
chmod 400 "$TMP/key/munge.key"
munged -F --force --key-file="$TMP/key/munge.key" --socket="$TMP/munge/munge.socket" \
    --pid-file="$TMP/munge/munged.pid" --log-file="$TMP/munge/munged.log" \
    --seed-file="$TMP/munge/munged.seed" >"$TMP/munged.out" 2>&1 &
PIDS+=("$!")
for _ in $(seq 50); do [ -S "$TMP/munge/munge.socket" ] && break; sleep 0.1; done
if [ ! -S "$TMP/munge/munge.socket" ]; then
    tail -n 20 "$TMP/munged.out" "$TMP/munge/munged.log" 2>/dev/null || true
    skip "munged did not start on this machine (log above)"
fi

cat > "$TMP/slurm.conf" <<CONF
ClusterName=fitaudit-check
SlurmctldHost=$HOST
SlurmctldPort=$PORT
SlurmdPort=$((PORT + 1))
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$TMP/munge/munge.socket
StateSaveLocation=$TMP/state
SlurmdSpoolDir=$TMP/spool
SlurmctldPidFile=$TMP/slurmctld.pid
SlurmdPidFile=$TMP/slurmd.pid
SlurmctldLogFile=$TMP/slurmctld.log
SlurmdLogFile=$TMP/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
MpiDefault=none
MailProg=/bin/true
ReturnToService=2
JobCompType=jobcomp/none
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
NodeName=$HOST NodeAddr=127.0.0.1 CPUs=$CPUS State=UNKNOWN
PartitionName=check Nodes=$HOST Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$TMP/slurm.conf"

slurmctld -D -i -f "$SLURM_CONF" >"$TMP/slurmctld.out" 2>&1 &
PIDS+=("$!")
slurmd -D -f "$SLURM_CONF" -N "$HOST" >"$TMP/slurmd.out" 2>&1 &
PIDS+=("$!")
for _ in $(seq 120); do
    state="$(sinfo -h -o %t 2>/dev/null || true)"
    case "$state" in idle*|mix*|alloc*) break ;; esac
    sleep 0.5
done
case "$state" in
    idle*|mix*|alloc*) say "single-node Slurm up ($HOST, $CPUS CPUs) after $(( $(date +%s) - T0 )) s" ;;
    *) tail -n 20 "$TMP"/*.out || true; skip "Slurm did not start on this machine (node state '$state'; logs above)" ;;
esac

# The recipe of docs/CLUSTER.md: an array of N shards, then a dependent merge.
W="$TMP/work"
cat > "$W/shards.sbatch" <<JOB
#!/bin/bash
#SBATCH --job-name=fitaudit-shard
#SBATCH --array=1-$N
#SBATCH --cpus-per-task=1
#SBATCH --output=$W/shard-%a.log
"$BIN" audit "$STUDY" ${ARGS[*]} --threads 1 --shard \$SLURM_ARRAY_TASK_ID/$N --out "$W/parts/part-\$SLURM_ARRAY_TASK_ID"
JOB
cat > "$W/merge.sbatch" <<JOB
#!/bin/bash
#SBATCH --job-name=fitaudit-merge
#SBATCH --output=$W/merge.log
"$BIN" merge "$W"/parts/part-* --out "$W/merged" --quiet
JOB
T1=$(date +%s)
ARRAY="$(sbatch --parsable --chdir="$W" "$W/shards.sbatch")"
ARRAY="${ARRAY%%;*}"
MERGE="$(sbatch --parsable --chdir="$W" --dependency=afterok:"$ARRAY" "$W/merge.sbatch")"
MERGE="${MERGE%%;*}"
say "submitted shard array $ARRAY (1-$N) and merge job $MERGE (afterok)"
for _ in $(seq 600); do
    [ -z "$(squeue -h -j "$ARRAY,$MERGE" 2>/dev/null)" ] && break
    sleep 0.5
done
T2=$(date +%s)
if [ ! -f "$W/merged/results.json" ]; then
    echo "slurm_check: FAILED: the merge job wrote no report"
    tail -n 20 "$W"/*.log 2>/dev/null || true
    exit 1
fi
say "array and merge finished in $(( T2 - T1 )) s"

# The single-machine run, then the comparison with provenance removed.
"$BIN" audit "$STUDY" "${ARGS[@]}" --out "$W/single" >/dev/null
strip() { sed '/^  "provenance": {/,/^  },/d' "$1"; }
if diff <(strip "$W/single/results.json") <(strip "$W/merged/results.json") >/dev/null; then
    say "PASSED: merged results.json of $N Slurm shards equals the single run (provenance aside); total $(( $(date +%s) - T0 )) s"
else
    echo "slurm_check: FAILED: merged results.json differs from the single run"
    diff <(strip "$W/single/results.json") <(strip "$W/merged/results.json") | head -20
    exit 1
fi
