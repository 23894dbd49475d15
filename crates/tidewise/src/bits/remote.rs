//! Fixed-arm runs elsewhere: a batch of the search's runs as a sweep (the existing sweep
//! machinery, in this process), or as a Slurm array job of sweep shards.
//!
//! A batch becomes a folder `remote/batch-<hash>` beside the journal, named by the hash of its
//! runs, holding the spec (`spec.toml`, data paths made absolute), a grid (`grid.toml`: every
//! run one point of one zipped axis over the `fixed.*` keys, `run.seed` and
//! `data.split_seed`), and the sweep's folder (`sweep/`, or `shard-K/` per array task). The
//! sweep runs both arms; the fixed arm's results are taken, the float arm's must equal the
//! float run made here bit for bit (or the batch is refused). Rerunning resumes each sweep
//! where it stopped, as sweeps do.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Duration;

use serde_json::Value;

use super::journal::Entry;
use super::point::Point;
use super::runner::Outcome;
use super::seeds::Replicate;
use super::BitsError;
use crate::spec::Spec;
use crate::sweep::{self, store, Sweep};

/// Where fixed-arm runs are made.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Executor {
    /// On this machine's worker threads.
    Local,
    /// Through [`crate::sweep::run_sweep`] (same threads, the sweep's folder and records).
    Sweep,
    /// As a Slurm array job of `tasks` sweep shards, each running `binary sweep ...`.
    Slurm {
        /// The `tidewise` binary the tasks run.
        binary: PathBuf,
        /// Array tasks per batch (at most the batch's runs).
        tasks: usize,
        /// CPUs each task asks for (its `--jobs`).
        cpus: usize,
    },
}

impl Executor {
    /// `local`, `sweep` or `slurm`.
    pub fn name(&self) -> &'static str {
        match self {
            Executor::Local => "local",
            Executor::Sweep => "sweep",
            Executor::Slurm { .. } => "slurm",
        }
    }
}

/// `spec` with its data paths absolute, so it reads the same data from any folder.
pub fn absolute_paths(spec: &Spec) -> Spec {
    let mut s = spec.clone();
    for p in [&mut s.data.path, &mut s.data.images, &mut s.data.labels]
        .into_iter()
        .flatten()
    {
        if let Ok(abs) = std::fs::canonicalize(&*p) {
            *p = abs;
        }
    }
    s
}

