//! Sweeps: one base spec, a grid of values for some of its keys, every point run through
//! [`crate::arms::run`] on a pool of threads, each finished run appended to `runs.jsonl`.
//!
//! # Grid files
//! A grid maps dotted spec keys to lists (see [`grid`] for the full format):
//!
//! ```toml
//! "fixed.forward_weights" = ["Q1.6", "Q2.13"]
//! "fixed.rounding" = ["nearest", "stochastic"]
//! "run.seed" = [1, 2, 3]          # 2 x 2 x 3 = 12 runs
//!
//! [[zip]]                          # optional: lists walked together, as one axis
//! "fixed.feedback_weights" = ["Q1.6", "Q2.13"]
//! "fixed.biases" = ["Q2.5", "Q3.12"]
//! ```
//!
//! Each point's spec is the base spec file, then the `--with` overrides, then the point's
//! values (applied with [`crate::spec::set_key`], exactly as `--with` would), validated with
//! [`crate::spec::Spec::design`]. Every point is validated before the first run starts.
//!
//! # The sweep folder
//! `sweep.json` names the base spec (its hash) and the grid; a folder of another sweep is
//! refused. `runs.jsonl` holds one JSON line per finished run (see [`store`]): `index` (in the
//! grid), `point`, `spec_hash`, `spec`, `status` (`"ok"` or `"failed"` with `error`),
//! `results` (see [`results_json`]) and `timing` (wall-clock figures, the only fields that
//! differ between reruns). Running the same sweep again skips the runs already there, so a
//! killed sweep resumes where it stopped; `--shard K/N` runs the points `i` with
//! `i % N == K`, and [`merge`] combines the folders of the shards.
//!
//! # Library use
//! [`run_sweep`] is the whole command; [`run_indexed`] and [`run_specs`] are the parallel
//! runner underneath (data prepared once per distinct `[data]` section and shared), for
//! callers that make their own specs.
//!
//! ```no_run
//! use tidewise::sweep::{self, Options, Sweep};
//! let sweep = Sweep::load("spec.toml".as_ref(), "grid.toml".as_ref(), &[])?;
//! let outcome = sweep::run_sweep(&sweep, "out/sweep".as_ref(), &Options::default(), &|_| {})?;
//! println!("{} runs made, {} already there", outcome.ran, outcome.skipped);
//! # Ok::<(), tidewise::sweep::SweepError>(())
//! ```

pub mod grid;
mod heatmap;
pub mod merge;
pub mod report;
pub mod store;

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, OnceLock};
use std::time::Instant;

use rayon::prelude::*;
use serde_json::{json, Value};

use crate::arms::{self, ArmResult, Comparison, NoObserver, Prepared, RunError};
use crate::spec::{self, Design, Spec, SpecError};
pub use grid::{Grid, GridError};
pub use store::Manifest;

