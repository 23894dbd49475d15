//! A sweep split over a 4-task Slurm array job (`demo-data/slurm/sweep-array.sh`, submitted
//! with `sbatch --wait --array=0-3`), merged with `tidewise merge`, equals the same sweep run
//! here, run for run (all but `timing`).
//!
//! Needs the one-node cluster of `ci/slurm/up.sh` (run as root; it installs Slurm when
//! missing). When it cannot start, the test is skipped with the reason, unless
//! `TIDEWISE_REQUIRE_SLURM=1`, which makes that a failure (CI sets it).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::Value;
use tidewise::sweep::{self, store, Options, Sweep};

mod cluster;
use cluster::repo;

const BIN: &str = env!("CARGO_BIN_EXE_tidewise");
const JOB_TIMEOUT: Duration = Duration::from_secs(900);

/// Invented demo: a pump-monitor learner, 2 roundings x 4 seeds = 8 runs.
const BASE: &str = "[data]\nsource = \"pump\"\nsamples = 120\n[net]\nhidden = [8]\n[rule]\nwarmup_epochs = 0\n[run]\nepochs = 2\n";
const GRID: &str =
    "\"fixed.rounding\" = [\"nearest\", \"stochastic\"]\n\"run.seed\" = [1, 2, 3, 4]\n";

fn runs(dir: &Path) -> BTreeMap<u64, Value> {
    let mut out = BTreeMap::new();
    let scan = store::scan(&dir.join(store::RUNS), |l| {
        assert!(
            out.insert(l.index as u64, store::without_timing(&l.record))
                .is_none(),
            "index {} twice in {}",
            l.index,
            dir.display()
        );
    })
    .unwrap();
    assert_eq!(scan.partial, 0, "cut line in {}", dir.display());
    out
}

fn task_logs(work: &Path) -> String {
    let mut s = String::new();
    if let Ok(entries) = std::fs::read_dir(work) {
        for e in entries.flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            if name.starts_with("tidewise-sweep-") {
                s.push_str(&format!(
                    "--- {name}\n{}\n",
                    std::fs::read_to_string(e.path()).unwrap_or_default()
                ));
            }
        }
    }
    s
}

#[test]
fn array_job_shards_merge_into_the_local_sweep() {
    if !cluster::slurm_or_skip("sweep_slurm") {
        return;
    }
    // Jobs run as root on this machine and see this folder; every path handed to them is
    // absolute.
    let tmp = tempfile::Builder::new()
        .prefix("tidewise-slurm-")
        .tempdir_in("/tmp")
        .unwrap();
    let work = std::fs::canonicalize(tmp.path()).unwrap();
    let spec = work.join("spec.toml");
    let grid = work.join("grid.toml");
    let out = work.join("sweep-out");
    std::fs::write(&spec, BASE).unwrap();
    std::fs::write(&grid, GRID).unwrap();
    let script = std::fs::canonicalize(repo().join("demo-data/slurm/sweep-array.sh")).unwrap();

    let mut child = Command::new("sbatch")
        .args(["--wait", "--array=0-3", "--job-name=tidewise-sweep-test"])
        .arg(format!("--chdir={}", work.display()))
        .arg(&script)
        .env("TIDEWISE", BIN)
        .env("SPEC", &spec)
        .env("GRID", &grid)
        .env("OUT", &out)
        .env_remove("SHARDS")
        .current_dir(&work)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("sbatch");
    let start = Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        if start.elapsed() > JOB_TIMEOUT {
            child.kill().ok();
            Command::new("scancel")
                .arg("--name=tidewise-sweep-test")
                .status()
                .ok();
            panic!(
                "array job not finished after {JOB_TIMEOUT:?}; task logs:\n{}",
                task_logs(&work)
            );
        }
        std::thread::sleep(Duration::from_millis(200));
    };
    let o = child.wait_with_output().unwrap();
    assert!(
        status.success(),
        "sbatch --wait: {status}\n{}\n{}\ntask logs:\n{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr),
        task_logs(&work)
    );
    eprintln!(
        "array job of 4 shards took {:.1} s",
        start.elapsed().as_secs_f64()
    );

    // Each shard holds exactly its slice.
    let shards: Vec<PathBuf> = (0..4).map(|k| out.join(format!("shard-{k}"))).collect();
    for (k, d) in shards.iter().enumerate() {
        let r = runs(d);
        let idx: Vec<u64> = r.keys().copied().collect();
        assert_eq!(idx, vec![k as u64, k as u64 + 4], "shard {k}");
    }
    let merged = out.join("merged");
    let o = Command::new(BIN)
        .arg("merge")
        .args(&shards)
        .arg("--out")
        .arg(&merged)
        .output()
        .unwrap();
    assert!(
        o.status.success(),
        "merge: {}",
        String::from_utf8_lossy(&o.stderr)
    );

    // The same sweep here.
    let local = work.join("local");
    let sw = Sweep::load(&spec, &grid, &[]).unwrap();
    let done = sweep::run_sweep(&sw, &local, &Options::default(), &|_| {}).unwrap();
    assert_eq!(done.ran, 8);
    let (a, b) = (runs(&merged), runs(&local));
    assert_eq!(a.len(), 8);
    for (i, r) in &b {
        assert_eq!(a.get(i), Some(r), "run {i} differs between Slurm and here");
    }
    assert_eq!(a, b);
}