fn fnv(text: &str) -> String {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in text.bytes() {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    format!("{h:016x}")
}

/// The grid of a batch: one zipped axis, one point per run.
pub fn grid_text(runs: &[(Point, Replicate)]) -> String {
    let mut keys: Vec<(&'static str, Vec<toml::Value>)> = Vec::new();
    for (i, (p, rep)) in runs.iter().enumerate() {
        let mut vals = p.spec_values();
        vals.push(("run.seed", toml::Value::Integer(rep.seed as i64)));
        vals.push(("data.split_seed", toml::Value::Integer(rep.split as i64)));
        for (j, (k, v)) in vals.into_iter().enumerate() {
            if i == 0 {
                keys.push((k, Vec::new()));
            }
            keys[j].1.push(v);
        }
    }
    let mut t = toml::Table::new();
    t.insert("mode".into(), toml::Value::String("zip".into()));
    for (k, v) in keys {
        t.insert(k.into(), toml::Value::Array(v));
    }
    toml::to_string(&t).unwrap_or_default()
}

const SCRIPT: &str = "#!/bin/bash\n\
# One shard of a tidewise bit-width batch (written by `tidewise bits --executor slurm`).\n\
set -euo pipefail\n\
exec \"$TIDEWISE\" sweep \"$SPEC\" --grid \"$GRID\" --out \"$OUT/shard-$SLURM_ARRAY_TASK_ID\" \\\n\
    --shard \"$SLURM_ARRAY_TASK_ID/$SHARDS\" --jobs \"${SLURM_CPUS_PER_TASK:-1}\"\n";

/// Runs `runs` on `executor` in a batch folder under `dir`; returns their entries.
#[allow(clippy::too_many_arguments)]
pub fn run(
    executor: &Executor,
    dir: Option<&Path>,
    spec: &Spec,
    runs: &[(Point, Replicate)],
    jobs: usize,
    tested: &dyn Fn(Replicate) -> usize,
    float: &dyn Fn(Replicate) -> Option<Outcome>,
) -> Result<Vec<Entry>, BitsError> {
    let dir = dir.ok_or_else(|| {
        BitsError::Options(format!(
            "--executor {}: needs an output folder for its batches",
            executor.name()
        ))
    })?;
    let grid = grid_text(runs);
    let batch = dir.join("remote").join(format!("batch-{}", fnv(&grid)));
    let io = |p: &Path, e: std::io::Error| BitsError::Run(format!("{}: {e}", p.display()));
    std::fs::create_dir_all(&batch).map_err(|e| io(&batch, e))?;
    let batch = std::fs::canonicalize(&batch).map_err(|e| io(&batch, e))?;
    let spec_path = batch.join("spec.toml");
    let grid_path = batch.join("grid.toml");
    let write = |p: &Path, text: &str| {
        crate::io::write_atomic(p, text.as_bytes()).map_err(|e| BitsError::Run(format!("{e:#}")))
    };
    write(&spec_path, &absolute_paths(spec).to_toml())?;
    write(&grid_path, &grid)?;
    let sweep_err =
        |e: sweep::SweepError| BitsError::Run(format!("batch {}: {e}", batch.display()));
    let folders: Vec<PathBuf> = match executor {
        Executor::Local => return Err(BitsError::Run("local runs are not a batch".into())),
        Executor::Sweep => {
            let sw = Sweep::load(&spec_path, &grid_path, &[]).map_err(sweep_err)?;
            let out = batch.join("sweep");
            let opts = sweep::Options {
                jobs: Some(jobs),
                shard: None,
            };
            sweep::run_sweep(&sw, &out, &opts, &|_| {}).map_err(sweep_err)?;
            vec![out]
        }
        Executor::Slurm {
            binary,
            tasks,
            cpus,
        } => {
            let shards = (*tasks).clamp(1, runs.len().max(1));
            let script = batch.join("shard.sh");
            write(&script, SCRIPT)?;
            submit(
                &batch, &script, binary, shards, *cpus, &spec_path, &grid_path,
            )?;
            (0..shards)
                .map(|k| batch.join(format!("shard-{k}")))
                .collect()
        }
    };
    let mut found: Vec<Option<Entry>> = vec![None; runs.len()];
    for f in &folders {
        store::scan(&f.join(store::RUNS), |line| {
            if let (Some(slot), Some(&(p, rep))) = (found.get_mut(line.index), runs.get(line.index))
            {
                let mut e = Entry {
                    point: Some(p),
                    rep,
                    outcome: Outcome {
                        correct: 0,
                        tested: 0,
                        loss: 0.0,
                        saturations: 0,
                        lost_updates: 0,
                        updates: 0,
                    },
                    ranges: None,
                };
                let _ = fill(&mut e, &line.record, tested(rep));
                *slot = Some(e);
            }
        })
        .map_err(sweep_err)?;
    }
    let mut out = Vec::with_capacity(runs.len());
    for (i, e) in found.into_iter().enumerate() {
        let (p, rep) = runs[i];
        let Some(e) = e else {
            return Err(BitsError::Run(format!(
                "batch {}: run {i} ({p}, seed {} split {}) has no result; see the task logs there{}",
                batch.display(),
                rep.seed,
                rep.split,
                log_tail(&batch)
            )));
        };
        if e.outcome.tested == 0 {
            return Err(BitsError::Run(format!(
                "batch {}: run {i} failed or has no results; see its runs.jsonl",
                batch.display()
            )));
        }
        let here = float(rep);
        let there = float_of(folders.as_slice(), i, tested(rep));
        if here.is_some() && there.is_some() && here.map(|o| o.correct) != there {
            return Err(BitsError::Run(format!(
                "batch {}: run {i}: the float arm there got {:?} correct, here {:?}: the runs are not the same computation",
                batch.display(),
                there,
                here.map(|o| o.correct)
            )));
        }
        out.push(e);
    }
    Ok(out)
}

/// The last lines of the batch's first Slurm task log that has any, for error messages.
fn log_tail(batch: &Path) -> String {
    let Ok(entries) = std::fs::read_dir(batch) else {
        return String::new();
    };
    let mut logs: Vec<PathBuf> = entries
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "out"))
        .collect();
    logs.sort();
    for l in logs {
        if let Ok(text) = std::fs::read_to_string(&l) {
            let lines: Vec<&str> = text.lines().collect();
            if !lines.is_empty() {
                let tail = lines[lines.len().saturating_sub(5)..].join("\n");
                return format!(" ({}: {tail})", l.display());
            }
        }
    }
    String::new()
}

