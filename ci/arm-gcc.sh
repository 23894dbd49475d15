#!/usr/bin/env bash
# Installs what the C example on the emulated board needs: the Debian Arm bare-metal C
# compiler and its C library (newlib). Idempotent and quiet when both are present.
# Usage: bash ci/arm-gcc.sh
set -euo pipefail

log() { printf 'ci/arm-gcc.sh: %s\n' "$*" >&2; }

bash "$(dirname "$0")/apt-install.sh" arm-none-eabi-gcc gcc-arm-none-eabi \
    "the Arm bare-metal C compiler (gcc-arm-none-eabi)"

. "$(dirname "$0")/lib.sh"

# newlib has no command of its own: the compiler finds its libc.a, or names it bare.
if [ "$(arm-none-eabi-gcc -print-file-name=libc.a)" = "libc.a" ]; then
    log "installing libnewlib-arm-none-eabi"
    quietly as_root env DEBIAN_FRONTEND=noninteractive \
        apt-get install -y --no-install-recommends libnewlib-arm-none-eabi
fi
