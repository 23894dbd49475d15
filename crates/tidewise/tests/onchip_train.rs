//! The same learner on emulated microcontrollers: each board trains small jobs (a subset of
//! the UCI optical digits, a rule with learned feedback and backpropagation) and must agree
//! with the host's fixed arm in every per-epoch figure and in the final parameters, bit for
//! bit. The board is QEMU's emulation of the Armv7E-M (Cortex-M4) and Armv6-M (Cortex-M0)
//! instruction sets, an implementation independent of the host's x86-64 arithmetic.
//!
//! Skipped with a message when `qemu-system-arm` is missing (install it with `ci/qemu.sh`);
//! set `TIDEWISE_REQUIRE_QEMU=1` to make a missing emulator a failure instead.

mod board;
use board::qemu_or_skip;

use std::path::Path;
use std::process::Command;
use std::time::Duration;

use tidewise::arms::{self, NoObserver};
use tidewise::onchip::{self, job, OnchipError, Outcome, Report};
use tidewise::spec;

const TIMEOUT: Duration = Duration::from_secs(300);

/// 48 training and 24 test digits, a 64-6-10 network, three epochs (one of warm-up for rules
/// that learn their feedback).
const SMALL: &str = "[data]\nsource = \"digits\"\nmax_train = 48\nmax_test = 24\n\
                     [net]\nhidden = [6]\n[rule]\nwarmup_epochs = 1\n[run]\nepochs = 3\nseed = 5\n";

fn train(board: &str, sets: &[&str]) -> (spec::Spec, spec::Design, Outcome) {
    let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
    let (spec, design) = spec::parse(SMALL, &sets).unwrap();
    let board = onchip::board(board).unwrap();
    let outcome = onchip::train(
        &spec,
        &design,
        &board,
        &onchip::default_boards_dir(),
        TIMEOUT,
    )
    .unwrap_or_else(|e| panic!("{}: {e}", board.name));
    (spec, design, outcome)
}

/// Every per-epoch figure and the digest, against the host's fixed arm computed here.
fn check_identical(spec: &spec::Spec, design: &spec::Design, o: &Outcome) {
    let prepared = arms::prepare(spec).unwrap();
    let host = arms::run(spec, design, &prepared, &mut NoObserver, &mut |_, _, _| {}).unwrap();
    let name = o.board.name;
    board::assert_epochs_match(name, o, &host.fixed, prepared.train.len() as u64);
    assert_eq!(o.run.digest.len(), 16);
    assert_eq!(o.run.epochs.len(), usize::from(spec.run.epochs));
    for b in &o.run.epochs {
        assert_eq!(b.tested, prepared.test.len() as u64);
        assert!(b.train_instructions > 0 && b.eval_instructions > 0);
    }
    // curves.csv: the host's columns and values, the board's name in the arm column.
    let csv = o.curves_csv();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next(),
        Some("epoch,arm,train_loss,test_accuracy,saturations,lost_updates,seconds")
    );
    for (line, h) in lines.zip(&host.fixed.epochs) {
        let f: Vec<&str> = line.split(',').collect();
        assert_eq!(f[0], h.epoch.to_string());
        assert_eq!(f[1], name);
        assert_eq!(
            f[2].parse::<f64>().unwrap().to_bits(),
            h.train_loss.to_bits()
        );
        assert_eq!(
            f[3].parse::<f64>().unwrap().to_bits(),
            h.test_accuracy.to_bits()
        );
        assert_eq!(f[4], h.saturations.to_string());
        assert_eq!(f[5], h.lost_updates.to_string());
    }
    // Memory: the arena is exactly the core's tensor figure, and statics plus the measured
    // stack peak fit the board.
    let memory = tidewise::memory::Memory::of(&o.packed.plan, &design.fixed);
    assert_eq!(o.run.learn.arena_bytes, memory.total, "{name}");
    assert_eq!(
        o.run.learn.order_bytes,
        4 * prepared.train.len() as u64,
        "{name}"
    );
    assert!(o.run.static_ram_bytes + o.run.stack_peak_bytes <= o.board.ram_bytes);
    assert_eq!(o.footprint.stack_bytes, o.board.stack_allowance, "{name}");
    assert!(
        o.run.stack_peak_bytes <= o.board.stack_allowance,
        "{name}: stack peak {} B, allowance {} B",
        o.run.stack_peak_bytes,
        o.board.stack_allowance
    );
    assert!(
        o.footprint.flash_bytes - o.packed.bytes.len() as u64 <= o.board.code_allowance,
        "{name}: code {} B, allowance {} B",
        o.footprint.flash_bytes - o.packed.bytes.len() as u64,
        o.board.code_allowance
    );
    let json = o.summary_json(spec, design);
    assert_eq!(json["bit_identical"], true);
    assert_eq!(json["digest"]["board"], host.fixed.digest);
    println!(
        "{name} {} {}: {:.0} instructions per sample, {:.2} per MAC; flash {} B, static RAM {} B, stack {} B",
        design.rule.name(),
        o.run.learn.sizes,
        o.instructions_per_sample(),
        o.instructions_per_mac(),
        o.footprint.flash_bytes,
        o.run.static_ram_bytes,
        o.run.stack_peak_bytes
    );
}

