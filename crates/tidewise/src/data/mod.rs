//! Data sources: CSV and IDX files, the UCI digits, the invented pump demo, and the
//! deterministic split and min-max scaling applied before training.
//!
//! Every source yields a [`Dataset`]: row-major finite `f32` features and `u16` class indices.
//! Features are left as the source gives them; [`Scaling`] (fitted on the training split only)
//! maps them to `[0, hi]` for a fixed-point input format.

mod csv;
mod dataset;
mod digits;
mod error;
mod idx;
mod pump;
mod rng;
mod split;

pub use self::csv::{format_csv, load_csv, load_csv_table, parse_csv, parse_csv_table, CsvTable};
pub use self::dataset::Dataset;
pub use self::digits::{digits, DIGITS_SOURCE};
pub use self::error::DataError;
pub use self::idx::{load_idx, parse_idx};
pub use self::pump::{pump, pump_csv, PUMP_BANDS, PUMP_LABEL_COLUMN, PUMP_STATES};
pub use self::split::{split, Scaling};

#[cfg(test)]
mod fuzz_tests;
