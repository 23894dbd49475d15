#!/usr/bin/env bash
# Bring up a single-node Slurm cluster on localhost for tests (run as root).
#
# Idempotent: installs slurm-wlm and munge if missing, creates a munge key if
# missing, writes /etc/slurm/slurm.conf (one node `localhost`, one default
# partition `debug`), starts munged, slurmctld and slurmd if they are not
# running, and waits until `sinfo` reports the node idle. A node left DOWN or
# DRAINED by an earlier run is resumed. On failure the daemons' logs are
# printed and the script exits non-zero.
#
# Environment (all optional):
#   SLURM_UP_TIMEOUT   seconds to wait for the node to become idle (default 60)
#   SLURM_STATE_ROOT   parent of the state, spool and log dirs (default /var/spool/tidewise-slurm)
#
# No systemd is assumed: the daemons are started directly and keep running
# in the background; ci/slurm/down.sh stops them.
set -euo pipefail

TIMEOUT="${SLURM_UP_TIMEOUT:-60}"
ROOT="${SLURM_STATE_ROOT:-/var/spool/tidewise-slurm}"
CONF_DIR=/etc/slurm
CONF="$CONF_DIR/slurm.conf"
NODE=localhost
MUNGE_KEY=/etc/munge/munge.key
MUNGE_RUN=/run/munge
MUNGE_PID="$MUNGE_RUN/munged.pid"
CTLD_PID=/run/slurmctld.pid
SLURMD_PID=/run/slurmd.pid
CTLD_LOG="$ROOT/log/slurmctld.log"
SLURMD_LOG="$ROOT/log/slurmd.log"
MUNGE_LOG=/var/log/munge/munged.log

log() { printf 'slurm-up: %s\n' "$*" >&2; }

dump_logs() {
    local f
    for f in "$MUNGE_LOG" "$CTLD_LOG" "$SLURMD_LOG"; do
        printf '\n===== %s (last 60 lines) =====\n' "$f" >&2
        if [[ -f "$f" ]]; then tail -n 60 "$f" >&2; else echo "(missing)" >&2; fi
    done
    printf '\n===== sinfo =====\n' >&2
    sinfo -N -o '%N %T %E' >&2 2>&1 || true
}

fail() {
    log "ERROR: $*"
    dump_logs
    exit 1
}

# True when the pid stored in file $1 is alive and its command name is $2.
pid_alive() {
    local file="$1" name="$2" pid
    [[ -r "$file" ]] || return 1
    pid="$(tr -dc '0-9' <"$file")"
    [[ -n "$pid" ]] || return 1
    [[ -r "/proc/$pid/comm" ]] || return 1
    [[ "$(cat "/proc/$pid/comm")" == "$name" ]]
}

# True when a process named exactly $1 exists (pid file missing or stale).
name_alive() { pgrep -x "$1" >/dev/null 2>&1; }

running() { pid_alive "$1" "$2" || name_alive "$2"; }

[[ "$(id -u)" -eq 0 ]] || { log "ERROR: must run as root (uid is $(id -u))"; exit 1; }

# Two up.sh at once would start two slurmctld; the loser deletes the pid file.
# The daemons are started with fd 9 closed so that they do not hold the lock.
exec 9>/run/tidewise-slurm-up.lock
flock -w 300 9 || { log "ERROR: another up.sh holds /run/tidewise-slurm-up.lock for 300 s"; exit 1; }

# ---- 1. packages -----------------------------------------------------------
need_pkgs=()
for p in slurm-wlm munge; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q 'install ok installed' \
        || need_pkgs+=("$p")
