//! The `tidewise` command: parses arguments and hands each subcommand to the library.

use std::process::ExitCode;

use clap::{Parser, Subcommand};

/// Fixed-point against float local learning, for learning hardware and firmware.
#[derive(Parser)]
#[command(name = "tidewise", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Train the fixed and the float arm of one design side by side.
    Train(tidewise::cmd::train::Args),
    /// Train like `train` and measure how the rule's updates align with BP and Gauss-Newton.
    Align(tidewise::cmd::align::Args),
    /// Run every point of a grid of specs in parallel; rerun to resume.
    Sweep(tidewise::cmd::sweep::Args),
    /// Combine the shard folders of one sweep.
    Merge(tidewise::cmd::merge::Args),
    /// Write one HTML page of a sweep, a training run or a bit-width estimate.
    Report(tidewise::cmd::report::Args),
    /// Train the fixed arm on an emulated board and compare it bit for bit with the host.
    Onchip(tidewise::cmd::onchip::Args),
    /// Estimate the fewest bits per tensor class within a tolerance of the float reference.
    Bits(tidewise::cmd::bits::Args),
    /// Write a design's HDL package, C header and golden vectors; --check replays them.
    Export(tidewise::cmd::export::Args),
    // Further subcommands are added here, one line each, by the modules that own them.
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Train(a) => tidewise::cmd::train::main(a),
        Command::Onchip(a) => tidewise::cmd::onchip::main(a),
        Command::Sweep(a) => tidewise::cmd::sweep::main(a),
        Command::Merge(a) => tidewise::cmd::merge::main(a),
        Command::Report(a) => tidewise::cmd::report::main(a),
        Command::Align(a) => tidewise::cmd::align::main(a),
        Command::Bits(a) => tidewise::cmd::bits::main(a),
        Command::Export(a) => tidewise::cmd::export::main(a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(2)
        }
    }
}
