//! `tidewise onchip SPEC --board NAME`: the spec's fixed arm trained on an emulated board
//! and compared, figure by figure, with the host.

use std::path::PathBuf;
use std::time::Duration;

use anyhow::{bail, Context, Result};

use crate::io::{claim_dir, write_atomic};
use crate::onchip;
use crate::spec;

/// Arguments of `tidewise onchip`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The experiment spec (TOML).
    pub spec: PathBuf,
    /// The board: mps2-an386 or microbit.
    #[arg(long)]
    pub board: String,
    /// Output folder (default: out/NAME-BOARD, NAME being the spec file's stem).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Override a spec key by its dotted path, e.g. --with data.max_train=200 (repeatable).
    #[arg(long = "with", value_name = "KEY=VALUE")]
    pub with: Vec<String>,
    /// Stop the emulator after this many seconds.
    #[arg(long, default_value_t = 600)]
    pub timeout: u64,
    /// The firmware folder (default: the repository's boards/).
    #[arg(long)]
    pub boards: Option<PathBuf>,
    /// Write into an output folder that holds another spec's results.
    #[arg(long)]
    pub force: bool,
    /// Only pack the job and check that it fits the board; build and run nothing.
    #[arg(long)]
    pub check: bool,
}

/// Runs `tidewise onchip`.
pub fn main(args: Args) -> Result<()> {
    let board = onchip::board(&args.board)?;
    let (spec, design) = spec::load(&args.spec, &args.with)?;
    if args.timeout == 0 {
        bail!("--timeout 0: allowed: 1 second or more");
    }
    let boards = args
        .boards
        .clone()
        .unwrap_or_else(onchip::default_boards_dir);
    let out = args.out.clone().unwrap_or_else(|| {
        let stem = args
            .spec
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "run".into());
        PathBuf::from("out").join(format!("{stem}-{}", board.name))
    });
    if args.check {
        let (_, packed, b) = onchip::prepare(&spec, &design, &board)?;
        println!(
            "{}: the job fits: RAM {} of {} B (arena {}, order buffer {}, thread stack {}, handler stack {}, other statics {}); flash {} of {} B (job {} with {} B of data, code allowance {}); {}-bit words",
            board.name,
            b.ram_need,
            b.ram_have,
            b.arena_bytes,
            b.order_bytes,
            b.stack_bytes,
            b.handler_stack_bytes,
            b.other_static_bytes,
            b.flash_need,
            b.flash_have,
            b.job_bytes,
            b.data_bytes,
            b.code_bytes,
            packed.container_bits
        );
        return Ok(());
    }
    // Claimed (and locked) before the board runs, so a second run of this folder is refused
    // at once instead of after its emulation.
    let dir = claim_dir(&out, &spec.hash(), args.force)?;
    let outcome = onchip::train(
        &spec,
        &design,
        &board,
        &boards,
        Duration::from_secs(args.timeout),
    )?;
    write_atomic(&dir.join("curves.csv"), outcome.curves_csv().as_bytes())?;
    let json = outcome.summary_json(&spec, &design);
    let text = serde_json::to_string_pretty(&json).context("encoding onchip.json")?;
    write_atomic(&dir.join("onchip.json"), text.as_bytes())?;
    let fp = &outcome.footprint;
    println!(
        "{}: {} {} on {} train / {} test samples, {}-bit words, {} epochs",
        board.name,
        design.rule.name(),
        outcome.run.learn.sizes,
        outcome.packed.header.train_samples,
        outcome.packed.header.test_samples,
        outcome.packed.container_bits,
        outcome.run.epochs.len()
    );
    println!(
        "flash {} B (job {} B), static RAM {} B (arena {} B, order {} B), stack peak {} B; tensors {} B",
        fp.flash_bytes,
        outcome.packed.bytes.len(),
        outcome.run.static_ram_bytes,
        outcome.run.learn.arena_bytes,
        outcome.run.learn.order_bytes,
        outcome.run.stack_peak_bytes,
        json["ram"]["tensor_bytes"]
    );
    println!(
        "{:.0} instructions per training sample, {:.2} per MAC ({} MACs per step)",
        outcome.instructions_per_sample(),
        outcome.instructions_per_mac(),
        outcome.macs.total()
    );
    if let Some(last) = outcome.run.epochs.last() {
        println!(
            "final test accuracy {:.2}%, digest {}",
            100.0 * last.test_accuracy(),
            outcome.run.digest
        );
    }
    match &outcome.difference {
        None => println!("bit-identical to the host's fixed arm"),
        Some(d) => println!("differs from the host's fixed arm: {d}"),
    }
    println!("wrote {}/{{curves.csv,onchip.json}}", dir.display());
    if let Some(d) = &outcome.difference {
        bail!("the board's run is not bit-identical to the host's: {d}");
    }
    Ok(())
}
