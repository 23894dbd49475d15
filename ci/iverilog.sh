#!/usr/bin/env bash
# Installs Icarus Verilog (`iverilog`, `vvp`), the simulator the HDL export's outside check
# runs (crates/tidewise/tests/export_hdl.rs). Idempotent and quiet when it is present.
# Usage: bash ci/iverilog.sh
set -euo pipefail
cd "$(dirname "$0")"
bash apt-install.sh iverilog iverilog "Icarus Verilog"
command -v vvp >/dev/null 2>&1 || { echo "ci/iverilog.sh: vvp missing after installing iverilog" >&2; exit 1; }
