//! tidewise-core: local learning rules in run-time fixed-point formats and in `f32`,
//! with no heap and no `std`, the same code on a host and on a microcontroller.
#![no_std]
#![forbid(unsafe_code)]
#![warn(missing_docs)]
// No panics outside tests: the firmware proves it at link time (ci/panic-proof.sh).
#![cfg_attr(
    not(test),
    deny(clippy::unwrap_used, clippy::expect_used, clippy::panic)
)]

pub mod activation;
pub mod backend;
pub mod class;
pub mod format;
pub mod job;
pub mod kernels;
pub mod learner;
pub mod network;
mod part;
pub mod plan;
pub mod rng;
pub mod round;
pub mod rule;
pub mod rules;
pub mod train;
