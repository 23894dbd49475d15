#!/usr/bin/env bash
# Stop the single-node test cluster started by ci/slurm/up.sh (run as root).
#
# Stops slurmd, slurmctld and munged by the pids in their pid files, waiting
# up to 5 s for each before SIGKILL. State, spool and logs are kept, so a
# later up.sh resumes from them. Pass --purge to delete them as well.
set -euo pipefail

ROOT="${SLURM_STATE_ROOT:-/var/spool/tidewise-slurm}"

stop() {
    local file="$1" name="$2" pid
    [[ -r "$file" ]] || { echo "slurm-down: $name: no pid file" >&2; return 0; }
    pid="$(tr -dc '0-9' <"$file")"
    if [[ -z "$pid" || ! -r "/proc/$pid/comm" || "$(cat "/proc/$pid/comm")" != "$name" ]]; then
        echo "slurm-down: $name: not running" >&2
        rm -f "$file"
        return 0
    fi
    kill "$pid" 2>/dev/null || true
    for _ in $(seq 1 50); do
        if [[ ! -d "/proc/$pid" ]]; then
            echo "slurm-down: stopped $name (pid $pid)" >&2
            rm -f "$file"
            return 0
        fi
        sleep 0.1
    done
    kill -9 "$pid" 2>/dev/null || true
    echo "slurm-down: killed $name (pid $pid) after 5 s" >&2
    rm -f "$file"
}

stop /run/slurmd.pid slurmd
stop /run/slurmctld.pid slurmctld
stop /run/munge/munged.pid munged

if [[ "${1:-}" == "--purge" ]]; then
    rm -rf "$ROOT"
    echo "slurm-down: removed $ROOT" >&2
fi
