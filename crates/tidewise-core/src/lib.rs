//! tidewise-core: local learning rules in run-time fixed-point formats and in `f32`,
//! with no heap and no `std`, the same code on a host and on a microcontroller.
#![no_std]
#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod activation;
pub mod backend;
pub mod class;
pub mod format;
pub mod job;
pub mod kernels;
pub mod network;
pub mod plan;
pub mod rng;
pub mod round;
pub mod rules;
pub mod train;
