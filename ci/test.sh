#!/usr/bin/env bash
# The one test command (the README names it; .ci/run calls it). On a fresh machine of this
# kind it installs what the tests need, then checks formatting, lints, the no_std builds,
# the docs, and runs every test with the emulated boards and the local Slurm required.
# Usage: bash ci/test.sh
set -euo pipefail
cd "$(dirname "$0")/.."

start=$SECONDS
# Each step's heading carries the seconds since the start, so a slow step shows in the log.
step() { printf '\n== [%4ds] %s\n' "$((SECONDS - start))" "$*"; }
trap 'printf "\n== [%4ds] done (exit %s)\n" "$((SECONDS - start))" "$?"' EXIT

step "toolchain components and targets, QEMU, Icarus Verilog, headless Chromium, the Arm C compiler"
rustup component add clippy rustfmt >/dev/null 2>&1 || true
bash ci/qemu.sh
bash ci/iverilog.sh
bash ci/chromium.sh
bash ci/arm-gcc.sh

step "single-node Slurm on localhost"
bash ci/slurm/up.sh

step "formatting"
cargo fmt --all -- --check

step "lints (warnings are errors)"
cargo clippy --workspace --all-targets --profile ci -- -D warnings

step "tidewise-core builds for Cortex-M4F and Cortex-M0 (no_std, no allocator)"
cargo build -p tidewise-core --release --target thumbv7em-none-eabihf
cargo build -p tidewise-core --release --target thumbv6m-none-eabi

step "C interface static library for Cortex-M4F, Cortex-M0 (no_std) and the host"
for t in thumbv7em-none-eabihf thumbv6m-none-eabi; do
    cargo build -p tidewise-c --release --no-default-features --features panic-halt --target "$t"
done
cargo build -p tidewise-c --profile ci

step "documentation (warnings are errors)"
RUSTDOCFLAGS="-D warnings" cargo doc --workspace --no-deps --profile ci

if [ -d fuzz ] && rustup toolchain list | grep -q '^nightly'; then
    step "fuzz targets still compile (nightly)"
    cargo +nightly check --quiet --manifest-path fuzz/Cargo.toml
fi

step "firmware links with no panic path (panic-proof)"
bash ci/panic-proof.sh

step "tests"
export TIDEWISE_REQUIRE_QEMU=1 TIDEWISE_REQUIRE_SLURM=1 TIDEWISE_REQUIRE_IVERILOG=1 TIDEWISE_REQUIRE_CHROMIUM=1
cargo test --workspace --profile ci
