//! Host side of tidewise: data loading, experiment specs, the fixed/float arms, sweeps,
//! bit-width estimates, probes, plots and the board runner.

pub mod arms;
pub mod data;
pub mod memory;
pub mod onchip;
pub mod spec;
