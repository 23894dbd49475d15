//! Two runs writing one output folder at once: the second is refused with exit code 2 and a
//! message naming the folder and its lock file, and the first finishes intact.
//!
//! The exclusion itself is the operating system's advisory whole-file lock (`flock(2)` on
//! Linux, described in the Linux man-pages project's `flock(2)` page), reached through
//! `std::fs::File::try_lock` (Rust standard library, stable since 1.89, 2025). A lock taken
//! by the test through the library stands for a run in progress, so each command's refusal
//! is checked without a race; one check pits two real `sweep` processes against each other.

use std::path::Path;
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

use tidewise::io::{lock_dir, LockError, LOCK_FILE};
use tidewise::sweep::store;

const BIN: &str = env!("CARGO_BIN_EXE_tidewise");

/// Invented demo: short pump-monitor runs.
const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 400\n[net]\nhidden = [6]\n[rule]\nwarmup_epochs = 0\n[run]\nepochs = 2\n";
/// Invented demo: a longer sweep, 12 points of 40 epochs, for two processes to overlap.
const LONG_SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 800\n[net]\nhidden = [8]\n[rule]\nwarmup_epochs = 0\n[run]\nepochs = 40\n";
const GRID: &str =
    "\"fixed.rounding\" = [\"nearest\", \"stochastic\"]\n\"run.seed\" = [1, 2, 3, 4, 5, 6]\n";

/// A temporary folder holding `spec.toml` (with `spec`) and `grid.toml` (with [`GRID`]).
fn setup(spec: &str) -> (tempfile::TempDir, String, String) {
    let tmp = tempfile::tempdir().unwrap();
    let (s, g) = (tmp.path().join("spec.toml"), tmp.path().join("grid.toml"));
    std::fs::write(&s, spec).unwrap();
    std::fs::write(&g, GRID).unwrap();
    let text = |p: &Path| p.to_str().unwrap().to_string();
    (tmp, text(&s), text(&g))
}

fn run(args: &[&str]) -> Output {
    Command::new(BIN).args(args).output().unwrap()
}

/// Checks the refusal of a second writer: exit code 2 and the message of a folder in use.
fn refused(out: &Output, dir: &Path, what: &str) {
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{what}: {stderr}");
    let want = format!(
        "output folder {} is in use by another tidewise run (lock file {}); wait for it or choose another folder",
        dir.display(),
        dir.join(LOCK_FILE).display()
    );
    assert!(stderr.contains(&want), "{what}: {stderr}");
}

#[test]
fn every_writing_command_refuses_a_locked_folder() {
    let (tmp, s, g) = setup(SPEC);
    let (s, g) = (s.as_str(), g.as_str());
    let dir = tmp.path().join("busy");
    let held = lock_dir(&dir).unwrap();
    // A second lock from this process is refused too: the library sees the folder in use.
    match lock_dir(&dir) {
        Err(LockError::InUse { dir: d }) => assert_eq!(d, dir),
        other => panic!("second lock: {other:?}"),
    }
    let d = dir.to_str().unwrap();
    let commands: [(&str, Vec<&str>); 6] = [
        ("train", vec!["train", s, "--out", d]),
        ("sweep", vec!["sweep", s, "--grid", g, "--out", d]),
        ("bits", vec!["bits", s, "--out", d]),
        ("align", vec!["align", s, "--out", d]),
        ("export", vec!["export", s, "--out", d, "--steps", "2"]),
        (
            "onchip",
            vec!["onchip", s, "--board", "mps2-an386", "--out", d],
        ),
    ];
    for (what, args) in &commands {
        refused(&run(args), &dir, what);
    }
    // Nothing was written into the held folder but the lock file.
    let names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names, vec![LOCK_FILE.to_string()]);
    drop(held);
    // Released: the folder takes a run now, and the lock is free again after it.
    let out = run(&["train", s, "--out", d]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    lock_dir(&dir).unwrap();
}

#[test]
fn a_second_sweep_is_refused_and_the_first_completes() {
    let (tmp, s, g) = setup(LONG_SPEC);
    let (s, g) = (s.as_str(), g.as_str());
    let dir = tmp.path().join("sweep");
    let d = dir.to_str().unwrap();
    let mut first = Command::new(BIN)
        .args(["sweep", s, "--grid", g, "--out", d, "--jobs", "1"])
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // The manifest is written after the lock is taken: from then on the folder is held.
    let start = Instant::now();
    while !dir.join(store::MANIFEST).exists() {
        assert!(
            start.elapsed() < Duration::from_secs(60),
            "the first sweep never claimed its folder"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
    let second = run(&["sweep", s, "--grid", g, "--out", d, "--jobs", "1"]);
    let still_running = first.try_wait().unwrap().is_none();
    let first = first.wait_with_output().unwrap();
    assert!(
        first.status.success(),
        "first sweep: {}",
        String::from_utf8_lossy(&first.stderr)
    );
    assert!(
        still_running,
        "the first sweep ended before the second started; the check needs a longer sweep"
    );
    refused(&second, &dir, "second sweep");
    // The first sweep's results are whole: every point once, no cut line.
    let mut indices = Vec::new();
    let scan = store::scan(&dir.join(store::RUNS), |l| indices.push(l.index)).unwrap();
    indices.sort_unstable();
    assert_eq!(indices, (0..12).collect::<Vec<_>>());
    assert_eq!(scan.partial, 0);
    lock_dir(&dir).unwrap();
}
