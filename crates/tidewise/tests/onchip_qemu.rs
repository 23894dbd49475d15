//! End-to-end check of the board runner: builds each board's firmware with random bytes
//! embedded (refused by the job decoder) and with no job (the measured workload, booted twice
//! under QEMU), and checks what it reports against values computed here.
//!
//! Skipped with a message when `qemu-system-arm` is missing (install it with `ci/qemu.sh`);
//! set `TIDEWISE_REQUIRE_QEMU=1` to make a missing emulator a failure instead.

mod board;
use board::qemu_or_skip;

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use tidewise::onchip::{self, Board, OnchipError, Report};

const RUN_TIMEOUT: Duration = Duration::from_secs(300);

/// Firmware constants mirrored from `boards/common/src/workload.rs`.
const DOT_LEN: usize = 1024;
const DOT_REPS: i64 = 64;
const DOT_SEED: u32 = 2_463_534_242;
const CALIBRATION_LOOPS: u64 = 5_000_000;

/// xorshift32 with the shift triple (13, 17, 5), one of the full-period triples listed in
/// "Xorshift RNGs", Journal of Statistical Software 8(14), 2003 (docs/references.md [27]).
fn xorshift32(mut x: u32) -> u32 {
    x ^= x << 13;
    x ^= x >> 17;
    x ^= x << 5;
    x
}

/// FNV-1a, 32-bit, as specified in "The FNV Non-Cryptographic Hash Algorithm"
/// (IETF Internet-Draft, 2019; year recalled from memory; docs/references.md [30]).
fn fnv1a32(bytes: &[u8]) -> u32 {
    bytes.iter().fold(0x811c_9dc5, |h, &b| {
        (h ^ u32::from(b)).wrapping_mul(0x0100_0193)
    })
}

#[test]
fn host_references_match_published_vectors() {
    // FNV-1a 32-bit test vectors of the FNV draft's test suite ("", "a", "foobar");
    // values recalled from memory.
    assert_eq!(fnv1a32(b""), 0x811c_9dc5);
    assert_eq!(fnv1a32(b"a"), 0xe40c_292c);
    assert_eq!(fnv1a32(b"foobar"), 0xbf9c_f968);
    // xorshift32 (13, 17, 5) has full period 2^32 - 1: it never reaches 0 from a non-zero
    // state and is a bijection, so distinct states stay distinct (property stated in the
    // same paper). Spot-check on a short stretch of the stream.
    let mut x = DOT_SEED;
    let mut seen = std::collections::HashSet::new();
    for _ in 0..10_000 {
        x = xorshift32(x);
        assert_ne!(x, 0);
        assert!(seen.insert(x));
    }
}

/// The operands the firmware fills: `(x >> 21) - 1024` for successive xorshift32 states,
/// first all of `a`, then all of `b`; the dot product exactly, in i64.
fn host_dot() -> i64 {
    let mut x = DOT_SEED;
    let mut next = || {
        x = xorshift32(x);
        i64::from(x >> 21) - 1024
    };
    let a: Vec<i64> = (0..DOT_LEN).map(|_| next()).collect();
    let b: Vec<i64> = (0..DOT_LEN).map(|_| next()).collect();
    assert!(a.iter().chain(&b).all(|v| (-1024..=1023).contains(v)));
    a.iter().zip(&b).map(|(x, y)| x * y).sum()
}

/// A job file of `len` deterministic bytes in `dir`.
fn job_file(dir: &Path, name: &str, len: usize, seed: u32) -> (PathBuf, Vec<u8>) {
    let mut x = seed;
    let bytes: Vec<u8> = (0..len)
        .map(|_| {
            x = xorshift32(x);
            (x >> 24) as u8
        })
        .collect();
    let path = dir.join(name);
    std::fs::write(&path, &bytes).unwrap();
    (path, bytes)
}

