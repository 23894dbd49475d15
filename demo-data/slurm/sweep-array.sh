#!/bin/bash
# Example Slurm array job: one `tidewise sweep` shard per array task.
#
# Invented scenario: a lab sizing the weight and accumulator widths of a small
# on-sensor learning block splits one format sweep over four cluster tasks,
# then merges the shards into one results table. Paths and numbers are
# examples; adapt the #SBATCH lines to your cluster (partition, account, time).
#
# Submit from the directory that holds your spec and grid (each variable below
# may be set at submission; sbatch passes your environment to the job):
#
#   SPEC=$PWD/spec.toml GRID=$PWD/grid.toml OUT=$PWD/sweep-out \
#       sbatch path/to/sweep-array.sh
#
#   # more or fewer shards: override the array on the command line
#   sbatch --array=0-15 path/to/sweep-array.sh
#
#   # wait for every shard and get a non-zero exit if any shard failed
#   # (sbatch reports the highest exit code among the array's tasks)
#   sbatch --wait path/to/sweep-array.sh
#
# When all shards have finished, merge them into one table:
#
#   tidewise merge "$OUT"/shard-*
#
# Re-running one failed shard (here shard 2 of 4) without the others: pass the
# original shard count in SHARDS, since a one-task array has a count of 1:
#
#   SHARDS=4 sbatch --array=2 path/to/sweep-array.sh
#
# Environment (defaults in brackets; relative paths are taken from the
# directory sbatch was run in):
#   TIDEWISE  the tidewise binary                   [tidewise, found on PATH]
#   SPEC      the run spec (TOML)                   [spec.toml]
#   GRID      the grid given to `sweep --grid`      [grid.toml]
#   OUT       folder that receives shard-<id>/      [sweep-out]
#   SHARDS    total shard count                     [the array's task count]
# Each task uses --jobs equal to its --cpus-per-task.
#
# The array must be 0..N-1 with step 1 (the default 0-3 gives shards 0/4 to
# 3/4), so that the task ids are exactly the shard indices.
#
#SBATCH --job-name=tidewise-sweep
#SBATCH --array=0-3
#SBATCH --time=02:00:00
#SBATCH --cpus-per-task=2
#SBATCH --output=tidewise-sweep-%A_%a.out

set -euo pipefail

die() {
    printf 'sweep-array: error: %s\n' "$*" >&2
    exit 2
}

[[ -n "${SLURM_ARRAY_TASK_ID:-}" ]] \
    || die "SLURM_ARRAY_TASK_ID is unset: submit this script with sbatch (it is an array job)"

TIDEWISE="${TIDEWISE:-tidewise}"
SPEC="${SPEC:-spec.toml}"
GRID="${GRID:-grid.toml}"
OUT="${OUT:-sweep-out}"
COUNT="${SHARDS:-$SLURM_ARRAY_TASK_COUNT}"
ID="$SLURM_ARRAY_TASK_ID"

[[ "$COUNT" =~ ^[1-9][0-9]*$ ]] || die "SHARDS='$COUNT' is not a positive whole number"
((ID < COUNT)) || die "array task id $ID is not below the shard count $COUNT (allowed ids: 0..$((COUNT - 1)))"
if [[ -z "${SHARDS:-}" ]]; then
    min="${SLURM_ARRAY_TASK_MIN:-0}"
    max="${SLURM_ARRAY_TASK_MAX:-$((COUNT - 1))}"
    ((min == 0 && max == COUNT - 1)) \
        || die "array runs $min..$max over $COUNT tasks; use --array=0-$((COUNT - 1)) (step 1), or set SHARDS to the total shard count"
fi
command -v "$TIDEWISE" >/dev/null 2>&1 \
    || die "tidewise binary '$TIDEWISE' not found; set TIDEWISE to its path"
[[ -r "$SPEC" ]] || die "spec '$SPEC' is not a readable file (set SPEC)"

mkdir -p "$OUT"
echo "sweep-array: shard $ID/$COUNT on $(hostname) with ${SLURM_CPUS_PER_TASK:-1} cpu(s), job ${SLURM_ARRAY_JOB_ID:-?}_$ID"

exec "$TIDEWISE" sweep "$SPEC" --grid "$GRID" --out "$OUT/shard-$ID" \
    --shard "$ID/$COUNT" --jobs "${SLURM_CPUS_PER_TASK:-1}"
