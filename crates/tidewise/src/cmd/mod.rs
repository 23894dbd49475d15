//! One module per subcommand: its clap arguments and the function the binary calls.
//! Each returns errors for the binary to print; none panics on user input.

pub mod align;
pub mod bits;
pub mod export;
pub mod merge;
pub mod onchip;
pub mod progress;
pub mod report;
pub mod sweep;
pub mod train;
