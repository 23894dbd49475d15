#!/usr/bin/env bash
# Installs what the emulated-board checks need: QEMU's Arm system emulator and the two
# Cortex-M Rust targets. Idempotent and quiet when everything is already present.
# Usage: bash ci/qemu.sh
set -euo pipefail

log() { printf 'ci/qemu.sh: %s\n' "$*" >&2; }

# Runs a command with its output kept in a log that is shown only if it fails.
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

if ! command -v qemu-system-arm >/dev/null 2>&1; then
    if ! command -v apt-get >/dev/null 2>&1; then
        log "qemu-system-arm is missing and apt-get is not available; install QEMU (Arm system emulation) by hand"
        exit 1
    fi
    install() {
        quietly as_root env DEBIAN_FRONTEND=noninteractive \
            apt-get install -y --no-install-recommends qemu-system-arm
    }
    # Refresh the package lists only when apt does not know the package yet, or when the
    # install from the lists at hand fails (stale lists).
    if ! apt-cache show qemu-system-arm >/dev/null 2>&1; then
        log "apt-get update"
        quietly as_root apt-get update
    fi
    log "installing qemu-system-arm"
    if ! install 2>/dev/null; then
        log "install failed; apt-get update and retry"
        quietly as_root apt-get update
        install
    fi
    command -v qemu-system-arm >/dev/null 2>&1 || { log "qemu-system-arm still not on PATH after install"; exit 1; }
fi

if ! command -v rustup >/dev/null 2>&1; then
    log "rustup not found; add the targets thumbv7em-none-eabihf and thumbv6m-none-eabi to your toolchain by hand"
    exit 1
fi

installed="$(rustup target list --installed)"
missing=()
for t in thumbv7em-none-eabihf thumbv6m-none-eabi; do
    if ! grep -qx "$t" <<<"$installed"; then
        missing+=("$t")
    fi
done
if [ "${#missing[@]}" -gt 0 ]; then
    log "rustup target add ${missing[*]}"
    quietly rustup target add "${missing[@]}"
fi
