//! `tidewise train SPEC`: both arms of one design, written to a folder.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result};

use crate::arms::{self, Arm};
use crate::cmd::progress::{epoch_text, StatusLine};
use crate::io::{claim_dir, write_atomic};
use crate::weights::{export, FinalWeights};
use crate::{spec, summary};

/// Arguments of `tidewise train`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The experiment spec (TOML).
    pub spec: PathBuf,
    /// Output folder (default: out/NAME, NAME being the spec file's stem).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Override a spec key by its dotted path, e.g. --with rule.name=dtp (repeatable).
    #[arg(long = "with", value_name = "KEY=VALUE")]
    pub with: Vec<String>,
    /// Print the outcome as one JSON document instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Write into an output folder that holds another spec's results.
    #[arg(long)]
    pub force: bool,
}

/// The default output folder of a spec file.
pub fn default_out(spec: &Path) -> PathBuf {
    let stem = spec
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "run".into());
    PathBuf::from("out").join(stem)
}

/// Runs `tidewise train`.
pub fn main(args: Args) -> Result<()> {
    let (spec, design) = spec::load(&args.spec, &args.with)?;
    let prepared = arms::prepare(&spec)?;
    let out = args.out.clone().unwrap_or_else(|| default_out(&args.spec));
    let dir = claim_dir(&out, &spec.hash(), args.force)?;
    let status = StatusLine::new();
    let mut progress = |arm: Arm, epoch: u16, epochs: u16| {
        status.show(epoch_text(arm, epoch, epochs));
    };
    let mut weights = FinalWeights::new(spec.run.epochs);
    let cmp = arms::run(&spec, &design, &prepared, &mut weights, &mut progress)?;
    status.clear();
    let json = summary::outcome_json(&spec, &design, &cmp);
    let title = format!(
        "{}: {} on {} — fixed (solid) against float (dashed)",
        args.spec.display(),
        spec.rule.name,
        spec.data.source
    );
    let svg = summary::curves_svg(&title, &cmp).map_err(|e| anyhow::anyhow!("plotting: {e}"))?;
    write_atomic(
        &dir.join("curves.csv"),
        summary::curves_csv(&cmp).as_bytes(),
    )?;
    write_atomic(&dir.join("curves.svg"), svg.as_bytes())?;
    let text = serde_json::to_string_pretty(&json).context("encoding the outcome")?;
    write_atomic(&dir.join(summary::OUTCOME_FILE), text.as_bytes())?;
    export::write(&dir, &design, &weights, &cmp)?;
    if args.json {
        println!("{}", serde_json::to_string(&json)?);
    } else {
        print!("{}", summary::table(&spec, &design, &cmp));
        println!(
            "wrote {}/{{curves.csv,curves.svg,outcome.json,weights-float.npz,weights-fixed.npz,weights-fixed-raw.npz,weights.json}}",
            dir.display()
        );
    }
    Ok(())
}
