//! `tidewise align SPEC`: trains like `tidewise train` and measures, at checkpoints, how the
//! rule's updates align with backpropagation and Gauss-Newton (see [`crate::align`]).

use std::path::PathBuf;

use anyhow::{Context, Result};

use crate::align::{self, Options};
use crate::arms::{self, Arm};
use crate::cmd::progress::{epoch_text, StatusLine};
use crate::cmd::train::default_out;
use crate::io::{claim_dir, write_atomic};
use crate::{spec, summary};

/// Arguments of `tidewise align`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The experiment spec (TOML).
    pub spec: PathBuf,
    /// Measure every N epochs (and before training and after the last epoch).
    #[arg(long, default_value_t = 1, value_name = "N")]
    pub every: u16,
    /// Measure on the first M samples of the test split.
    #[arg(long, default_value_t = 20, value_name = "M")]
    pub samples: usize,
    /// Only these measures (repeatable or comma-separated): angle_bp, angle_gn, null_share,
    /// angle_target_gn, feedback_align. Default: every measure the rule has.
    #[arg(long = "measure", value_name = "NAME")]
    pub measures: Vec<String>,
    /// Output folder (default: out/NAME, NAME being the spec file's stem).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Override a spec key by its dotted path, e.g. --with rule.name=dtp (repeatable).
    #[arg(long = "with", value_name = "KEY=VALUE")]
    pub with: Vec<String>,
    /// Write into an output folder that holds another spec's results.
    #[arg(long)]
    pub force: bool,
}

/// Runs `tidewise align`.
pub fn main(args: Args) -> Result<()> {
    let (spec, design) = spec::load(&args.spec, &args.with)?;
    let prepared = arms::prepare(&spec)?;
    let options = Options {
        every: args.every,
        samples: args.samples,
        measures: args.measures.clone(),
    };
    // Refuse bad options before any training or writing.
    options.validate(design.rule, prepared.test.len())?;
    let out = args.out.clone().unwrap_or_else(|| default_out(&args.spec));
    let dir = claim_dir(&out, &spec.hash(), args.force)?;
    let status = StatusLine::new();
    let mut progress = |arm: Arm, epoch: u16, epochs: u16| {
        status.show(epoch_text(arm, epoch, epochs));
    };
    let probed = align::run(&spec, &design, &prepared, &options, &mut progress)?;
    status.clear();
    let cmp = &probed.comparison;
    let name = args.spec.display();
    let title = format!(
        "{name}: {} alignment, fixed {} / {} (solid) vs float (dashed)",
        spec.rule.name, spec.fixed.forward_weights, spec.fixed.activations
    );
    let svg =
        align::alignment_svg(&title, &probed.rows).map_err(|e| anyhow::anyhow!("plotting: {e}"))?;
    write_atomic(
        &dir.join("alignment.csv"),
        align::alignment_csv(&probed.rows).as_bytes(),
    )?;
    write_atomic(&dir.join("alignment.svg"), svg.as_bytes())?;
    let curves_title = format!(
        "{name}: {} on {} — fixed (solid) against float (dashed)",
        spec.rule.name, spec.data.source
    );
    let curves =
        summary::curves_svg(&curves_title, cmp).map_err(|e| anyhow::anyhow!("plotting: {e}"))?;
    write_atomic(&dir.join("curves.csv"), summary::curves_csv(cmp).as_bytes())?;
    write_atomic(&dir.join("curves.svg"), curves.as_bytes())?;
    let json = summary::outcome_json(&spec, &design, cmp);
    let text = serde_json::to_string_pretty(&json).context("encoding the outcome")?;
    write_atomic(&dir.join(summary::OUTCOME_FILE), text.as_bytes())?;
    print!("{}", summary::table(&spec, &design, cmp));
    print!("{}", align::table(&probed.rows));
    println!(
        "alignment measured in {:.2} s; wrote {}/{{alignment.csv,alignment.svg,curves.csv,curves.svg,outcome.json}}",
        probed.align_seconds,
        dir.display()
    );
    Ok(())
}