fn build_timed(board: &Board, job: &Path) -> PathBuf {
    let started = Instant::now();
    let elf = onchip::build(board, &onchip::default_boards_dir(), job)
        .unwrap_or_else(|e| panic!("build failed: {e}"));
    println!(
        "{}: build with a {}-byte job took {:.1} s",
        board.name,
        std::fs::metadata(job).map(|m| m.len()).unwrap_or(0),
        started.elapsed().as_secs_f64()
    );
    elf
}

fn run(board: &Board, elf: &Path) -> (String, Report) {
    let out = onchip::run(board, elf, RUN_TIMEOUT).unwrap_or_else(|e| panic!("run failed: {e}"));
    let report = Report::parse(&out).unwrap_or_else(|e| panic!("bad report: {e}\n{out}"));
    (out, report)
}

fn end_to_end(name: &str) {
    if !qemu_or_skip(name) {
        return;
    }
    let board = onchip::board(name).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let (job_a, bytes_a) = job_file(dir.path(), "a.job", 777, 0x1234_5678);
    let (job_b, _) = job_file(dir.path(), "b.job", 0, 1);

    let elf_a = build_timed(&board, &job_a);
    // A second build with another job must leave the first image in place.
    let elf_b = build_timed(&board, &job_b);
    assert_ne!(elf_a, elf_b);

    // Random bytes are not a job: the firmware reports them, refuses them and exits with
    // its reserved status.
    match onchip::run(&board, &elf_a, RUN_TIMEOUT) {
        Err(OnchipError::RunFailed { status, stdout, .. }) => {
            assert_eq!(status, "exit status 2", "{stdout}");
            let report = Report::parse(&stdout).unwrap();
            let job = report.require("job").unwrap();
            assert_eq!(job.u64("bytes").unwrap(), bytes_a.len() as u64);
            assert_eq!(job.u64("fnv1a32").unwrap(), u64::from(fnv1a32(&bytes_a)));
            let error = report.require("error").unwrap();
            assert!(
                error.get("msg").is_some_and(|m| m.contains("not a job")),
                "{stdout}"
            );
            assert!(!report.is_complete());
        }
        other => panic!("a random blob must be refused, got {other:?}"),
    }
    let fp_a = onchip::footprint(&elf_a).unwrap();
    let rodata = fp_a.section(".rodata").expect(".rodata");
    assert!(
        rodata.size >= bytes_a.len() as u64,
        "the job lives in .rodata"
    );

    // With no job the firmware runs its measured workload.
    let (out1, report) = run(&board, &elf_b);
    let (out2, _) = run(&board, &elf_b);
    // Under -icount the whole run is deterministic, instruction counts included.
    assert_eq!(out1, out2, "two runs of the same image differ");
    assert!(report.is_complete(), "{out1}");
    let job = report.require("job").unwrap();
    assert_eq!(job.u64("bytes").unwrap(), 0);
    assert_eq!(job.u64("fnv1a32").unwrap(), u64::from(fnv1a32(b"")));

    let info = report.require("board").unwrap();
    assert_eq!(info.get("name"), Some(board.name));
    assert_eq!(info.u64("clock_hz").unwrap(), u64::from(board.clock_hz));

    // The calibration loop is `subs`/`bne`, two instructions per iteration. Outside the loop
    // the measurement adds only the two counter reads and one short SysTick handler per wrap
    // (a few tens of instructions, read off the disassembly), and the conversion rounds to
    // whole ticks. Both bounds are instruction counts, not times.
    let resolution = board.instructions(1);
    let calib = report.require("calib").unwrap();
    let expect = calib.u64("expect_instr").unwrap();
    assert_eq!(expect, 2 * CALIBRATION_LOOPS);
    let ticks = calib.u64("ticks").unwrap();
    let instr = calib.u64("instr").unwrap();
    assert_eq!(instr, board.instructions(ticks));
    assert!(instr + resolution >= expect, "{instr} < {expect}");
    assert!(
        instr <= expect + 2 * resolution + 200,
        "{instr} >> {expect}"
    );
    let period = 1u64 << 16;
    let wraps = calib.u64("wraps").unwrap();
    assert!(
        wraps == ticks / period || wraps == ticks / period + 1,
        "{wraps} wraps in {ticks} ticks"
    );
    assert!(wraps >= 2, "the calibration must cross SysTick wraps");

    let dot = report.workload("dot_i16").unwrap();
    assert_eq!(dot.u64("n").unwrap(), DOT_LEN as u64);
    assert_eq!(dot.i64("reps").unwrap(), DOT_REPS);
    let expected = host_dot();
    assert_eq!(dot.i64("result").unwrap(), expected);
    assert_eq!(
        dot.i64("total").unwrap(),
        i64::from((expected * DOT_REPS) as i32)
    );
    let dot_ticks = dot.u64("ticks").unwrap();
    let dot_instr = dot.u64("instr").unwrap();
    assert!(dot_ticks > 0);
    assert_eq!(dot_instr, board.instructions(dot_ticks));
    let macs = dot.u64("macs").unwrap();
    assert_eq!(macs, DOT_LEN as u64 * DOT_REPS as u64);

    // The image's section headers against the linker's own bounds, read by the firmware.
    let fp = onchip::footprint(&elf_b).unwrap();
    board.check_fits(&fp).unwrap();
    let layout = report.require("layout").unwrap();
    for (key, section) in [
        ("text_bytes", ".text"),
        ("rodata_bytes", ".rodata"),
        ("data_bytes", ".data"),
        ("bss_bytes", ".bss"),
        ("uninit_bytes", ".uninit"),
    ] {
        let size = fp.section(section).map_or(0, |s| s.size);
        assert_eq!(layout.u64(key).unwrap(), size, "{section}");
    }
    // The dot product keeps both operand arrays (2 x 1024 x 2 bytes) on the stack.
    let stack = report.require("stack").unwrap();
    let peak = stack.u64("peak_bytes").unwrap();
    assert!(peak >= 2 * DOT_LEN as u64 * 2, "stack peak {peak}");
    assert!(peak < stack.u64("detectable_bytes").unwrap());
    assert!(
        fp.ram_bytes + peak <= board.ram_bytes,
        "statics {} + stack {peak} exceed {} bytes of RAM",
        fp.ram_bytes,
        board.ram_bytes
    );

    println!(
        "{}: dot_i16 {} MACs: {} instructions, {:.3} per MAC; calibration {} for {} expected",
        board.name,
        macs,
        dot_instr,
        dot_instr as f64 / macs as f64,
        instr,
        expect
    );
    println!(
        "{}: flash {} B (code {}, const {}, data {}), static RAM {} B, stack peak {} B",
        board.name,
        fp.flash_bytes,
        fp.code_bytes,
        fp.rodata_bytes,
        fp.data_bytes,
        fp.ram_bytes,
        peak
    );
    for s in &fp.sections {
        println!(
            "{}:   {:<14} 0x{:08x} {:>7} B {:?}",
            board.name, s.name, s.address, s.size, s.class
        );
    }
}

#[test]
fn mps2_an386_end_to_end() {
    end_to_end("mps2-an386");
}

#[test]
fn microbit_end_to_end() {
    end_to_end("microbit");
}

#[test]
fn emulator_failures_are_reported() {
    if !qemu_or_skip("emulator_failures_are_reported") {
        return;
    }
    let board = onchip::board("microbit").unwrap();
    let dir = tempfile::tempdir().unwrap();
    let garbage = dir.path().join("garbage.elf");
    std::fs::write(&garbage, b"this is not a firmware image").unwrap();
    match onchip::run(&board, &garbage, RUN_TIMEOUT) {
        Err(OnchipError::RunFailed { status, .. }) => assert_ne!(status, "exit status 0"),
        other => panic!("expected a failed run, got {other:?}"),
    }
    // A zero timeout stops the emulator before it could even boot.
    let (job, _) = job_file(dir.path(), "t.job", 0, 1);
    let elf = build_timed(&board, &job);
    match onchip::run(&board, &elf, Duration::ZERO) {
        Err(OnchipError::Timeout { timeout, .. }) => assert_eq!(timeout, Duration::ZERO),
        other => panic!("expected a timeout, got {other:?}"),
    }
}
