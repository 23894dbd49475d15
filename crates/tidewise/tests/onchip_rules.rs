//! Every learning rule on both emulated boards, and 32-bit words on the Cortex-M4: each job
//! (a small subset of the UCI optical digits, a 64-5-4-10 network, so every hidden layer's
//! loop of every rule runs) must end with the host's fixed arm's per-epoch loss, accuracy and
//! event counts and its parameter digest, bit for bit. The board is QEMU's emulation of the
//! Armv7E-M (mps2-an386, Cortex-M4) and Armv6-M (microbit, Cortex-M0) instruction sets, an
//! implementation of the arithmetic independent of the host's x86-64.
//!
//! The jobs are kept small (24 training and 8 test samples, two epochs, one of warm-up for
//! rules that learn their feedback) because each one is a firmware build (the job is linked
//! into the image) and an emulated run.
//!
//! Skipped with a message when `qemu-system-arm` is missing (install it with `ci/qemu.sh`);
//! set `TIDEWISE_REQUIRE_QEMU=1` to make a missing emulator a failure instead.

mod board;
use board::qemu_or_skip;

use std::time::{Duration, Instant};

use tidewise::arms::{self, NoObserver};
use tidewise::onchip;
use tidewise::spec;
use tidewise_core::rules::Rule;

const TIMEOUT: Duration = Duration::from_secs(300);

const SMALL: &str = "[data]\nsource = \"digits\"\nmax_train = 24\nmax_test = 8\n\
                     [net]\nhidden = [5, 4]\n[rule]\nwarmup_epochs = 1\n[run]\nepochs = 2\nseed = 3\n";

/// Trains `sets` on `board` and checks every per-epoch figure and the digest against the
/// host's fixed arm, computed here.
fn identical_on(board: &str, sets: &[String]) {
    let started = Instant::now();
    let (spec, design) = spec::parse(SMALL, sets).unwrap();
    let b = onchip::board(board).unwrap();
    let o = onchip::train(&spec, &design, &b, &onchip::default_boards_dir(), TIMEOUT)
        .unwrap_or_else(|e| panic!("{board} {sets:?}: {e}"));
    let prepared = arms::prepare(&spec).unwrap();
    let host = arms::run(
        &spec,
        &design,
        &prepared,
        &mut NoObserver,
        &mut |_, _, _| {},
    )
    .unwrap();
    let what = format!("{board} {}", design.rule.name());
    assert_eq!(o.run.epochs.len(), usize::from(spec.run.epochs), "{what}");
    board::assert_epochs_match(&what, &o, &host.fixed, prepared.train.len() as u64);
    // The run trained: updates happened (a job that did nothing would agree trivially).
    assert!(
        host.fixed.epochs.iter().map(|e| e.updates).sum::<u64>() > 0,
        "{what}: no updates"
    );
    println!(
        "{what} ({} bits): bit-identical, digest {}, {:.1} s",
        o.packed.container_bits,
        o.run.digest,
        started.elapsed().as_secs_f64()
    );
}

fn every_rule(board: &str) {
    if !qemu_or_skip(board) {
        return;
    }
    for rule in Rule::ALL {
        identical_on(board, &[format!("rule.name=\"{}\"", rule.name())]);
    }
}

#[test]
fn every_rule_is_bit_identical_on_the_mps2_an386() {
    every_rule("mps2-an386");
}

#[test]
fn every_rule_is_bit_identical_on_the_microbit() {
    every_rule("microbit");
}

/// 32-bit words in every class and a 64-bit accumulator (the widest design the Cortex-M4
/// build offers), with a rule that learns its feedback through the multi-layer loop.
#[test]
fn thirty_two_bit_words_on_the_mps2_an386() {
    if !qemu_or_skip("thirty_two_bit_words_on_the_mps2_an386") {
        return;
    }
    let sets: Vec<String> = [
        "rule.name=\"dtp-drl\"",
        "fixed.forward_weights=\"Q5.26\"",
        "fixed.feedback_weights=\"Q5.26\"",
        "fixed.biases=\"Q7.24\"",
        "fixed.activations=\"Q7.24\"",
        "fixed.noise=\"Q7.24\"",
        "fixed.rate=\"Q1.30\"",
        "fixed.step=\"Q3.28\"",
        "fixed.accumulator=64",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let (_, design) = spec::parse(SMALL, &sets).unwrap();
    assert_eq!(tidewise_core::backend::container_bits(&design.fixed), 32);
    identical_on("mps2-an386", &sets);
}