/// Fills `e`'s outcome from a sweep record; `Err` if it is not an `ok` run.
fn fill(e: &mut Entry, record: &Value, tested: usize) -> Result<(), ()> {
    if record.get("status").and_then(Value::as_str) != Some("ok") {
        return Err(());
    }
    let fixed = record
        .get("results")
        .and_then(|r| r.get("fixed"))
        .ok_or(())?;
    let f = |k: &str| fixed.get(k).and_then(Value::as_f64).ok_or(());
    let u = |k: &str| fixed.get(k).and_then(Value::as_u64).ok_or(());
    e.outcome = Outcome {
        correct: (f("test_accuracy")? * tested as f64).round() as u32,
        tested: tested as u32,
        loss: f("test_loss")?,
        saturations: u("saturations")?,
        lost_updates: u("lost_updates")?,
        updates: u("updates")?,
    };
    Ok(())
}

/// The float arm's correct count of run `index` in the batch's sweep folders.
fn float_of(folders: &[PathBuf], index: usize, tested: usize) -> Option<u32> {
    let mut out = None;
    for f in folders {
        let _ = store::scan(&f.join(store::RUNS), |line| {
            if line.index == index {
                out = line
                    .record
                    .pointer("/results/float/test_accuracy")
                    .and_then(Value::as_f64)
                    .map(|a| (a * tested as f64).round() as u32);
            }
        });
    }
    out
}

fn submit(
    batch: &Path,
    script: &Path,
    binary: &Path,
    shards: usize,
    cpus: usize,
    spec: &Path,
    grid: &Path,
) -> Result<(), BitsError> {
    let fail = |m: String| BitsError::Run(format!("Slurm batch {}: {m}", batch.display()));
    let o = Command::new("sbatch")
        .arg("--parsable")
        .arg(format!("--array=0-{}", shards - 1))
        .arg(format!("--cpus-per-task={cpus}"))
        .arg("--job-name=tidewise-bits")
        .arg(format!("--chdir={}", batch.display()))
        .arg(format!("--output={}/slurm-%A_%a.out", batch.display()))
        .arg(script)
        .env("TIDEWISE", binary)
        .env("SPEC", spec)
        .env("GRID", grid)
        .env("OUT", batch)
        .env("SHARDS", shards.to_string())
        .output()
        .map_err(|e| fail(format!("cannot run sbatch ({e}); is Slurm installed?")))?;
    if !o.status.success() {
        return Err(fail(format!(
            "sbatch failed: {}",
            String::from_utf8_lossy(&o.stderr).trim()
        )));
    }
    let id = String::from_utf8_lossy(&o.stdout)
        .trim()
        .split(';')
        .next()
        .unwrap_or("")
        .to_string();
    if id.is_empty() {
        return Err(fail("sbatch printed no job id".into()));
    }
    // Poll the queue (sbatch --wait backs off to tens of seconds between checks).
    loop {
        let q = Command::new("squeue")
            .args(["-h", "-o", "%i", "-j", &id])
            .output()
            .map_err(|e| fail(format!("cannot run squeue ({e})")))?;
        let text = String::from_utf8_lossy(&q.stdout);
        if q.status.success() && text.trim().is_empty() {
            return Ok(());
        }
        if !q.status.success() && String::from_utf8_lossy(&q.stderr).contains("Invalid job id") {
            return Ok(());
        }
        std::thread::sleep(Duration::from_millis(300));
    }
}
