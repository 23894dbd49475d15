//! `tidewise bits SPEC`: the fewest bits per tensor class within a tolerance of the float
//! reference, accepted with a stated confidence on fresh replicates, with the design's memory
//! and an energy estimate. Resumable: every run is journalled in the output folder.

use std::path::PathBuf;
use std::time::Instant;

use anyhow::{Context, Result};

use crate::bits::{self, Executor, Hold, Journal, Options, Splits};
use crate::energy::{self, EnergyTable};
use crate::io::write_atomic;
use crate::memory::Memory;
use crate::{arms, spec};

/// Arguments of `tidewise bits`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The experiment spec (TOML).
    pub spec: PathBuf,
    /// Allowed loss of mean final test accuracy against the float reference, in points (> 0).
    #[arg(long, default_value_t = 1.0, allow_negative_numbers = true)]
    pub tolerance: f64,
    /// One-sided confidence that the accepted design is within the tolerance (0.5 to 1).
    #[arg(long, default_value_t = 0.95, allow_negative_numbers = true)]
    pub confidence: f64,
    /// Replicates (seed, split seed) the search explores on.
    #[arg(long, default_value_t = 4)]
    pub search_seeds: u32,
    /// Fresh replicates per confirmation round.
    #[arg(long, default_value_t = 16)]
    pub confirm_seeds: u32,
    /// Most confirmation rounds (each on new replicates, at a Bonferroni-corrected level).
    #[arg(long, default_value_t = 3)]
    pub rounds: u32,
    /// Further fresh replicates to re-check the final design on (reported, never decides).
    #[arg(long, default_value_t = 0)]
    pub recheck: u32,
    /// Split seeds: auto (a split per replicate when one test sample is worth more than half
    /// the tolerance), fixed (the spec's split), vary (a split per replicate).
    #[arg(long, default_value = "auto")]
    pub splits: String,
    /// Fix a class the design cannot change, e.g. forward_weights=Q1.6 or accumulator=24
    /// (repeatable; CLASS.LAYER=FORMAT holds one layer, e.g. forward_weights.2=Q1.6:
    /// weights and biases 1 to L, activations 0, the input, to L).
    #[arg(long = "hold", value_name = "CLASS=FORMAT")]
    pub hold: Vec<String>,
    /// Search forward-weight and activation formats per layer (one memory per layer).
    #[arg(long)]
    pub per_layer: bool,
    /// Output folder (default: out/NAME/bits, NAME being the spec file's stem); rerun with
    /// the same folder to resume.
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Override a spec key by its dotted path, e.g. --with run.epochs=10 (repeatable).
    #[arg(long = "with", value_name = "KEY=VALUE")]
    pub with: Vec<String>,
    /// Training runs at once (default: the machine's cores).
    #[arg(long)]
    pub jobs: Option<usize>,
    /// Where fixed-arm runs are made: local, sweep (the sweep machinery) or slurm (an
    /// array job of sweep shards per batch; needs sbatch and squeue).
    #[arg(long, default_value = "local")]
    pub executor: String,
    /// Array tasks per Slurm batch.
    #[arg(long, default_value_t = 4)]
    pub slurm_tasks: usize,
    /// Most training runs (both arms) the command may make.
    #[arg(long, default_value_t = 5000)]
    pub budget: usize,
    /// Per-operation energy table (TOML; see `demo-data/energy/45nm.toml`). Default: the
    /// built-in 45 nm table.
    #[arg(long, value_name = "FILE.toml")]
    pub energy: Option<PathBuf>,
    /// Skip the accuracy-against-width scan (and bits.svg).
    #[arg(long)]
    pub no_scan: bool,
    /// Word-length step of the scan, bits.
    #[arg(long, default_value_t = 2)]
    pub scan_step: u8,
    /// Also scan with round-to-nearest.
    #[arg(long)]
    pub scan_nearest: bool,
    /// Most one-bit widenings in the search and before each further round.
    #[arg(long, default_value_t = 8)]
    pub max_widen: u32,
    /// No progress lines on stderr.
    #[arg(long)]
    pub quiet: bool,
}

