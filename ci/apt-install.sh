#!/usr/bin/env bash
# Installs one Debian package when COMMAND is not on PATH: quiet unless something fails,
# `apt-get update` only when apt does not know the package or an install from stale lists
# fails. Shared by ci/qemu.sh and ci/iverilog.sh.
# Usage: bash ci/apt-install.sh COMMAND PACKAGE "what it is (for the message)"
set -euo pipefail

cmd=$1 pkg=$2 what=$3
log() { printf 'ci/apt-install.sh: %s\n' "$*" >&2; }

. "$(dirname "$0")/lib.sh"

command -v "$cmd" >/dev/null 2>&1 && exit 0
if ! command -v apt-get >/dev/null 2>&1; then
    log "$cmd is missing and apt-get is not available; install $what by hand"
    exit 1
fi
install() {
    quietly as_root env DEBIAN_FRONTEND=noninteractive \
        apt-get install -y --no-install-recommends "$pkg"
}
if ! apt-cache show "$pkg" >/dev/null 2>&1; then
    log "apt-get update"
    quietly as_root apt-get update
fi
log "installing $pkg"
if ! install 2>/dev/null; then
    log "install failed; apt-get update and retry"
    quietly as_root apt-get update
    install
fi
command -v "$cmd" >/dev/null 2>&1 || { log "$cmd still not on PATH after installing $pkg"; exit 1; }
