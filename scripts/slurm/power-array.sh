#!/usr/bin/env bash
# One task of a Slurm job array computing its share of a `construe power` design study.
#
# Every task runs `construe power ... --shard K/N` with K = its place in the array (1-based) and
# N = the array's size, and writes its replicates into the cache, which must be on a file
# system every node sees (CONSTRUE_CACHE). Cache entries are written whole (temporary file,
# then rename) and named by content, so tasks never disturb each other, and a task that was
# killed or preempted can simply be rerun: it recomputes only the replicates it had not
# finished. When every task is done, one unsharded run finds all replicates in the cache and
# writes the report (it computes whatever a failed task left out).
#
# Submit (the array must be a contiguous range, e.g. 0-15; any number of tasks works):
#
#   export CONSTRUE_CACHE=/shared/project/construe-cache
#   export STUDY="model.yaml spec.yaml --n 300,600,1000 --replicates 500 --seed 7 --out /shared/project/study"
#   job=$(sbatch --parsable --array=0-15 --export=ALL scripts/slurm/power-array.sh)
#   sbatch --dependency=afterany:$job --export=ALL --wrap "construe power $STUDY"
#
# The merge job depends on `afterany`, so it also runs when a task failed, and computes that
# task's missing replicates itself. Every process must be given the same study arguments
# (model, spec, sizes, replicates, seed): they are what the replicates' cache keys are made of.
#
#SBATCH --job-name=construe-power
#SBATCH --cpus-per-task=2
#SBATCH --time=04:00:00
#SBATCH --output=construe-power-%A_%a.log
set -euo pipefail

: "${STUDY:?set STUDY to the arguments of construe power (model, spec, --n, --replicates, --seed, --out)}"
: "${CONSTRUE_CACHE:?set CONSTRUE_CACHE to a cache folder on a shared file system}"
: "${SLURM_ARRAY_TASK_ID:?run this script as a job array: sbatch --array=0-15 ...}"

construe=${CONSTRUE_BIN:-construe}
first=${SLURM_ARRAY_TASK_MIN:-0}
count=${SLURM_ARRAY_TASK_COUNT:?this Slurm does not set SLURM_ARRAY_TASK_COUNT}
k=$((SLURM_ARRAY_TASK_ID - first + 1))
# One rayon thread per allocated CPU: results do not depend on it, only the speed does.
export RAYON_NUM_THREADS=${SLURM_CPUS_PER_TASK:-1}

# shellcheck disable=SC2086 # STUDY is a list of arguments
exec "$construe" power $STUDY --shard "$k/$count"
