//! `tidewise probe SPEC`: trains like `tidewise train` and measures, at checkpoints, how the
//! rule's updates align with backpropagation and Gauss-Newton (see [`crate::probe`]).

use std::path::PathBuf;

use anyhow::{Context, Result};

use crate::arms::{self, Arm};
use crate::cmd::train::{default_out, progress_bar};
use crate::io::{claim_dir, write_atomic};
use crate::probe::{self, Options};
use crate::{spec, summary};

/// Arguments of `tidewise probe`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The experiment spec (TOML).
    pub spec: PathBuf,
    /// Probe every N epochs (and before training and after the last epoch).
    #[arg(long, default_value_t = 1, value_name = "N")]
    pub every: u16,
    /// Probe on the first M samples of the test split.
    #[arg(long, default_value_t = 20, value_name = "M")]
    pub samples: usize,
    /// Only these measures (repeatable or comma-separated): angle_bp, angle_gn, null_share,
    /// angle_target_gn, feedback_align. Default: every measure the rule has.
    #[arg(long = "measure", value_name = "NAME")]
    pub measures: Vec<String>,
    /// Output folder (default: out/NAME, NAME being the spec file's stem).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Override a spec key by its dotted path, e.g. --set rule.name=dtp (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Write into an output folder that holds another spec's results.
    #[arg(long)]
    pub force: bool,
}

/// Runs `tidewise probe`.
pub fn main(args: Args) -> Result<()> {
    let (spec, design) = spec::load(&args.spec, &args.set)?;
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
    let bar = progress_bar(2 * u64::from(spec.run.epochs));
    let mut progress = |arm: Arm, _: u16, _: u16| {
        if let Some(b) = &bar {
            b.set_message(arm.name());
            b.inc(1);
        }
    };
    let probed = probe::run(&spec, &design, &prepared, &options, &mut progress)?;
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    let cmp = &probed.comparison;
    let name = args.spec.display();
    let title = format!(
        "{name}: {} alignment, fixed {} / {} (solid) vs float (dashed)",
        spec.rule.name, spec.fixed.forward_weights, spec.fixed.activations
    );
    let svg =
        probe::alignment_svg(&title, &probed.rows).map_err(|e| anyhow::anyhow!("plotting: {e}"))?;
    write_atomic(
        &dir.join("alignment.csv"),
        probe::alignment_csv(&probed.rows).as_bytes(),
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
    let json = summary::summary_json(&spec, &design, cmp);
    let text = serde_json::to_string_pretty(&json).context("encoding summary")?;
    write_atomic(&dir.join("summary.json"), text.as_bytes())?;
    print!("{}", summary::table(&spec, &design, cmp));
    print!("{}", probe::table(&probed.rows));
    println!(
        "probe time {:.2} s; wrote {}/{{alignment.csv,alignment.svg,curves.csv,curves.svg,summary.json}}",
        probed.probe_seconds,
        dir.display()
    );
    Ok(())
}
