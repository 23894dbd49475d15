//! `tidewise export SPEC|recommendation.json`: the hardware hand-off folder of a design, and
//! `tidewise export --check FOLDER`, the replay of its vectors.

use std::path::PathBuf;

use anyhow::{bail, Result};

use crate::export;

/// Arguments of `tidewise export`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The design: a spec (TOML) or a `recommendation.json` of `tidewise bits`; with
    /// --check, the export folder to check.
    pub input: PathBuf,
    /// Output folder (default: out/NAME-hdl, NAME being the input file's stem).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Training steps in the golden vectors (1 to the training split's size).
    #[arg(long, default_value_t = export::DEFAULT_STEPS)]
    pub steps: usize,
    /// Override a spec key by its dotted path, e.g. --with fixed.rounding=nearest (repeatable).
    #[arg(long = "with", value_name = "KEY=VALUE")]
    pub with: Vec<String>,
    /// Write into an output folder that holds another design's files.
    #[arg(long)]
    pub force: bool,
    /// Re-run the steps of the export folder INPUT with the core and compare every word.
    #[arg(long)]
    pub check: bool,
}

/// Runs `tidewise export`.
pub fn main(args: Args) -> Result<()> {
    if args.check {
        if args.out.is_some() || !args.with.is_empty() {
            bail!("--check reads an export folder as it is: --out and --with do not apply");
        }
        let r = export::check(&args.input)?;
        println!(
            "{}: {} steps re-run, {} files and {} words equal to the core's",
            args.input.display(),
            r.steps,
            r.files,
            r.words
        );
        return Ok(());
    }
    let (spec, design, _) = export::load_input(&args.input, &args.with)?;
    let out = args.out.clone().unwrap_or_else(|| {
        let stem = args
            .input
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "design".into());
        PathBuf::from("out").join(format!("{stem}-hdl"))
    });
    let e = export::export(&spec, &design, &out, args.steps, args.force)?;
    println!(
        "wrote {}: {} steps of {} ({} multiply-accumulates, {} row updates), {} files; check with `tidewise export --check {}`",
        out.display(),
        e.manifest.steps,
        e.manifest.rule,
        e.records.0,
        e.records.1,
        e.manifest.files.len() + 5,
        out.display()
    );
    Ok(())
}
