//! The arithmetic seam: one interface, a float and a fixed-point back end.
//!
//! Every kernel of every rule is written once against [`Backend`]. The float back end
//! computes in `f32` and ignores classes (but still counts absorbed updates and watches for
//! non-finite values); the fixed back end computes in integers, holding per [`Class`] a
//! format and a rounding mode, one stochastic-rounding stream and the event counters.
//!
//! Kernels that touch many values ([`Backend::dot`], [`Backend::update`],
//! [`Backend::decay`]) take slices, so one compiled kernel serves every layer size.

mod fixed;
mod float;
mod word;

pub use fixed::{container_bits, ClassSpec, ConfigError, Fixed, FixedConfig};
pub use float::Float;
pub use word::Word;

use crate::class::{Class, Counters};

/// The arithmetic a learning rule needs.
pub trait Backend {
    /// A stored value: `f32`, or a raw fixed-point word in an `i8`, `i16` or `i32`.
    type S: Copy + Default + PartialOrd + core::fmt::Debug;

    /// The real `x` in class `c` (an edge operation: data, initial weights, constants).
    fn encode(&mut self, c: Class, x: f32) -> Self::S;
    /// The real value of `v`, a value of class `c`.
    fn decode(&self, c: Class, v: Self::S) -> f32;
    /// Selects the layer that subsequent events are counted against.
    fn set_layer(&mut self, layer: usize);

    /// `Σ_i a[i·stride] · b[i] (+ bias)` accumulated in the accumulator, rounded once into `out`.
    /// Uses `b.len()` terms; `a` must hold `(b.len() - 1) · stride + 1` values or more.
    #[allow(clippy::too_many_arguments)]
    fn dot(
        &mut self,
        out: Class,
        ac: Class,
        a: &[Self::S],
        stride: usize,
        bc: Class,
        b: &[Self::S],
        bias: Option<(Class, Self::S)>,
    ) -> Self::S;
    /// `x · y` formed exactly, rounded once into `out`.
    fn mul(&mut self, out: Class, xc: Class, x: Self::S, yc: Class, y: Self::S) -> Self::S;
    /// `x + y` formed exactly, rounded once into `out`.
    fn add(&mut self, out: Class, xc: Class, x: Self::S, yc: Class, y: Self::S) -> Self::S;
    /// `x - y` formed exactly, rounded once into `out`.
    fn sub(&mut self, out: Class, xc: Class, x: Self::S, yc: Class, y: Self::S) -> Self::S;
    /// `x · 2^k` in class `c` (a shifter).
    fn shift(&mut self, c: Class, x: Self::S, k: i32) -> Self::S;
    /// The local update of one weight row: `row[j] += step · x[j]`, where
    /// `step = η · δ` is rounded once into the step register and each product once into `wc`.
    /// Counts attempted, lost and saturated updates against `wc`.
    #[allow(clippy::too_many_arguments)]
    fn update(
        &mut self,
        wc: Class,
        row: &mut [Self::S],
        eta: Self::S,
        dc: Class,
        delta: Self::S,
        xc: Class,
        x: &[Self::S],
    );
    /// Weight decay of one row: `row[j] -= k · row[j]`, `k` a value of class [`Class::Rate`].
    fn decay(&mut self, wc: Class, row: &mut [Self::S], k: Self::S);
    /// A noise value `amp · z / 65536` in class `out`, `amp` of class [`Class::Noise`] and `z`
    /// an integer draw such as [`crate::rng::Stream::irwin_hall4`].
    fn noise(&mut self, out: Class, amp: Self::S, z: i32) -> Self::S;

    /// The event counters so far.
    fn counters(&self) -> &Counters;
    /// Clears the event counters.
    fn reset_counters(&mut self);
    /// The first non-finite value the back end produced: `(layer, class)`. Fixed: never.
    fn fault(&self) -> Option<(usize, Class)>;
    /// Whether values are fixed-point words.
    fn is_fixed(&self) -> bool;
    /// Raw bits of a value for digests: the sign-extended word, or the `f32` bit pattern.
    fn raw_bits(v: Self::S) -> u32;
}
