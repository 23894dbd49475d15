//! `tidewise merge DIR...`: the shard folders of one sweep into one `runs.jsonl`.

use std::path::{Path, PathBuf};

use anyhow::{bail, Result};

use crate::sweep::merge::{self, ranges};

/// Arguments of `tidewise merge`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Sweep folders (shards) of one sweep.
    #[arg(required = true)]
    pub dirs: Vec<PathBuf>,
    /// Folder of the merged runs (default: `merged` beside the first folder).
    #[arg(long)]
    pub out: Option<PathBuf>,
}

/// Runs `tidewise merge`; fails (after writing) when grid points have no run.
pub fn main(args: Args) -> Result<()> {
    let out = args.out.clone().unwrap_or_else(|| {
        args.dirs[0]
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."))
            .join("merged")
    });
    let m = merge::merge(&args.dirs, &out)?;
    for (d, bytes) in &m.partial {
        eprintln!(
            "note: {}/runs.jsonl ends in a cut line ({bytes} bytes); skipped it",
            d.display()
        );
    }
    println!(
        "{} of {} grid points merged from {} folder(s), {} duplicate line(s) dropped; wrote {}",
        m.runs,
        m.points,
        args.dirs.len(),
        m.duplicates,
        m.out.display()
    );
    if !m.missing.is_empty() {
        bail!(
            "{} grid point(s) have no run: {} (rerun their shards, or run the sweep into {} to fill them)",
            m.missing.len(),
            ranges(&m.missing),
            out.display()
        );
    }
    Ok(())
}
