#!/usr/bin/env bash
# Installs what the emulated-board checks need: QEMU's Arm system emulator and the two
# Cortex-M Rust targets. Idempotent and quiet when everything is already present.
# Usage: bash ci/qemu.sh
set -euo pipefail

log() { printf 'ci/qemu.sh: %s\n' "$*" >&2; }

bash "$(dirname "$0")/apt-install.sh" qemu-system-arm qemu-system-arm "QEMU (Arm system emulation)"

. "$(dirname "$0")/lib.sh"

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
