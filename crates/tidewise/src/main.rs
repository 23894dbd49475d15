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
    // Further subcommands are added here, one line each, by the modules that own them.
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Train(a) => tidewise::cmd::train::main(a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(2)
        }
    }
}
