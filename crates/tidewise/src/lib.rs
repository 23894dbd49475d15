//! Host side of tidewise: data loading, experiment specs, the fixed/float arms, sweeps,
//! bit-width estimates, alignment measures, plots and the board runner.

pub mod align;
pub mod arms;
pub mod bits;
pub mod cmd;
pub mod data;
pub mod energy;
pub mod export;
pub mod io;
pub mod memory;
pub mod onchip;
pub mod plot;
pub mod spec;
pub mod summary;
pub mod sweep;
pub mod weights;
