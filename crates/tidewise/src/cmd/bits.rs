//! `tidewise bits SPEC`: the fewest bits per tensor class within a tolerance of the float
//! reference, with the design's memory and an energy estimate.

use std::path::PathBuf;
use std::time::Instant;

use anyhow::{Context, Result};

use crate::bits::{self, Options};
use crate::energy::{self, EnergyTable};
use crate::io::{claim_dir, write_atomic};
use crate::memory::Memory;
use crate::{arms, spec};

/// Arguments of `tidewise bits`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The experiment spec (TOML).
    pub spec: PathBuf,
    /// Allowed loss of mean final test accuracy against the float reference, in points.
    #[arg(long, default_value_t = 1.0, allow_negative_numbers = true)]
    pub tolerance: f64,
    /// Seeds averaged: run.seed, run.seed + 1, ...
    #[arg(long, default_value_t = 3)]
    pub seeds: u32,
    /// Output folder (default: out/NAME/bits, NAME being the spec file's stem).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Override a spec key by its dotted path, e.g. --set run.epochs=10 (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Training runs at once (default: the machine's cores).
    #[arg(long)]
    pub jobs: Option<usize>,
    /// Per-operation energy table (TOML; see `demo-data/energy/45nm.toml`). Default: the
    /// built-in 45 nm table.
    #[arg(long, value_name = "FILE.toml")]
    pub energy: Option<PathBuf>,
    /// Skip the accuracy-against-width scan (and bits.svg).
    #[arg(long)]
    pub no_scan: bool,
    /// Seeds of the scan (the first N of --seeds).
    #[arg(long, default_value_t = 1)]
    pub scan_seeds: u32,
    /// Word-length step of the scan, bits.
    #[arg(long, default_value_t = 2)]
    pub scan_step: u8,
    /// Most one-bit widenings when the joint design misses the tolerance.
    #[arg(long, default_value_t = 8)]
    pub max_widen: u32,
    /// No progress lines on stderr.
    #[arg(long)]
    pub quiet: bool,
    /// Write into an output folder that holds another spec's results.
    #[arg(long)]
    pub force: bool,
}

/// Runs `tidewise bits`.
pub fn main(args: Args) -> Result<()> {
    let start = Instant::now();
    let jobs = args.jobs.unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    });
    let opts = Options {
        tolerance: args.tolerance,
        seeds: args.seeds,
        jobs,
        scan: !args.no_scan,
        scan_seeds: args.scan_seeds,
        scan_step: args.scan_step,
        max_widen: args.max_widen,
    };
    opts.validate()?;
    let table = match &args.energy {
        Some(p) => EnergyTable::load(p)?,
        None => EnergyTable::default_45nm(),
    };
    let (spec, design) = spec::load(&args.spec, &args.set)?;
    let prepared = arms::prepare(&spec)?;
    let plan = arms::plan(&spec, &design, &prepared)?;
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| crate::cmd::train::default_out(&args.spec).join("bits"));
    let dir = claim_dir(&out, &spec.hash(), args.force)?;
    let quiet = args.quiet;
    let mut log = |line: &str| {
        if !quiet {
            eprintln!("{line}");
        }
    };
    let rec = bits::search(&spec, &design, &prepared, &opts, &mut log)?;
    let memory = Memory::of(&plan, &rec.design.fixed);
    let ops = energy::ops_per_sample(&plan, &rec.design)?;
    let fixed_energy = energy::energy(&ops, &table, &rec.design);
    let float_energy = energy::energy_float(&ops, &table);
    let spec_path = args.spec.display().to_string();
    let hash = spec.hash();
    let mut extras = bits::Extras {
        spec_path: &spec_path,
        spec_hash: &hash,
        rule: &spec.rule.name,
        memory,
        ops: &ops,
        table: &table,
        fixed_energy: &fixed_energy,
        float_energy: &float_energy,
        seconds: 0.0,
    };
    if !rec.scans.is_empty() {
        let title = format!(
            "{}: {} on {} — accuracy against word bits",
            spec_path, spec.rule.name, spec.data.source
        );
        let svg = bits::svg(&title, &rec).map_err(|e| anyhow::anyhow!("plotting: {e}"))?;
        write_atomic(&dir.join("bits.svg"), svg.as_bytes())?;
    }
    write_atomic(&dir.join("runs.csv"), bits::runs_csv(&rec).as_bytes())?;
    extras.seconds = start.elapsed().as_secs_f64();
    let json = bits::recommendation_json(&rec, &extras);
    let text = serde_json::to_string_pretty(&json).context("encoding the recommendation")?;
    write_atomic(&dir.join("recommendation.json"), text.as_bytes())?;
    print!("{}", bits::table(&rec, &extras));
    println!(
        "wrote {}/{{recommendation.json,runs.csv{}}}",
        dir.display(),
        if rec.scans.is_empty() {
            ""
        } else {
            ",bits.svg"
        }
    );
    Ok(())
}