/// Why a sweep could not be made.
#[derive(Debug, thiserror::Error)]
pub enum SweepError {
    /// The base spec was refused.
    #[error(transparent)]
    Spec(#[from] SpecError),
    /// The grid was refused.
    #[error(transparent)]
    Grid(#[from] GridError),
    /// One grid point makes an invalid spec.
    #[error("grid point {index} ({point}): {message}")]
    Point {
        /// Index in the grid.
        index: usize,
        /// The point's values.
        point: String,
        /// What is wrong.
        message: String,
    },
    /// A `--shard` or `--jobs` value outside what is allowed.
    #[error("{option} {value}: {allowed}")]
    Option {
        /// The option.
        option: &'static str,
        /// The value given.
        value: String,
        /// What is allowed.
        allowed: String,
    },
    /// The data of a run could not be prepared (the same for every run using it).
    #[error("data of grid point {index}: {message}")]
    Data {
        /// The first point that needed the data.
        index: usize,
        /// The reason.
        message: String,
    },
    /// The output folder cannot take this sweep.
    #[error("{}: {message}", dir.display())]
    Folder {
        /// The folder (or file).
        dir: PathBuf,
        /// What is wrong and what to do.
        message: String,
    },
    /// A file could not be read or written.
    #[error("{}: {source}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// The reason.
        source: std::io::Error,
    },
    /// The output folder is in use by another run, or cannot be locked.
    #[error(transparent)]
    Lock(#[from] crate::io::LockError),
    /// Anything else (thread pool, encoding).
    #[error("{0}")]
    Other(String),
}

impl SweepError {
    pub(crate) fn io(path: &Path, source: std::io::Error) -> SweepError {
        SweepError::Io {
            path: path.to_path_buf(),
            source,
        }
    }
}

/// A slice of the grid: the points `i` with `i % count == index`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shard {
    /// This shard, `0..count`.
    pub index: usize,
    /// Shards in all.
    pub count: usize,
}

impl Shard {
    /// Whether point `i` belongs to the shard.
    pub fn contains(&self, i: usize) -> bool {
        i % self.count == self.index
    }
}

impl std::str::FromStr for Shard {
    type Err = SweepError;
    fn from_str(s: &str) -> Result<Shard, SweepError> {
        let bad = |allowed: &str| SweepError::Option {
            option: "--shard",
            value: s.to_string(),
            allowed: allowed.to_string(),
        };
        let (k, n) = s
            .split_once('/')
            .ok_or_else(|| bad("expected K/N, e.g. 0/4 (shard K of N, K from 0 to N-1)"))?;
        let k: usize = k
            .trim()
            .parse()
            .map_err(|_| bad("K in K/N must be a whole number from 0 to N-1"))?;
        let n: usize = n
            .trim()
            .parse()
            .map_err(|_| bad("N in K/N must be a whole number of at least 1"))?;
        if n == 0 {
            return Err(bad("N in K/N must be at least 1"));
        }
        if k >= n {
            return Err(bad(&format!(
                "K in K/N must be below N: allowed 0 to {}",
                n - 1
            )));
        }
        Ok(Shard { index: k, count: n })
    }
}

/// Most threads a sweep may use.
pub const MAX_JOBS: usize = 1024;

/// How to run a sweep.
#[derive(Clone, Debug, Default)]
pub struct Options {
    /// Threads (default: all cores).
    pub jobs: Option<usize>,
    /// Run only this slice of the grid.
    pub shard: Option<Shard>,
}

/// The thread count `jobs` stands for, checked.
pub fn resolve_jobs(jobs: Option<usize>) -> Result<usize, SweepError> {
    match jobs {
        None => Ok(std::thread::available_parallelism().map_or(1, |n| n.get())),
        Some(j) if (1..=MAX_JOBS).contains(&j) => Ok(j),
        Some(j) => Err(SweepError::Option {
            option: "--jobs",
            value: j.to_string(),
            allowed: format!("allowed: 1 to {MAX_JOBS}"),
        }),
    }
}

/// A base spec and a grid, ready to make the spec of any point.
#[derive(Clone, Debug)]
pub struct Sweep {
    base: toml::Table,
    base_dir: PathBuf,
    base_spec: Spec,
    /// The grid.
    pub grid: Grid,
}

/// Resolves relative data paths of `spec` against `base`, as [`spec::load`] does.
fn resolve_paths(spec: &mut Spec, base: &Path) {
    for p in [
        &mut spec.data.path,
        &mut spec.data.images,
        &mut spec.data.labels,
    ]
    .into_iter()
    .flatten()
    {
        if p.is_relative() {
            *p = base.join(&*p);
        }
    }
}

impl Sweep {
    /// Reads the base spec at `spec_path` with `sets` applied, and the grid at `grid_path`.
    pub fn load(spec_path: &Path, grid_path: &Path, sets: &[String]) -> Result<Sweep, SweepError> {
        // Validates the base spec with the file's own line numbers first.
        spec::load(spec_path, sets)?;
        let text = std::fs::read_to_string(spec_path).map_err(|e| SweepError::io(spec_path, e))?;
        let dir = spec_path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        // Absolute, so that hashes do not depend on the folder the command runs in.
        let base_dir = std::fs::canonicalize(dir).map_err(|e| SweepError::io(dir, e))?;
        let grid = Grid::load(grid_path)?;
        Sweep::from_text(
            &text,
            &spec_path.display().to_string(),
            &base_dir,
            sets,
            grid,
        )
    }

    /// A sweep from spec text; relative data paths are taken from `base_dir`.
    pub fn from_text(
        text: &str,
        origin: &str,
        base_dir: &Path,
        sets: &[String],
        grid: Grid,
    ) -> Result<Sweep, SweepError> {
        let mut base: toml::Table = text.parse().map_err(|e: toml::de::Error| {
            SweepError::Spec(SpecError::Toml {
                origin: origin.to_string(),
                line: 0,
                column: 0,
                message: e.message().to_string(),
            })
        })?;
        spec::apply_sets(&mut base, sets)?;
        let mut base_spec = spec::from_table(base.clone(), origin)?;
        resolve_paths(&mut base_spec, base_dir);
        base_spec.design()?;
        Ok(Sweep {
            base,
            base_dir: base_dir.to_path_buf(),
            base_spec,
            grid,
        })
    }

