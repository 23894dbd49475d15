//! Host side of tidewise: data loading, experiment specs, the fixed/float arms, sweeps,
//! bit-width estimates, probes, plots and the board runner.

pub mod data;
