//! The bit-width search with its fixed-arm runs on the sweep machinery and on a Slurm array
//! job gives the same recommendation as the search made here, step for step.
//!
//! The Slurm test needs the one-node cluster of `ci/slurm/up.sh` (run as root; it installs
//! Slurm when missing). When it cannot start, that test is skipped with the reason, unless
//! `TIDEWISE_REQUIRE_SLURM=1`, which makes it a failure (CI sets it).

use std::path::{Path, PathBuf};

use tidewise::arms;
use tidewise::bits::{self, Executor, Journal, Options, Recommendation};

mod cluster;

const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [6]\n\
    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 3\n";

fn options() -> Options {
    Options {
        tolerance: 5.0,
        search_seeds: 2,
        confirm_seeds: 3,
        rounds: 1,
        jobs: 2,
        scan: false,
        ..Options::default()
    }
}

fn search(executor: Executor, dir: Option<&Path>) -> Recommendation {
    let (spec, design) = tidewise::spec::parse(SPEC, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let opts = options();
    let journal = dir.map(|d| {
        let manifest =
            serde_json::json!({"spec_hash": spec.hash(), "options": opts.manifest_json()});
        Journal::open(d, &manifest).unwrap()
    });
    bits::search(
        &spec,
        &design,
        &prepared,
        &opts,
        executor,
        journal,
        &mut |_| {},
    )
    .unwrap()
}

fn same(a: &Recommendation, b: &Recommendation) {
    assert_eq!(a.point, b.point);
    assert_eq!(a.rounds, b.rounds);
    assert_eq!(a.steps, b.steps);
    assert_eq!(a.runs, b.runs);
}

#[test]
fn sweep_machinery_equals_local() {
    let local = search(Executor::Local, None);
    let dir = tempfile::tempdir().unwrap();
    let swept = search(Executor::Sweep, Some(dir.path()));
    same(&local, &swept);
    // The batches are sweep folders with their runs.
    assert!(
        std::fs::read_dir(dir.path().join("remote"))
            .unwrap()
            .count()
            > 3
    );
}

#[test]
fn slurm_array_jobs_equal_local() {
    if !cluster::slurm_or_skip("bits_slurm") {
        return;
    }
    let local = search(Executor::Local, None);
    // Jobs run as root on this machine and see /tmp; every path handed to them is absolute.
    let tmp = tempfile::Builder::new()
        .prefix("tidewise-bits-slurm-")
        .tempdir_in("/tmp")
        .unwrap();
    let start = std::time::Instant::now();
    let remote = search(
        Executor::Slurm {
            binary: PathBuf::from(env!("CARGO_BIN_EXE_tidewise")),
            tasks: 2,
            cpus: 1,
        },
        Some(tmp.path()),
    );
    eprintln!("Slurm search took {:.1} s", start.elapsed().as_secs_f64());
    same(&local, &remote);
    let batch = std::fs::read_dir(tmp.path().join("remote"))
        .unwrap()
        .flatten()
        .next()
        .unwrap()
        .path();
    assert!(batch.join("shard-0").join("runs.jsonl").exists());
}
