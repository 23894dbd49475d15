//! `tidewise sweep SPEC --grid GRID.toml --out DIR`: every point of a grid, in parallel,
//! appended to `DIR/runs.jsonl`; rerunning resumes.

use std::path::PathBuf;
use std::sync::atomic::{AtomicU64, Ordering};

use anyhow::Result;

use crate::cmd::progress::{run_text, StatusLine};
use crate::sweep::{self, Event, Options, Shard, Sweep};

/// Arguments of `tidewise sweep`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The base experiment spec (TOML).
    pub spec: PathBuf,
    /// The grid: dotted spec keys mapped to lists of values (TOML).
    #[arg(long)]
    pub grid: PathBuf,
    /// Output folder (sweep.json and runs.jsonl); rerun with the same folder to resume.
    #[arg(long)]
    pub out: PathBuf,
    /// Threads (default: all cores).
    #[arg(long)]
    pub jobs: Option<usize>,
    /// Run only shard K of N: the grid points i with i % N == K.
    #[arg(long, value_name = "K/N")]
    pub shard: Option<String>,
    /// Override a base spec key, e.g. --with run.epochs=5 (repeatable).
    #[arg(long = "with", value_name = "KEY=VALUE")]
    pub with: Vec<String>,
}

/// Runs `tidewise sweep`.
pub fn main(args: Args) -> Result<()> {
    let shard: Option<Shard> = args.shard.as_deref().map(str::parse).transpose()?;
    sweep::resolve_jobs(args.jobs)?;
    let sw = Sweep::load(&args.spec, &args.grid, &args.with)?;
    let opts = Options {
        jobs: args.jobs,
        shard,
    };
    let status = StatusLine::new();
    let ran = AtomicU64::new(0);
    let planned = AtomicU64::new(0);
    let progress = |e: &Event| {
        match e {
        Event::DroppedPartial { bytes } => eprintln!(
            "note: {}/runs.jsonl ended in a cut line ({bytes} bytes, from a sweep that was stopped); dropped it, that run is made again",
            args.out.display()
        ),
        Event::Start {
            shard_points,
            done,
            todo,
        } => {
            planned.store(*todo as u64, Ordering::Relaxed);
            eprintln!(
                "sweep: {shard_points} points{}, {done} already done, {todo} to run",
                shard.map_or(String::new(), |s| format!(" in shard {}/{}", s.index, s.count))
            );
        }
        Event::Finished { index, failed, .. } => {
            let n = ran.fetch_add(1, Ordering::Relaxed) + 1;
            status.show(run_text(n, planned.load(Ordering::Relaxed)));
            if *failed {
                eprintln!("run {index} failed (recorded in runs.jsonl)");
            }
        }
    }
    };
    let out = sweep::run_sweep(&sw, &args.out, &opts, &progress)?;
    status.clear();
    println!(
        "{} runs made ({} failed), {} already there; results in {}",
        out.ran,
        out.failed,
        out.skipped,
        out.runs.display()
    );
    Ok(())
}