    /// Points in the grid.
    pub fn len(&self) -> usize {
        self.grid.len()
    }

    /// Whether the grid is empty (never true for a parsed grid).
    pub fn is_empty(&self) -> bool {
        self.grid.is_empty()
    }

    /// The base spec (file and `--with`).
    pub fn base_spec(&self) -> &Spec {
        &self.base_spec
    }

    /// What identifies this sweep in its folder.
    pub fn manifest(&self) -> Manifest {
        Manifest {
            base_hash: self.base_spec.hash(),
            base_spec: self.base_spec.to_json(),
            grid: self.grid.to_json(),
            points: self.grid.len(),
        }
    }

    /// The point's values as `key = value, ...` (for messages).
    pub fn describe(&self, index: usize) -> String {
        self.grid
            .point(index)
            .iter()
            .map(|(k, v)| format!("{k} = {v}"))
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// The validated spec of point `index`.
    pub fn spec_at(&self, index: usize) -> Result<(Spec, Design), SweepError> {
        let point_err = |message: String| SweepError::Point {
            index,
            point: self.describe(index),
            message,
        };
        if index >= self.len() {
            return Err(point_err(format!(
                "no such point: the grid has {} points",
                self.len()
            )));
        }
        let mut table = self.base.clone();
        for (k, v) in self.grid.point(index) {
            spec::set_key(&mut table, &k, &v.to_string()).map_err(|e| point_err(e.to_string()))?;
        }
        let mut s = spec::from_table(table, "grid").map_err(|e| point_err(e.to_string()))?;
        resolve_paths(&mut s, &self.base_dir);
        let d = s.design().map_err(|e| point_err(e.to_string()))?;
        Ok((s, d))
    }

    /// Validates every point and returns the spec hash of each, refusing two points with one
    /// spec.
    pub fn hashes(&self) -> Result<Vec<String>, SweepError> {
        let mut seen: HashMap<String, usize> = HashMap::new();
        let mut out = Vec::with_capacity(self.len());
        for i in 0..self.len() {
            let (s, _) = self.spec_at(i)?;
            let h = s.hash();
            if let Some(j) = seen.insert(h.clone(), i) {
                return Err(SweepError::Point {
                    index: i,
                    point: self.describe(i),
                    message: format!(
                        "makes the same spec as point {j} ({}); remove the repeated value",
                        self.describe(j)
                    ),
                });
            }
            out.push(h);
        }
        Ok(out)
    }
}

/// The prepared data of one `[data]` section, made by the first run that needs it.
type DataCell = Arc<OnceLock<Result<Arc<Prepared>, String>>>;

/// The float arm of one float key ([`float_key`]), trained by the first run that needs it;
/// `None` when it failed (each run then trains it again and reports its own error).
type FloatCell = Arc<OnceLock<Option<Arc<ArmResult>>>>;

/// What runs of one sweep share: the prepared data, one entry per distinct `[data]` section
/// and `net.init`, and the float arms, one per spec without its `[fixed]` section (the float
/// arm does not read the formats, so a sweep over formats trains each float arm once; its
/// results are bit-identical to training it again, its timing is that of the first run).
#[derive(Default)]
pub struct DataCache {
    map: Mutex<HashMap<String, DataCell>>,
    floats: Mutex<HashMap<String, FloatCell>>,
}

/// Everything the float arm of `spec` reads: the spec but its `[fixed]` section, and the
/// resolved hyper-parameters (rates shifted to powers of two under `fixed.rate = "shift"`
/// are the one way the fixed section reaches the float arm).
fn float_key(spec: &Spec, design: &Design) -> Result<String, String> {
    serde_json::to_string(&(&spec.data, &spec.net, &spec.rule, &spec.run, &design.hyper))
        .map_err(|e| e.to_string())
}

impl DataCache {
    /// An empty cache.
    pub fn new() -> DataCache {
        DataCache::default()
    }

    /// The prepared data of `spec`, loading it on first use (other threads wait for it).
    pub fn get(&self, spec: &Spec) -> Result<Arc<Prepared>, String> {
        // The initial parameters are read with the data, so they are part of the key.
        let key =
            serde_json::to_string(&(&spec.data, &spec.net.init)).map_err(|e| e.to_string())?;
        let cell = {
            let mut map = self
                .map
                .lock()
                .map_err(|_| "data cache poisoned by a panic".to_string())?;
            map.entry(key).or_default().clone()
        };
        cell.get_or_init(|| arms::prepare(spec).map(Arc::new).map_err(|e| e.to_string()))
            .clone()
    }