done
if ((${#need_pkgs[@]})); then
    log "installing ${need_pkgs[*]}"
    export DEBIAN_FRONTEND=noninteractive
    # Update the package lists only when apt does not know the packages yet.
    if ! apt-cache show "${need_pkgs[@]}" >/dev/null 2>&1; then
        log "apt-get update (package lists lack ${need_pkgs[*]})"
        apt-get update -qq
    fi
    if ! apt-get install -y -qq --no-install-recommends "${need_pkgs[@]}" >/dev/null; then
        log "install failed; retrying after apt-get update"
        apt-get update -qq
        apt-get install -y -qq --no-install-recommends "${need_pkgs[@]}" >/dev/null
    fi
fi
for b in munged slurmctld slurmd sinfo sbatch scontrol; do
    command -v "$b" >/dev/null || { log "ERROR: $b not found after install"; exit 1; }
done

# ---- 2. munge --------------------------------------------------------------
id munge >/dev/null 2>&1 || fail "user munge missing (munge package broken?)"
install -d -o munge -g munge -m 0700 /etc/munge
install -d -o munge -g munge -m 0700 /var/lib/munge
install -d -o munge -g munge -m 0700 /var/log/munge
install -d -o munge -g munge -m 0755 "$MUNGE_RUN"
if [[ ! -s "$MUNGE_KEY" ]]; then
    log "creating munge key"
    if command -v mungekey >/dev/null; then
        mungekey --create --keyfile="$MUNGE_KEY" --force
    else
        dd if=/dev/urandom of="$MUNGE_KEY" bs=1024 count=1 status=none
    fi
fi
chown munge:munge "$MUNGE_KEY"
chmod 0400 "$MUNGE_KEY"

if ! running "$MUNGE_PID" munged; then
    log "starting munged"
    # A socket left by a killed munged makes the new one refuse to start.
    rm -f "$MUNGE_RUN/munge.socket.2" "$MUNGE_RUN/munge.socket.2.lock" "$MUNGE_PID"
    runuser -u munge -- munged --pid-file="$MUNGE_PID" --log-file="$MUNGE_LOG" 9>&- \
        || fail "munged did not start"
fi
munge -n </dev/null | unmunge >/dev/null 2>&1 || fail "munge round trip failed"

# ---- 3. slurm.conf ---------------------------------------------------------
# The node's layout as slurmd itself measures it ("slurmd -C"), so that the
# controller and slurmd agree; nproc is the fallback.
hw="$(slurmd -C 2>/dev/null | head -n1 || true)"
field() { sed -n "s/.*[[:space:]]$1=\([0-9]*\).*/\1/p" <<<"$hw"; }
cpus="$(field CPUs)"
[[ -n "$cpus" ]] || cpus="$(nproc --all)"
layout=""
for f in Boards SocketsPerBoard CoresPerSocket ThreadsPerCore; do
    v="$(field "$f")"
    [[ -n "$v" ]] && layout+=" $f=$v"
done
# Slurm sets a node whose RealMemory exceeds what slurmd measures to INVAL;
# stay a little below the kernel's total.
mem_mb="$(awk '/^MemTotal:/ {printf "%d", $2 / 1024 * 0.95}' /proc/meminfo)"
install -d -m 0755 "$CONF_DIR" "$ROOT" "$ROOT/log"
install -d -m 0700 "$ROOT/ctld" "$ROOT/d"

new_conf="$(mktemp)"
trap 'rm -f "$new_conf"' EXIT
cat >"$new_conf" <<EOF
# Written by ci/slurm/up.sh: a single-node test cluster on localhost.
ClusterName=tidewise-ci
SlurmctldHost=localhost
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
MpiDefault=none
MailProg=/bin/true
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SchedulerType=sched/backfill
SchedulerParameters=batch_sched_delay=0
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
ReturnToService=2
StateSaveLocation=$ROOT/ctld
SlurmdSpoolDir=$ROOT/d
SlurmctldPidFile=$CTLD_PID
SlurmdPidFile=$SLURMD_PID
SlurmctldLogFile=$CTLD_LOG
SlurmdLogFile=$SLURMD_LOG
SlurmctldDebug=info
SlurmdDebug=info
SlurmctldTimeout=30
SlurmdTimeout=30
InactiveLimit=0
KillWait=5
# Finished job records are kept a day. 'sbatch --wait' on an array stops
# reading task records at the first unfinished one, so a failed task whose
# record is purged before the whole array ends is missed and sbatch exits 0
# (seen with MinJobAge=60 and a 100 s sibling task). 0 (never purge) is
# documented but 22.05 raises it to 2. The price: sbatch --wait polls after
# 2, 10, 42, 74, ... s. ci/slurm/wait.sh polls every 0.5 s instead.
MinJobAge=86400
MaxJobCount=200000
MaxArraySize=10001
NodeName=$NODE NodeAddr=127.0.0.1 CPUs=$cpus$layout RealMemory=$mem_mb State=UNKNOWN
PartitionName=debug Nodes=$NODE Default=YES MaxTime=INFINITE State=UP
EOF

conf_changed=0
if ! cmp -s "$new_conf" "$CONF"; then
    log "writing $CONF (CPUs=$cpus RealMemory=${mem_mb}M)"
    install -m 0644 "$new_conf" "$CONF"
    conf_changed=1
fi

# ---- 4. daemons ------------------------------------------------------------
stop_pidfile() {
    local file="$1" name="$2" pid
    pid_alive "$file" "$name" || return 0
    pid="$(tr -dc '0-9' <"$file")"
    kill "$pid" 2>/dev/null || true
    for _ in $(seq 1 50); do
        [[ -d "/proc/$pid" ]] || return 0
        sleep 0.1
    done
    kill -9 "$pid" 2>/dev/null || true
}

if ((conf_changed)); then
    # Daemons started from an older conf would disagree with the new one.
    stop_pidfile "$SLURMD_PID" slurmd
    stop_pidfile "$CTLD_PID" slurmctld
    # One running without a pid file cannot be stopped here; ask it to reread.
    if name_alive slurmctld; then
        log "slurmctld runs without a pid file: scontrol reconfigure"
        scontrol reconfigure || fail "scontrol reconfigure failed"
    fi
fi

# Started (again) on each pass of the wait loop below, so that a daemon that
# was shutting down when this script looked is replaced; at most 3 starts each.
ctld_starts=0
slurmd_starts=0
ensure_daemons() {
    if ! running "$CTLD_PID" slurmctld; then
        ((ctld_starts < 3)) || fail "slurmctld keeps exiting (started $ctld_starts times)"
        ctld_starts=$((ctld_starts + 1))
        log "starting slurmctld (cold start: jobs and node states of earlier runs are dropped)"
        slurmctld -c 9>&- || fail "slurmctld did not start"
    fi
    if ! running "$SLURMD_PID" slurmd; then
        ((slurmd_starts < 3)) || fail "slurmd keeps exiting (started $slurmd_starts times)"
        slurmd_starts=$((slurmd_starts + 1))
        log "starting slurmd"
        # -N: the node's name is localhost, not the machine's hostname.
        slurmd -N "$NODE" 9>&- || fail "slurmd did not start"
    fi
}

# ---- 5. wait for the node --------------------------------------------------
# Ready means: the controller answers, the local slurmd answers (the
# controller may still call a node idle for SlurmdTimeout after its slurmd
# died), and the node is idle or running jobs.
deadline=$((SECONDS + TIMEOUT))
resumed=0
while :; do
    ensure_daemons
    state="$(sinfo -h -N -n "$NODE" -o '%T' 2>/dev/null | head -n1 || true)"
    case "$state" in
        idle | mixed | allocated | completing)
            if scontrol ping >/dev/null 2>&1 && scontrol show slurmd >/dev/null 2>&1; then
                break
            fi
            ;;
        down* | drain* | fail*)
            if ((resumed < 3)); then
                log "node is '$state' (stale state?): resuming"
                scontrol update nodename="$NODE" state=resume >/dev/null 2>&1 || true
                resumed=$((resumed + 1))
            fi
            ;;
    esac
    ((SECONDS < deadline)) || fail "node '$NODE' not ready after ${TIMEOUT}s (state: '${state:-no answer}')"
    sleep 0.5
done
log "ready: node $NODE is $state (partition debug, $cpus CPUs, ${mem_mb}M)"
