#!/usr/bin/env bash
# A real test of the job-array recipe on a real scheduler: starts a private single-node Slurm
# (controller and worker on this machine, no authentication daemon, state in a temporary
# folder), submits a 4-task array of a small design study of the demo (power-array.sh), waits,
# merges with one unsharded run, and checks the merged results.json is byte-identical to that
# of an unsharded run with its own cache; then does the same for the bootstrap of one analysis
# (`construe run SPEC --shard K/N`, 40 replicates of the demo). Needs root and the distribution's Slurm
# (`apt-get install -y slurm-wlm`); prints SKIP and exits 0 when Slurm is not installed.
#
#   bash scripts/slurm/selftest.sh [path/to/construe]
set -euo pipefail

repo=$(cd "$(dirname "$0")/../.." && pwd)
construe=$(realpath "${1:-$repo/target/debug/construe}")
if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null || ! command -v sbatch >/dev/null; then
    echo "SKIP: Slurm is not installed (apt-get install -y slurm-wlm)"
    exit 0
fi
[ -x "$construe" ] || { echo "no construe binary at $construe (cargo build first)"; exit 1; }

work=$(mktemp -d /tmp/construe-slurm.XXXXXX)
host=$(hostname -s)
cpus=$(nproc)
port=$((20000 + RANDOM % 20000))
conf=$work/slurm.conf
mkdir -p "$work/state" "$work/spool" "$work/study"
cat >"$conf" <<CONF
ClusterName=construe-selftest
SlurmctldHost=$host
SlurmctldPort=$port
SlurmdPort=$((port + 1))
AuthType=auth/none
CredType=cred/none
SlurmUser=root
SlurmdUser=root
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
JobCompType=jobcomp/none
MpiDefault=none
SwitchType=switch/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
ReturnToService=2
NodeName=$host CPUs=$cpus State=UNKNOWN
PartitionName=selftest Nodes=$host Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF=$conf

pids=()
cleanup() {
    for p in "${pids[@]}"; do kill "$p" 2>/dev/null || true; done
    wait 2>/dev/null || true
    rm -rf "$work"
}
trap cleanup EXIT

slurmctld -D -f "$conf" >"$work/ctld.out" 2>&1 &
pids+=($!)
slurmd -D -f "$conf" >"$work/d.out" 2>&1 &
pids+=($!)
started=$(date +%s)
until sinfo -h -o '%T' 2>/dev/null | grep -qE '^(idle|mixed)'; do
    if (( $(date +%s) - started > 60 )); then
        echo "FAIL: the single-node cluster did not come up in 60 s"; tail -5 "$work"/*.log; exit 1
    fi
    sleep 1
done
echo "slurm: node $host up after $(( $(date +%s) - started )) s"

cp -r "$repo/pipelines/transit/model.yaml" "$repo/pipelines/transit/spec.yaml" "$work/study/"
cd "$work/study"
study="model.yaml spec.yaml --n 200,400 --replicates 6 --seed 5"
export CONSTRUE_BIN=$construe STUDY="$study --out $work/study/sharded" CONSTRUE_CACHE=$work/study/cache
t0=$(date +%s)
job=$(sbatch --parsable --array=0-3 --cpus-per-task=1 --chdir="$work/study" \
    --output="$work/study/task-%a.log" --export=ALL --wait "$repo/scripts/slurm/power-array.sh") || {
    echo "FAIL: the array job failed"; cat "$work"/study/task-*.log; exit 1; }
echo "slurm: array job $job finished in $(( $(date +%s) - t0 )) s"
cat "$work"/study/task-*.log
# shellcheck disable=SC2086
"$construe" power $study --out "$work/study/sharded" --cache "$work/study/cache" 2>merge.log
cat merge.log
grep -q "0 replicates computed, 12 reused" merge.log || { echo "FAIL: the merge recomputed replicates"; exit 1; }
# shellcheck disable=SC2086
"$construe" power $study --out "$work/study/whole" --cache "$work/study/cache-whole" 2>/dev/null
if cmp -s sharded/v1/results.json whole/v1/results.json; then
    echo "PASS: 4-task Slurm array + merge gives results.json identical to the unsharded run"
else
    echo "FAIL: results differ"; diff sharded/v1/results.json whole/v1/results.json | head -20; exit 1
fi

# The bootstrap of one analysis, shared out the same way.
cp -r "$repo/pipelines/transit" "$work/run"
cd "$work/run"
sed -i 's/replicates: 200, seed: 11/replicates: 40, seed: 11/; s|dir: ../../reports|dir: reports|; s/draws: 200/draws: 20/' spec.yaml
"$construe" run spec.yaml --cache "$work/run/cache-whole" >/dev/null 2>&1
t0=$(date +%s)
job=$(sbatch --parsable --array=0-3 --cpus-per-task=1 --chdir="$work/run" --output="$work/run/task-%a.log" --wait \
    --wrap "$construe run spec.yaml --cache $work/run/cache --shard \$((SLURM_ARRAY_TASK_ID + 1))/\$SLURM_ARRAY_TASK_COUNT") || {
    echo "FAIL: the bootstrap array job failed"; cat "$work"/run/task-*.log; exit 1; }
echo "slurm: bootstrap array job $job finished in $(( $(date +%s) - t0 )) s"
grep -h "^shard" "$work"/run/task-*.log
"$construe" run spec.yaml --cache "$work/run/cache" 2>merge.log >/dev/null
cat merge.log
if grep -q "nothing changed since v1" merge.log; then
    echo "PASS: 4-task Slurm array of run --shard + merge gives the unsharded run's report (same fingerprint)"
else
    echo "FAIL: the merged bootstrap differs from the unsharded run"; exit 1
fi