    /// Both arms of `spec` on `data`, the float arm from the cache when a run of the same
    /// float key trained it already.
    pub fn run(
        &self,
        spec: &Spec,
        design: &Design,
        data: &Prepared,
    ) -> Result<Comparison, RunError> {
        let quiet = &mut |_, _, _| {};
        let cell = float_key(spec, design).ok().and_then(|key| {
            let mut map = self.floats.lock().ok()?;
            Some(map.entry(key).or_default().clone())
        });
        let Some(cell) = cell else {
            return arms::run(spec, design, data, &mut NoObserver, quiet);
        };
        let float = cell.get_or_init(|| {
            arms::run_float(spec, design, data, &mut NoObserver, &mut |_, _, _| {})
                .ok()
                .map(Arc::new)
        });
        match float {
            Some(f) => arms::beside(spec, design, data, (**f).clone(), &mut NoObserver, quiet),
            None => arms::run(spec, design, data, &mut NoObserver, quiet),
        }
    }

    /// Distinct data sections prepared so far.
    pub fn len(&self) -> usize {
        self.map.lock().map_or(0, |m| m.len())
    }

    /// Whether nothing was prepared yet.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A finished run, handed to the sink of [`run_indexed`].
pub struct Finished<'a> {
    /// The caller's index of the run.
    pub index: usize,
    /// Its spec.
    pub spec: &'a Spec,
    /// Its design.
    pub design: &'a Design,
    /// Both arms, or why the run failed (a property of the spec: it fails the same way again).
    pub result: Result<Comparison, RunError>,
    /// Wall-clock seconds of the run.
    pub seconds: f64,
}

/// Runs `spec_of(i)` for every `i` in `indices` on `jobs` threads (`1`: in this thread, in
/// order), handing each finished run to `sink` as soon as it ends. Stops at the first error of
/// `spec_of`, of the data or of `sink`. Nothing is kept after `sink` returns, so memory does
/// not grow with the number of runs.
pub fn run_indexed<F, S>(
    indices: &[usize],
    jobs: usize,
    cache: &DataCache,
    spec_of: F,
    sink: S,
) -> Result<(), SweepError>
where
    F: Fn(usize) -> Result<(Spec, Design), SweepError> + Sync,
    S: Fn(Finished<'_>) -> Result<(), SweepError> + Sync,
{
    let one = |index: usize| -> Result<(), SweepError> {
        let (spec, design) = spec_of(index)?;
        let data = cache
            .get(&spec)
            .map_err(|message| SweepError::Data { index, message })?;
        let t = Instant::now();
        let result = cache.run(&spec, &design, &data);
        sink(Finished {
            index,
            spec: &spec,
            design: &design,
            result,
            seconds: t.elapsed().as_secs_f64(),
        })
    };
    if jobs <= 1 {
        return indices.iter().try_for_each(|&i| one(i));
    }
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(jobs)
        .build()
        .map_err(|e| SweepError::Other(format!("cannot start {jobs} threads: {e}")))?;
    pool.install(|| indices.par_iter().with_max_len(1).try_for_each(|&i| one(i)))
}

/// [`run_indexed`] over a list of validated specs; `sink` gets the position in `specs`.
pub fn run_specs<S>(specs: &[(Spec, Design)], jobs: usize, sink: S) -> Result<(), SweepError>
where
    S: Fn(Finished<'_>) -> Result<(), SweepError> + Sync,
{
    let indices: Vec<usize> = (0..specs.len()).collect();
    let cache = DataCache::new();
    run_indexed(&indices, jobs, &cache, |i| Ok(specs[i].clone()), sink)
}

fn arm_results(a: &arms::ArmResult) -> Value {
    json!({
        "test_accuracy": a.test_accuracy,
        "train_loss": a.train_loss,
        "test_loss": a.test_loss,
        "lost_updates": a.lost_updates,
        "saturations": a.saturations,
        "updates": a.updates,
        "data_saturations": a.data_saturations,
        "digest": a.digest,
        "accuracy_by_epoch": a.epochs.iter().map(|e| e.test_accuracy).collect::<Vec<_>>(),
    })
}

/// The results of a run as stored in `runs.jsonl`: per arm the final test accuracy, training
/// and test loss, lost updates, saturations, updates, data saturations, parameter digest and test
/// accuracy per epoch; the accuracy gap (float − fixed, points); memory per class in bytes and
/// bits; the warnings. Nothing here depends on the clock.
pub fn results_json(cmp: &Comparison) -> Value {
    let mut bytes = serde_json::Map::new();
    let mut bits = serde_json::Map::new();
    for (name, m) in cmp.memory.rows() {
        bytes.insert(name.into(), json!(m.bytes));
        bits.insert(name.into(), json!(m.bits));
    }
    bytes.insert("total".into(), json!(cmp.memory.total));
    bits.insert("total".into(), json!(cmp.memory.total_bits));
    json!({
        "fixed": arm_results(&cmp.fixed),
        "float": arm_results(&cmp.float),
        "accuracy_gap_points": cmp.gap_points(),
        "memory_bytes": Value::Object(bytes),
        "memory_bits": Value::Object(bits),
        "memory_container_bytes": cmp.memory.container_bytes,
        "warnings": cmp.warnings,
    })
}

/// The `runs.jsonl` record of a finished run at grid index `index`.
pub fn record(point: Value, done: &Finished<'_>) -> Value {
    let mut r = json!({
        "index": done.index,
        "point": point,
        "spec_hash": done.spec.hash(),
        "spec": done.spec.to_json(),
    });
    let (status, extra, timing) = match &done.result {
        Ok(cmp) => (
            "ok",
            ("results", results_json(cmp)),
            json!({
                "seconds": done.seconds,
                "fixed_samples_per_second": cmp.fixed.samples_per_second,
                "float_samples_per_second": cmp.float.samples_per_second,
            }),
        ),
        Err(e) => (
            "failed",
            ("error", json!(e.to_string())),
            json!({"seconds": done.seconds}),
        ),
    };
    if let Some(m) = r.as_object_mut() {
        m.insert("status".into(), json!(status));
        m.insert(extra.0.into(), extra.1);
        m.insert("timing".into(), timing);
    }
    r
}

/// What happened during a call of [`run_sweep`], for progress output.
#[derive(Clone, Debug)]
pub enum Event {
    /// The folder was read: `done` runs of the shard already there, `todo` to make.
    Start {
        /// Points in this shard.
        shard_points: usize,
        /// Already in `runs.jsonl`.
        done: usize,
        /// To run now.
        todo: usize,
    },
    /// A cut last line (from a killed sweep) was removed from `runs.jsonl`.
    DroppedPartial {
        /// Bytes dropped.
        bytes: u64,
    },
    /// A run finished and was written.
    Finished {
        /// Its grid index.
        index: usize,
        /// Whether it failed.
        failed: bool,
        /// Runs finished in this call so far.
        count: usize,
        /// Runs to make in this call.
        todo: usize,
    },
}

/// What a call of [`run_sweep`] did.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Outcome {
    /// Points of the grid in the shard (all points without a shard).
    pub shard_points: usize,
    /// Runs already in `runs.jsonl`, skipped.
    pub skipped: usize,
    /// Runs made now.
    pub ran: usize,
    /// Of those, runs that failed (recorded with their error).
    pub failed: usize,
    /// Bytes of a cut last line that were dropped.
    pub dropped_bytes: u64,
    /// The results file.
    pub runs: PathBuf,
}

/// Runs the points of `sweep` (of `opts.shard`, if set) that `dir/runs.jsonl` does not hold
/// yet, on `opts.jobs` threads, appending each finished run. See the module docs.
pub fn run_sweep(
    sweep: &Sweep,
    dir: &Path,
    opts: &Options,
    progress: &(dyn Fn(&Event) + Sync),
) -> Result<Outcome, SweepError> {
    let jobs = resolve_jobs(opts.jobs)?;
    let hashes = sweep.hashes()?;
    let manifest = sweep.manifest();
    // Held until the sweep returns: a second sweep of this folder is refused meanwhile.
    let _lock = store::claim(dir, &manifest)?;
    let runs = dir.join(store::RUNS);
    let mut stray = None;
    let scan = store::scan(&runs, |line| {
        if stray.is_none() && hashes.get(line.index) != Some(&line.hash) {
            stray = Some(line);
        }
    })?;
    if let Some(line) = stray {
        return Err(SweepError::Folder {
            dir: runs,
            message: format!(
                "holds a run (index {}, spec hash {}) that is not that point of this grid; the file was edited or mixed with another sweep's",
                line.index, line.hash
            ),
        });
    }
    if scan.partial > 0 {
        store::truncate_atomic(&runs, scan.good_len)?;
        progress(&Event::DroppedPartial {
            bytes: scan.partial,
        });
    }
    let in_shard: Vec<usize> = (0..sweep.len())
        .filter(|&i| opts.shard.is_none_or(|s| s.contains(i)))
        .collect();
    let todo: Vec<usize> = in_shard
        .iter()
        .copied()
        .filter(|&i| !scan.hashes.contains(&hashes[i]))
        .collect();
    progress(&Event::Start {
        shard_points: in_shard.len(),
        done: in_shard.len() - todo.len(),
        todo: todo.len(),
    });
    let appender = store::Appender::open(&runs)?;
    let count = AtomicUsize::new(0);
    let failed = AtomicUsize::new(0);
    let cache = DataCache::new();
    run_indexed(
        &todo,
        jobs,
        &cache,
        |i| sweep.spec_at(i),
        |done| {
            let rec = record(sweep.grid.point_json(done.index), &done);
            appender.append(&rec)?;
            let bad = done.result.is_err();
            if bad {
                failed.fetch_add(1, Ordering::Relaxed);
            }
            let n = count.fetch_add(1, Ordering::Relaxed) + 1;
            progress(&Event::Finished {
                index: done.index,
                failed: bad,
                count: n,
                todo: todo.len(),
            });
            Ok(())
        },
    )?;
    Ok(Outcome {
        shard_points: in_shard.len(),
        skipped: in_shard.len() - todo.len(),
        ran: count.load(Ordering::Relaxed),
        failed: failed.load(Ordering::Relaxed),
        dropped_bytes: scan.partial,
        runs,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    const BASE: &str = "[data]\nsource = \"pump\"\nsamples = 120\n[net]\nhidden = [8]\n[rule]\nwarmup_epochs = 0\n[run]\nepochs = 1\n";

    fn sweep(grid: &str) -> Sweep {
        let g = Grid::parse(grid, "grid").unwrap();
        Sweep::from_text(BASE, "spec", Path::new("/"), &[], g).unwrap()
    }

    #[test]
    fn shard_parsing() {
        assert_eq!(
            "1/4".parse::<Shard>().unwrap(),
            Shard { index: 1, count: 4 }
        );
        for (bad, want) in [
            ("4/4", "allowed 0 to 3"),
            ("0/0", "at least 1"),
            ("1", "expected K/N"),
            ("a/2", "whole number"),
        ] {
            let e = bad.parse::<Shard>().unwrap_err().to_string();
            assert!(e.contains(want) && e.contains(bad), "{bad}: {e}");
        }
        assert!(resolve_jobs(Some(0))
            .unwrap_err()
            .to_string()
            .contains("1 to 1024"));
    }

    #[test]
    fn points_are_specs_with_the_values_set() {
        let s = sweep(
            "\"fixed.rounding\" = [\"nearest\", \"floor\"]\n\"net.hidden\" = [[4], [6, 3]]\n",
        );
        assert_eq!(s.len(), 4);
        let (spec, _) = s.spec_at(3).unwrap();
        assert_eq!(spec.fixed.rounding, "floor");
        assert_eq!(spec.net.hidden, vec![6, 3]);
        // The same as the base file with the values given through --with.
        let (direct, _) = crate::spec::parse(
            BASE,
            &["fixed.rounding=floor".into(), "net.hidden=[6, 3]".into()],
        )
        .unwrap();
        assert_eq!(spec.hash(), direct.hash());
        assert_eq!(s.hashes().unwrap().len(), 4);
    }

    #[test]
    fn demo_grids_make_valid_sweeps() {
        let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data");
        for (grid, runs) in [("weights.toml", 30), ("paired.toml", 24)] {
            let s = Sweep::load(
                &root.join("digits.toml"),
                &root.join("grids").join(grid),
                &["run.epochs=10".into()],
            )
            .unwrap();
            assert_eq!(s.hashes().unwrap().len(), runs, "{grid}");
        }
    }

    #[test]
    fn an_invalid_point_is_named() {
        let s = sweep("\"fixed.forward_weights\" = [\"Q2.13\", \"Q40.3\"]\n");
        let e = s.hashes().unwrap_err().to_string();
        assert!(e.contains("grid point 1"), "{e}");
        assert!(e.contains("Q40.3"), "{e}");
    }
}
