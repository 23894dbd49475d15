//! A sweep killed with SIGKILL at twenty pseudo-random moments and resumed each time ends
//! with exactly the runs of an uninterrupted sweep: the same spec hashes, the same results
//! (all but `timing`), no line twice, no cut line.
//!
//! The moments come from xorshift64 with the shift triple (13, 7, 17), one of the full-period
//! triples listed in "Xorshift RNGs", Journal of Statistical Software 8(14), 2003
//! (docs/references.md [27]), so every run of the test draws the same delays (50 to 400 ms after the start of each life; a life
//! that has not written a run by then lives until it has, so every life moves the sweep on).

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::Duration;

use serde_json::Value;
use tidewise::sweep::{self, store, Options, Sweep};

const BIN: &str = env!("CARGO_BIN_EXE_tidewise");

/// Invented demo: short pump-monitor runs, 3 x 2 x 4 = 24 points.
const BASE: &str = "[data]\nsource = \"pump\"\nsamples = 800\n[net]\nhidden = [8]\n[rule]\nwarmup_epochs = 0\n[run]\nepochs = 5\n";
const GRID: &str = "\"fixed.forward_weights\" = [\"Q1.6\", \"Q2.9\", \"Q2.13\"]\n\"fixed.rounding\" = [\"nearest\", \"stochastic\"]\n\"run.seed\" = [1, 2, 3, 4]\n";

fn xorshift64(x: &mut u64) -> u64 {
    *x ^= *x << 13;
    *x ^= *x >> 7;
    *x ^= *x << 17;
    *x
}

/// Complete lines by spec hash (timing removed), with the count of lines and of cut bytes.
fn read(dir: &Path) -> (BTreeMap<String, Value>, usize, u64) {
    let mut by_hash = BTreeMap::new();
    let mut lines = 0;
    let scan = store::scan(&dir.join(store::RUNS), |l| {
        lines += 1;
        by_hash.insert(l.hash, store::without_timing(&l.record));
    })
    .unwrap();
    (by_hash, lines, scan.partial)
}

#[test]
fn killed_and_resumed_sweep_equals_an_uninterrupted_one() {
    let tmp = tempfile::tempdir().unwrap();
    let spec = tmp.path().join("spec.toml");
    let grid = tmp.path().join("grid.toml");
    std::fs::write(&spec, BASE).unwrap();
    std::fs::write(&grid, GRID).unwrap();

    let reference_dir = tmp.path().join("reference");
    let sw = Sweep::load(&spec, &grid, &[]).unwrap();
    sweep::run_sweep(
        &sw,
        &reference_dir,
        &Options {
            jobs: Some(2),
            shard: None,
        },
        &|_| {},
    )
    .unwrap();
    let (reference, ref_lines, _) = read(&reference_dir);
    assert_eq!((reference.len(), ref_lines), (24, 24));

    let dir = tmp.path().join("killed");
    let args = [
        "sweep",
        spec.to_str().unwrap(),
        "--grid",
        grid.to_str().unwrap(),
        "--out",
        dir.to_str().unwrap(),
        "--jobs",
        "2",
    ];
    let mut state = 0x9e37_79b9_7f4a_7c15u64;
    let mut interrupted = 0;
    let mut progress = Vec::new();
    for _ in 0..20 {
        let before = read(&dir).1;
        let mut child = Command::new(BIN)
            .args(args)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        let delay = 50 + xorshift64(&mut state) % 351;
        std::thread::sleep(Duration::from_millis(delay));
        // On a busy machine a life that short may not finish a run: then wait for one more
        // line (or the end), so that every life moves the sweep on and the kills are spread
        // over the whole sweep.
        while read(&dir).1 == before && child.try_wait().unwrap().is_none() {
            std::thread::sleep(Duration::from_millis(5));
        }
        if child.try_wait().unwrap().is_none() {
            interrupted += 1;
        }
        // `Child::kill` sends SIGKILL on Unix.
        child.kill().ok();
        child.wait().unwrap();
        // Whatever the moment, the complete lines are runs of the reference.
        let (got, lines, _) = read(&dir);
        assert_eq!(got.len(), lines, "a run written twice");
        for (h, r) in &got {
            assert_eq!(
                Some(r),
                reference.get(h),
                "run {h} differs from the reference"
            );
        }
        progress.push(lines);
    }
    let o = Command::new(BIN).args(args).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (got, lines, partial) = read(&dir);
    assert_eq!(partial, 0, "cut line left behind");
    assert_eq!(lines, 24, "no line twice");
    assert_eq!(
        got.keys().collect::<BTreeSet<_>>(),
        reference.keys().collect::<BTreeSet<_>>()
    );
    assert_eq!(got, reference);
    let text = std::fs::read_to_string(dir.join(store::RUNS)).unwrap();
    assert!(text.ends_with('\n'));
    eprintln!("{interrupted} of 20 kills hit a running sweep; runs after each kill: {progress:?}");
}