/// The options of `args`, checked.
pub fn options(args: &Args) -> Result<(Options, Executor)> {
    let jobs = args.jobs.unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    });
    let holds = args
        .hold
        .iter()
        .map(|h| Hold::parse(h))
        .collect::<Result<Vec<_>, _>>()?;
    let opts = Options {
        tolerance: args.tolerance,
        confidence: args.confidence,
        search_seeds: args.search_seeds,
        confirm_seeds: args.confirm_seeds,
        rounds: args.rounds,
        recheck: args.recheck,
        splits: Splits::parse(&args.splits)?,
        holds,
        per_layer: args.per_layer,
        jobs,
        scan: !args.no_scan,
        scan_step: args.scan_step,
        scan_nearest: args.scan_nearest,
        max_widen: args.max_widen,
        budget: args.budget,
    };
    opts.validate()?;
    let executor = match args.executor.as_str() {
        "local" => Executor::Local,
        "sweep" => Executor::Sweep,
        "slurm" => {
            if !(1..=1000).contains(&args.slurm_tasks) {
                anyhow::bail!("--slurm-tasks {}: allowed: 1 to 1000", args.slurm_tasks);
            }
            Executor::Slurm {
                binary: std::env::current_exe().context("finding the tidewise binary")?,
                tasks: args.slurm_tasks,
                cpus: 1,
            }
        }
        other => anyhow::bail!("--executor {other}: allowed: local, sweep, slurm"),
    };
    Ok((opts, executor))
}

/// Runs `tidewise bits`.
pub fn main(args: Args) -> Result<()> {
    let start = Instant::now();
    let (opts, executor) = options(&args)?;
    let table = match &args.energy {
        Some(p) => EnergyTable::load(p)?,
        None => EnergyTable::default_45nm(),
    };
    let (spec, design) = spec::load(&args.spec, &args.with)?;
    let prepared = arms::prepare(&spec)?;
    let plan = arms::plan(&spec, &design, &prepared)?;
    // Before the journal: a folder is never made for a search that cannot run.
    opts.check_layers(u8::try_from(plan.layers()).unwrap_or(u8::MAX))?;
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| crate::cmd::train::default_out(&args.spec).join("bits"));
    let hash = spec.hash();
    let manifest = serde_json::json!({
        "spec_hash": hash,
        "spec": spec.to_json(),
        "options": opts.manifest_json(),
    });
    let journal = Journal::open(&out, &manifest)?;
    // The folder stays locked until the report files below are written.
    let _lock = journal.0.lock();
    let dir = out;
    let quiet = args.quiet;
    let mut log = |line: &str| {
        if !quiet {
            eprintln!("{line}");
        }
    };
    let rec = bits::search(
        &spec,
        &design,
        &prepared,
        &opts,
        executor.clone(),
        Some(journal),
        &mut log,
    )?;
    let memory = Memory::of(&plan, &rec.design.fixed);
    let ops = energy::ops_per_sample(&plan, &rec.design)?;
    let fixed_energy = energy::energy(&ops, &table, &rec.design);
    let float_energy = energy::energy_float(&ops, &table);
    let spec_path = args.spec.display().to_string();
    let extras = bits::Extras {
        spec_path: &spec_path,
        spec_hash: &hash,
        rule: &spec.rule.name,
        memory,
        ops: &ops,
        table: &table,
        fixed_energy: &fixed_energy,
        float_energy: &float_energy,
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
    let recommended = bits::recommended_spec(&spec, &rec)
        .map_err(|e| anyhow::anyhow!("writing the recommended spec: {e}"))?;
    write_atomic(&dir.join("recommended.toml"), recommended.as_bytes())?;
    let json = bits::recommendation_json(&rec, &extras);
    let text = serde_json::to_string_pretty(&json).context("encoding the recommendation")?;
    write_atomic(&dir.join("recommendation.json"), text.as_bytes())?;
    let seconds = start.elapsed().as_secs_f64();
    let timing = serde_json::json!({
        "seconds": seconds,
        "jobs": opts.jobs,
        "executor": executor.name(),
        "runs_used": rec.runs.float + rec.runs.search_fixed + rec.runs.confirm_fixed + rec.runs.recheck_fixed + rec.runs.scan_fixed,
    });
    write_atomic(&dir.join("timing.json"), timing.to_string().as_bytes())?;
    print!("{}", bits::table(&rec, &extras));
    println!(
        "wrote {}/{{recommendation.json,recommended.toml,runs.csv{},timing.json}} (journal: bits.json, journal.jsonl)",
        dir.display(),
        if rec.scans.is_empty() { "" } else { ",bits.svg" }
    );
    eprintln!("wall time {seconds:.1} s");
    Ok(())
}