fn both_rules(board: &str) {
    if !qemu_or_skip(board) {
        return;
    }
    // dtp-direct learns its feedback (with a warm-up epoch); bp has no feedback at all.
    for rule in ["rule.name=dtp-direct", "rule.name=bp"] {
        let (spec, design, o) = train(board, &[rule]);
        check_identical(&spec, &design, &o);
    }
}

#[test]
fn mps2_an386_is_bit_identical_to_the_host() {
    both_rules("mps2-an386");
}

#[test]
fn microbit_is_bit_identical_to_the_host() {
    both_rules("microbit");
}

/// Per-layer formats travel in the job (its header carries them) and the board resolves
/// them as the host does: different fractions for each layer's weights, biases and
/// activations (input, hidden, output).
#[test]
fn per_layer_formats_on_the_mps2_an386() {
    if !qemu_or_skip("per_layer_formats_on_the_mps2_an386") {
        return;
    }
    let (spec, design, o) = train(
        "mps2-an386",
        &[
            "rule.name=dtp-direct",
            r#"fixed.forward_weights=["Q1.10", "Q0.13"]"#,
            r#"fixed.biases=["Q2.9", "Q1.12"]"#,
            r#"fixed.activations=["Q1.12", "Q3.10", "Q2.11"]"#,
        ],
    );
    assert!(!design.fixed.layers.is_empty());
    assert_eq!(o.packed.header.fixed, design.fixed);
    check_identical(&spec, &design, &o);
}

