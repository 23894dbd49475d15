#!/usr/bin/env bash
# Link-time proof that the firmware has no path to a panic in job decoding, training and the
# report lines (boards/README.md, "No panics, proven at link time").
#
# For each board and word container it trains a small invented job on the board once (which
# writes the packed job to boards/target/jobs/ and checks it bit-identical to the host), then
# builds that board in release (opt-level 3, fat LTO) with `tidewise-board/panic-proof`, whose
# panic handler calls a function defined nowhere: the link succeeds only if the optimiser
# removed every call to the panic handler. A failed link names the symbol
# `tidewise_panic_path_survived_optimisation`; the surviving sites are the callers of
# `core::panicking::*` in the same build without the feature (llvm-objdump, llvm-addr2line -i).
# Usage: bash ci/panic-proof.sh
set -euo pipefail
cd "$(dirname "$0")/.."
root=$(pwd)

bash ci/qemu.sh
cargo build --quiet --profile ci -p tidewise --bin tidewise
tidewise="$root/target/ci/tidewise"

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

# Word formats per container (every class in that width).
formats_8=(--with fixed.forward_weights=Q0.7 --with fixed.biases=Q1.6
    --with fixed.feedback_weights=Q0.7 --with fixed.activations=Q2.5 --with fixed.noise=Q2.5
    --with fixed.rate=Q0.7)
formats_16=()
formats_32=(--with fixed.forward_weights=Q3.28 --with fixed.biases=Q3.28
    --with fixed.feedback_weights=Q3.28 --with fixed.activations=Q3.28 --with fixed.noise=Q3.28
    --with fixed.accumulator=64)

# The board, its target triple, and the containers it takes (microbit: at most 16 bits).
prove() {
    local board=$1 triple=$2 bits=$3
    local -n formats="formats_$bits"
    printf '\n== %s, %s-bit words: pack and train a small job\n' "$board" "$bits"
    touch "$work/mark"
    sleep 1
    "$tidewise" onchip demo-data/digits.toml --board "$board" --out "$work/$board-$bits" \
        --with data.max_train=12 --with data.max_test=6 --with 'net.hidden=[6]' \
        --with run.epochs=1 --with rule.warmup_epochs=0 "${formats[@]}" >"$work/onchip.log" ||
        { cat "$work/onchip.log"; echo "panic-proof: tidewise onchip failed for $board" >&2; exit 1; }
    local job
    job=$(find boards/target/jobs -name '*.bin' -newer "$work/mark" -printf '%T@ %p\n' |
        sort -n | tail -1 | cut -d' ' -f2)
    if [ -z "$job" ]; then
        echo "panic-proof: tidewise onchip wrote no job file under boards/target/jobs" >&2
        exit 1
    fi
    printf '== %s, %s-bit words: link with the panic handler undefined (%s)\n' \
        "$board" "$bits" "$job"
    # A target directory of its own: the images the onchip runs use are left alone.
    if ! (cd "boards/$board" && CARGO_TARGET_DIR="$root/boards/target/panic-proof" \
        TIDEWISE_JOB="$root/$job" cargo build --quiet --release \
        --features tidewise-board/panic-proof) 2>"$work/link.log"; then
        grep -E 'undefined symbol|referenced by|error' "$work/link.log" | head -20 >&2 || true
        cat >&2 <<EOF

panic-proof: FAILED for $board with $bits-bit words: a panic path survived optimisation in
the firmware (decode, training or report). Find the sites: build the same board and job
without the feature (CARGO_TARGET_DIR=boards/target/panic-proof TIDEWISE_JOB=$job
cargo build --release, from boards/$board), disassemble the image in
boards/target/panic-proof/$triple/release/ with llvm-objdump -d -C, and look up the callers of
core::panicking::* with llvm-addr2line -f -i -C; replace them with non-panicking forms
(.get(), split_at_mut_checked, iterators), keeping the results bit-identical.
EOF
        exit 1
    fi
    local out
    out=$(cat boards/target/panic-proof/"$triple"/release/build/tidewise-"$board"-*/out/job.rs |
        grep -o 'type Word = i[0-9]*' | sort -u | tr '\n' ' ')
    echo "   linked: no panic path (${out% })"
}

prove mps2-an386 thumbv7em-none-eabihf 8
prove mps2-an386 thumbv7em-none-eabihf 16
prove mps2-an386 thumbv7em-none-eabihf 32
prove microbit thumbv6m-none-eabi 8
prove microbit thumbv6m-none-eabi 16
printf '\npanic-proof: every board links with no path to a panic\n'
