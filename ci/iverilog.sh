#!/usr/bin/env bash
# Installs Icarus Verilog (`iverilog`, `vvp`), the simulator the HDL export's outside check
# runs (crates/tidewise/tests/export_hdl.rs). Idempotent and quiet when it is present.
# Usage: bash ci/iverilog.sh
set -euo pipefail

log() { printf 'ci/iverilog.sh: %s\n' "$*" >&2; }

quietly() {
    local out
    out="$(mktemp)"
    if ! "$@" >"$out" 2>&1; then
        cat "$out" >&2
        rm -f "$out"
        log "failed: $*"
        return 1
    fi
    rm -f "$out"
}

as_root() {
    if [ "$(id -u)" -eq 0 ]; then
        "$@"
    elif command -v sudo >/dev/null 2>&1; then
        sudo "$@"
    else
        log "need root to run: $*"
        return 1
    fi
}

if command -v iverilog >/dev/null 2>&1 && command -v vvp >/dev/null 2>&1; then
    exit 0
fi
if ! command -v apt-get >/dev/null 2>&1; then
    log "iverilog is missing and apt-get is not available; install Icarus Verilog by hand"
    exit 1
fi
install() {
    quietly as_root env DEBIAN_FRONTEND=noninteractive \
        apt-get install -y --no-install-recommends iverilog
}
if ! apt-cache show iverilog >/dev/null 2>&1; then
    log "apt-get update"
    quietly as_root apt-get update
fi
log "installing iverilog"
if ! install 2>/dev/null; then
    log "install failed; apt-get update and retry"
    quietly as_root apt-get update
    install
fi
command -v iverilog >/dev/null 2>&1 || { log "iverilog still not on PATH after install"; exit 1; }