#[test]
fn weights_from_a_file_on_mps2_an386() {
    if !qemu_or_skip("weights_from_a_file_on_mps2_an386") {
        return;
    }
    // The float weights a host run ended with start a run of another seed: the host rounds
    // them into the fixed formats (stochastic rounding, on the loading stream) and the job
    // carries the words; the board must then train bit-identically to the host.
    let dir = tempfile::tempdir().unwrap();
    let (spec, design) = spec::parse(SMALL, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let mut last = tidewise::weights::FinalWeights::new(spec.run.epochs);
    let cmp = arms::run(&spec, &design, &prepared, &mut last, &mut |_, _, _| {}).unwrap();
    tidewise::weights::export::write(dir.path(), &design, &last, &cmp).unwrap();
    let init = format!(
        "net.init={}",
        dir.path().join("weights-float.npz").display()
    );
    let (spec, design, o) = train("mps2-an386", &[&init, "run.seed=9"]);
    let learned = tidewise_core::job::learned_params(&o.packed.plan);
    assert_eq!(o.packed.header.init_words as usize, learned);
    check_identical(&spec, &design, &o);
    // The loaded start is not the seeded one: the same seed without the file ends elsewhere.
    let (plain, plain_design) = spec::parse(SMALL, &["run.seed=9".into()]).unwrap();
    let p = arms::prepare(&plain).unwrap();
    let seeded = arms::run(
        &plain,
        &plain_design,
        &p,
        &mut NoObserver,
        &mut |_, _, _| {},
    )
    .unwrap();
    assert_ne!(o.run.digest, seeded.fixed.digest);
}

#[test]
fn eight_bit_words_on_the_microbit() {
    if !qemu_or_skip("eight_bit_words_on_the_microbit") {
        return;
    }
    let (spec, design, o) = train(
        "microbit",
        &[
            "fixed.forward_weights=Q0.7",
            "fixed.feedback_weights=Q0.7",
            "fixed.biases=Q1.6",
            "fixed.activations=Q2.5",
            "fixed.noise=Q2.5",
            "fixed.rate=Q0.7",
        ],
    );
    assert_eq!(o.packed.container_bits, 8);
    check_identical(&spec, &design, &o);
}

#[test]
fn refused_before_building() {
    let microbit = onchip::board("microbit").unwrap();
    let boards = onchip::default_boards_dir();
    // 32-bit forward weights need 32-bit containers, which the microbit build does not offer.
    let (spec, design) = spec::parse(SMALL, &["fixed.forward_weights=Q2.29".into()]).unwrap();
    let err = onchip::train(&spec, &design, &microbit, &boards, TIMEOUT).unwrap_err();
    assert!(
        matches!(
            err,
            OnchipError::Container {
                need: 32,
                max: 16,
                ..
            }
        ),
        "{err}"
    );
    let msg = err.to_string();
    assert!(msg.contains("forward_weights is 32 bits"), "{msg}");
    // A network whose arena cannot fit 16 KiB of RAM: the error names the bytes.
    let (spec, design) = spec::parse(SMALL, &["net.hidden=[200]".into()]).unwrap();
    match onchip::train(&spec, &design, &microbit, &boards, TIMEOUT) {
        Err(OnchipError::JobTooLarge {
            memory: "RAM",
            need,
            have,
            detail,
            ..
        }) => {
            assert_eq!(have, 16 * 1024);
            assert!(need > have);
            assert!(detail.contains("64-200-10"), "{detail}");
        }
        other => panic!("expected a RAM refusal, got {other:?}"),
    }
    // The full digits data in 16-bit words (1437 + 360 samples of 64 features, 230 KB) and
    // the firmware's code do not fit the microbit's 256 KiB of flash.
    let (spec, design) = spec::parse(
        SMALL,
        &[
            "data.max_train=0".into(),
            "data.max_test=0".into(),
            "net.hidden=[4]".into(),
        ],
    )
    .unwrap();
    match onchip::train(&spec, &design, &microbit, &boards, TIMEOUT) {
        Err(OnchipError::JobTooLarge {
            memory: "flash",
            need,
            have,
            ..
        }) => assert!(need > have && have == 256 * 1024),
        other => panic!("expected a flash refusal, got {other:?}"),
    }
}

#[test]
fn unknown_board_from_the_command_line() {
    let dir = tempfile::tempdir().unwrap();
    let spec_path = dir.path().join("small.toml");
    std::fs::write(&spec_path, SMALL).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_tidewise"))
        .args(["onchip"])
        .arg(&spec_path)
        .args(["--board", "nrf52", "--out"])
        .arg(dir.path().join("out"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("unknown board \"nrf52\"; known boards: mps2-an386, microbit"),
        "{stderr}"
    );
}

#[test]
fn a_blob_from_another_version_is_refused_by_the_firmware() {
    if !qemu_or_skip("a_blob_from_another_version_is_refused_by_the_firmware") {
        return;
    }
    let (spec, design) = spec::parse(SMALL, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let packed = job::pack(&spec, &design, &prepared).unwrap();
    let mut blob = packed.bytes.clone();
    blob[4..6].copy_from_slice(&(tidewise_core::job::VERSION + 1).to_le_bytes());
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("future.job");
    std::fs::write(&path, &blob).unwrap();
    let board = onchip::board("microbit").unwrap();
    let elf = onchip::build(&board, &onchip::default_boards_dir(), &path).unwrap();
    match onchip::run(&board, &elf, TIMEOUT) {
        Err(OnchipError::RunFailed { status, stdout, .. }) => {
            assert_eq!(status, "exit status 2");
            let report = Report::parse(&stdout).unwrap();
            let msg = report.require("error").unwrap().get("msg").unwrap_or("");
            assert!(
                msg.starts_with(&format!(
                    "job layout version {}, but this firmware reads version {}",
                    tidewise_core::job::VERSION + 1,
                    tidewise_core::job::VERSION
                )),
                "{msg}"
            );
        }
        other => panic!("expected a refusal, got {other:?}"),
    }
}

#[test]
fn the_command_writes_curves_and_the_summary() {
    if !qemu_or_skip("the_command_writes_curves_and_the_summary") {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let spec_path = dir.path().join("small.toml");
    std::fs::write(&spec_path, SMALL).unwrap();
    let out_dir = dir.path().join("out");
    let out = Command::new(env!("CARGO_BIN_EXE_tidewise"))
        .args(["onchip"])
        .arg(&spec_path)
        .args(["--board", "mps2-an386", "--with", "rule.name=fa", "--out"])
        .arg(&out_dir)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("bit-identical"), "{stdout}");
    let csv = std::fs::read_to_string(out_dir.join("curves.csv")).unwrap();
    assert_eq!(csv.lines().count(), 1 + 3);
    assert!(csv.lines().skip(1).all(|l| l.contains(",mps2-an386,")));
    let json: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out_dir.join("onchip.json")).unwrap()).unwrap();
    assert_eq!(json["bit_identical"], true);
    assert!(json["instructions"]["per_mac"].as_f64().unwrap() > 0.0);
    assert!(json["footprint"]["flash_bytes"].as_u64().unwrap() > 0);
    assert!(Path::new(&out_dir.join("spec.hash")).is_file());
}

/// A firmware built with a thread stack too small for training (2 KiB; the learner needs
/// several) overflows it. The overflow must be caught as a fault below the stack region,
/// before the statics, and reported as a stack overflow: not a hang, a timeout or a wrong
/// result. Both boards use the same arrangement (process stack below the statics).
#[test]
fn a_stack_overflow_is_reported_as_one() {
    if !qemu_or_skip("a_stack_overflow_is_reported_as_one") {
        return;
    }
    // Another seed than the other tests', so this job's image is its own.
    let (spec, design) = spec::parse(SMALL, &["run.seed=11".into()]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let packed = job::pack(&spec, &design, &prepared).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("overflow.job");
    std::fs::write(&path, &packed.bytes).unwrap();
    for name in ["mps2-an386", "microbit"] {
        let mut board = onchip::board(name).unwrap();
        board.stack_allowance = 2048;
        let elf = onchip::build(&board, &onchip::default_boards_dir(), &path).unwrap();
        let fp = onchip::footprint(&elf).unwrap();
        assert_eq!(
            fp.stack_bytes, 2048,
            "{name}: the region the build reserved"
        );
        let region = fp
            .section(onchip::STACK_SECTION)
            .expect("thread stack section");
        assert_eq!(
            region.address, board.ram_origin,
            "{name}: at the start of RAM"
        );
        let err = onchip::run(&board, &elf, TIMEOUT).expect_err("the overflow must fail the run");
        let msg = err.to_string();
        match err {
            OnchipError::StackOverflow {
                stack_bytes,
                sp,
                bottom,
                ..
            } => {
                assert_eq!(stack_bytes, 2048, "{name}");
                assert_eq!(bottom, board.ram_origin, "{name}");
                assert!(sp < bottom, "{name}: sp 0x{sp:x}");
            }
            other => panic!("{name}: expected a stack overflow, got {other:?}"),
        }
        assert!(msg.contains("stack overflow"), "{msg}");
        assert!(msg.contains("2048 bytes"), "{msg}");
        println!("{name}: {msg}");
    }
}
