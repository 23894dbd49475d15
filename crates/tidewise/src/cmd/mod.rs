//! One module per subcommand: its clap arguments and the function the binary calls.
//! Each returns errors for the binary to print; none panics on user input.

pub mod train;
pub mod probe;
pub mod sweep;
pub mod merge;
pub mod report;
pub mod onchip;
pub mod bits;
