//! The arithmetic seam: one interface, a float and a fixed-point back end.
//!
//! Every kernel of every rule is written once against [`Backend`]. Operands and destinations
//! are named by a [`Tag`]: the tensor class and the layer the value belongs to. The float
//! back end computes in `f32` and ignores tags (but still counts absorbed updates and watches
//! for non-finite values); the fixed back end computes in integers, resolving each tag to a
//! format and a rounding mode from a `[layer][class]` table made once at construction, with
//! one stochastic-rounding stream and the event counters.
//!
//! Values of different tags may have different fractions: every binary operation aligns its
//! operands exactly by the fraction difference, forms the result exactly and rounds it once
//! into the destination's format. [`Backend::cmp`] compares across formats exactly and
//! [`Backend::convert`] moves a value (a constant, say) into another tag's format.
//!
//! Event counters are counted against the weight layer selected by [`Backend::set_layer`]
//! and the destination's class (not the tag's layer), so a figure "per layer" means "while
//! computing for weight layer l".
//!
//! Kernels that touch many values ([`Backend::dot`], [`Backend::update`],
//! [`Backend::decay`]) take slices, so one compiled kernel serves every layer size.

mod columns;
mod config;
mod fixed;
mod float;
mod narrow;
#[cfg(feature = "reference")]
mod reference;
mod rows;
mod scalar;
mod word;

pub use config::{container_bits, ClassSpec, ConfigError, FixedConfig, LayerFormats};
pub use fixed::{Fixed, FixedCore, Kernels, Lanes, Narrow};
pub use float::Float;
#[cfg(feature = "reference")]
pub use reference::{FixedRef, Scalar};
pub use word::Word;

use core::cmp::Ordering;

use crate::class::{Class, Counters, Tag};

/// The arithmetic a learning rule needs.
pub trait Backend {
    /// A stored value: `f32`, or a raw fixed-point word in an `i8`, `i16` or `i32`.
    type S: Copy + Default + PartialOrd + core::fmt::Debug;

    /// The real `x` in the format of `t` (an edge operation: data, initial weights, constants).
    fn encode(&mut self, t: Tag, x: f32) -> Self::S;
    /// The real value of `v`, a value of tag `t`.
    fn decode(&self, t: Tag, v: Self::S) -> f32;
    /// Selects the weight layer (0-based) that subsequent events are counted against.
    fn set_layer(&mut self, layer: usize);

