#!/usr/bin/env bash
# Wait for a Slurm job (or every task of an array job) to finish, polling
# every 0.5 s, and exit with the highest task exit code, as `sbatch --wait`
# does (a task ended by a signal, a time limit or scancel counts as 1).
#
#   id=$(sbatch --parsable --array=0-3 job.sh)
#   ci/slurm/wait.sh "$id"                # or: ci/slurm/wait.sh --timeout 300 "$id"
#
# `sbatch --wait` polls after 2, 10, 42, 74, ... s on the test cluster; this
# returns within 0.5 s of the last task. Exits 124 when --timeout seconds
# (default 600) pass first, 1 when the job is unknown. Prints one line per
# task record (job id, array task, state, exit code) to stderr at the end.
set -euo pipefail

timeout=600
poll=0.5
while (($#)); do
    case "$1" in
        --timeout)
            [[ "${2:-}" =~ ^[0-9]+$ ]] || { echo "wait.sh: --timeout needs whole seconds, got '${2:-}'" >&2; exit 2; }
            timeout="$2"
            shift 2
            ;;
        -h | --help)
            sed -n '2,12p' "$0"
            exit 0
            ;;
        -*)
            echo "wait.sh: unknown option '$1' (allowed: --timeout SECONDS)" >&2
            exit 2
            ;;
        *) break ;;
    esac
done
(($# == 1)) || { echo "usage: wait.sh [--timeout SECONDS] JOBID" >&2; exit 2; }
job="${1%%;*}" # `sbatch --parsable` may print "id;cluster"
[[ "$job" =~ ^[0-9]+$ ]] || { echo "wait.sh: job id must be a number, got '$1'" >&2; exit 2; }

finished_state() {
    case "$1" in
        COMPLETED | FAILED | CANCELLED | TIMEOUT | NODE_FAIL | PREEMPTED | BOOT_FAIL | DEADLINE | OUT_OF_MEMORY) return 0 ;;
        *) return 1 ;;
    esac
}

deadline=$((SECONDS + timeout))
while :; do
    if ! records="$(scontrol show job -o "$job" 2>&1)"; then
        echo "wait.sh: job $job: $records" >&2
        exit 1
    fi
    all_done=1
    worst=0
    summary=""
    while IFS= read -r line; do
        [[ -n "$line" ]] || continue
        state="$(sed -n 's/.* JobState=\([A-Z_]*\).*/\1/p' <<<"$line")"
        exit_code="$(sed -n 's/.* ExitCode=\([0-9]*\):\([0-9]*\).*/\1 \2/p' <<<"$line")"
        id="$(sed -n 's/^JobId=\([0-9]*\).*/\1/p' <<<"$line")"
        task="$(sed -n 's/.* ArrayTaskId=\([^ ]*\).*/\1/p' <<<"$line")"
        summary+="  job $id task ${task:--} $state exit ${exit_code/ /:}"$'\n'
        if ! finished_state "$state"; then
            all_done=0
            continue
        fi
        read -r code sig <<<"${exit_code:-0 0}"
        if ((sig != 0)) || [[ "$state" == CANCELLED || "$state" == TIMEOUT || "$state" == NODE_FAIL ]]; then
            ((code > 1)) || code=1
        fi
        ((code > worst)) && worst=$code
    done <<<"$records"
    if ((all_done)); then
        printf '%s' "$summary" >&2
        exit "$worst"
    fi
    if ((SECONDS >= deadline)); then
        echo "wait.sh: job $job not finished after ${timeout}s:" >&2
        printf '%s' "$summary" >&2
        exit 124
    fi
    sleep "$poll"
done