    /// `Σ_i a[i·stride] · b[i] (+ bias)` accumulated in the accumulator, rounded once into `out`.
    /// Uses `b.len()` terms; `a` must hold `(b.len() - 1) · stride + 1` values or more.
    #[allow(clippy::too_many_arguments)]
    fn dot(
        &mut self,
        out: Tag,
        at: Tag,
        a: &[Self::S],
        stride: usize,
        bt: Tag,
        b: &[Self::S],
        bias: Option<(Tag, Self::S)>,
    ) -> Self::S;
    /// The linear map `out[r] = Σ_c m[r·cols + c] · x[c] (+ bias[r])`, `m` row-major with
    /// `cols = x.len()` columns, each row rounded once into `ot`. Defined as one
    /// [`Backend::dot`] per row, which is what this default does; a back end may compute it
    /// another way only if every result is the same.
    #[allow(clippy::too_many_arguments)]
    fn dot_rows(
        &mut self,
        ot: Tag,
        mt: Tag,
        m: &[Self::S],
        xt: Tag,
        x: &[Self::S],
        bias: Option<(Tag, &[Self::S])>,
        out: &mut [Self::S],
    ) {
        rows_by_dots(self, ot, mt, m, xt, x, bias, out);
    }
    /// The transposed product `out[j] = Σ_i a[i·stride + j] · b[i]` for every `j < out.len()`,
    /// each rounded once into `ot` (`a` row-major with `stride` columns, as in a backward pass).
    /// Defined as one strided [`Backend::dot`] per output, which is what this default does; a
    /// back end may compute it another way only if every result is the same.
    #[allow(clippy::too_many_arguments)]
    fn dot_columns(
        &mut self,
        ot: Tag,
        at: Tag,
        a: &[Self::S],
        stride: usize,
        bt: Tag,
        b: &[Self::S],
        out: &mut [Self::S],
    ) {
        columns_by_dots(self, ot, at, a, stride, bt, b, out);
    }
    /// `x · y` formed exactly, rounded once into `out`.
    fn mul(&mut self, out: Tag, xt: Tag, x: Self::S, yt: Tag, y: Self::S) -> Self::S;
    /// `x + y` formed exactly, rounded once into `out`.
    fn add(&mut self, out: Tag, xt: Tag, x: Self::S, yt: Tag, y: Self::S) -> Self::S;
    /// `x - y` formed exactly, rounded once into `out`.
    fn sub(&mut self, out: Tag, xt: Tag, x: Self::S, yt: Tag, y: Self::S) -> Self::S;
    /// `x · 2^k` in the format of `t` (a shifter).
    fn shift(&mut self, t: Tag, x: Self::S, k: i32) -> Self::S;
    /// `x` (of tag `xt`) rounded once into the format of `out`: a realigning shifter, the
    /// identity when both tags have the same format. Not an arithmetic operation (no energy).
    fn convert(&mut self, out: Tag, xt: Tag, x: Self::S) -> Self::S;
    /// The exact order of `x` (tag `xt`) and `y` (tag `yt`), as `partial_cmp` of the reals.
    fn cmp(&self, xt: Tag, x: Self::S, yt: Tag, y: Self::S) -> Option<Ordering>;
    /// The local update of one weight row: `row[j] += step · x[j]`, where
    /// `step = η · δ` is rounded once into the step register and each product once into `wt`.
    /// `η` is a global [`Class::Rate`] value. Counts attempted (exact increment non-zero),
    /// lost and saturated updates against the class of `wt`.
    #[allow(clippy::too_many_arguments)]
    fn update(
        &mut self,
        wt: Tag,
        row: &mut [Self::S],
        eta: Self::S,
        dt: Tag,
        delta: Self::S,
        xt: Tag,
        x: &[Self::S],
    );
    /// Weight decay of one row: `row[j] -= k · row[j]`, `k` a global [`Class::Rate`] value.
    fn decay(&mut self, wt: Tag, row: &mut [Self::S], k: Self::S);
    /// A noise value `amp · z / 65536` in the format of `out`, `amp` a global
    /// [`Class::Noise`] value and `z` an integer draw such as
    /// [`crate::rng::Stream::irwin_hall4`].
    fn noise(&mut self, out: Tag, amp: Self::S, z: i32) -> Self::S;

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

    /// `x >= y`, exactly across formats.
    fn ge(&self, xt: Tag, x: Self::S, yt: Tag, y: Self::S) -> bool {
        matches!(
            self.cmp(xt, x, yt, y),
            Some(Ordering::Greater | Ordering::Equal)
        )
    }
    /// `x <= y`, exactly across formats.
    fn le(&self, xt: Tag, x: Self::S, yt: Tag, y: Self::S) -> bool {
        matches!(
            self.cmp(xt, x, yt, y),
            Some(Ordering::Less | Ordering::Equal)
        )
    }
}

/// [`Backend::dot_columns`] as its definition: one strided dot per output.
#[allow(clippy::too_many_arguments)]
pub(crate) fn columns_by_dots<B: Backend + ?Sized>(
    be: &mut B,
    ot: Tag,
    at: Tag,
    a: &[B::S],
    stride: usize,
    bt: Tag,
    b: &[B::S],
    out: &mut [B::S],
) {
    for (j, o) in out.iter_mut().enumerate() {
        *o = be.dot(ot, at, a.get(j..).unwrap_or_default(), stride, bt, b, None);
    }
}

/// [`Backend::dot_rows`] as its definition: one dot per row.
#[allow(clippy::too_many_arguments)]
pub(crate) fn rows_by_dots<B: Backend + ?Sized>(
    be: &mut B,
    ot: Tag,
    mt: Tag,
    m: &[B::S],
    xt: Tag,
    x: &[B::S],
    bias: Option<(Tag, &[B::S])>,
    out: &mut [B::S],
) {
    let cols = x.len();
    for (r, (o, row)) in out.iter_mut().zip(m.chunks_exact(cols.max(1))).enumerate() {
        let b = bias.and_then(|(c, b)| b.get(r).map(|&v| (c, v)));
        *o = be.dot(ot, mt, row, 1, xt, x, b);
    }
}
