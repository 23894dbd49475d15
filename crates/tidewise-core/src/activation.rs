//! Hardware-friendly activations, each with its derivative and, where invertible, its inverse.
//!
//! All of them are built from comparisons, additions, shifts and at most one multiply, using
//! the back end's operations, so float and fixed arms evaluate the same function:
//!
//! | name | value | derivative | inverse | bound |
//! |---|---|---|---|---|
//! | `identity` | a | 1 | yes | exact |
//! | `hard-tanh` | clamp(a, -1, 1) | 1 inside (-1, 1), else 0 | no | exact |
//! | `leaky-relu` | a if a ≥ 0, else a/4 (a shift) | 1 or 1/4 | yes (a shift) | exact |
//! | `sigmoid` | clamp(a/4 + 1/2, 0, 1) | 1/4 inside, else 0 | no | ≤ 0.12 from the logistic (at a = ±2) |
//! | `tanh` | linear interpolation of a 17-entry table on [-4, 4] | slope of the segment | no | ≤ 0.025 from tanh |
//!
//! The bounds are in real arithmetic; a fixed-point format adds its own rounding. The
//! `tanh` table (17 values in the activation format) is stored with the network and counted
//! in its memory figure.

use crate::backend::Backend;
use crate::class::{Class, Tag};

/// An activation function.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum Activation {
    /// f(a) = a.
    Identity,
    /// f(a) = clamp(a, -1, 1).
    HardTanh,
    /// f(a) = a for a ≥ 0, a/4 below: invertible, and the slope is a shift.
    LeakyRelu,
    /// Piecewise-linear logistic: clamp(a/4 + 1/2, 0, 1).
    Sigmoid,
    /// Tanh from a 17-entry table with linear interpolation.
    Tanh,
}

/// Table points of the `tanh` form: tanh(-4 + k/2) for k = 0..=16, computed in double
/// precision (a value of the trade, reproducible with any libm) and rounded to `f32`.
pub const TANH_TABLE: [f32; 17] = [
    -0.999_329_3,
    -0.998_177_9,
    -0.995_054_8,
    -0.986_614_3,
    -0.964_027_6,
    -0.905_148_25,
    -0.761_594_2,
    -0.462_117_16,
    0.0,
    0.462_117_16,
    0.761_594_2,
    0.905_148_25,
    0.964_027_6,
    0.986_614_3,
    0.995_054_8,
    0.998_177_9,
    0.999_329_3,
];

/// Number of values in the `tanh` table.
pub const TANH_POINTS: usize = TANH_TABLE.len();

/// Leaky slope as a shift: a/4.
const LEAKY_SHIFT: i32 = 2;

impl Activation {
    /// Names accepted by [`Activation::parse`].
    pub const NAMES: [&'static str; 5] = ["identity", "hard-tanh", "leaky-relu", "sigmoid", "tanh"];

    /// Parses one of [`Activation::NAMES`].
    pub fn parse(name: &str) -> Option<Activation> {
        Some(match name {
            "identity" => Activation::Identity,
            "hard-tanh" => Activation::HardTanh,
            "leaky-relu" => Activation::LeakyRelu,
            "sigmoid" => Activation::Sigmoid,
            "tanh" => Activation::Tanh,
            _ => return None,
        })
    }

    /// The name [`Activation::parse`] accepts.
    pub const fn name(self) -> &'static str {
        match self {
            Activation::Identity => "identity",
            Activation::HardTanh => "hard-tanh",
            Activation::LeakyRelu => "leaky-relu",
            Activation::Sigmoid => "sigmoid",
            Activation::Tanh => "tanh",
        }
    }

    /// Whether [`Activation::inverse`] exists.
    pub const fn invertible(self) -> bool {
        matches!(self, Activation::Identity | Activation::LeakyRelu)
    }

    /// Values this activation keeps in a table (counted in the memory figure).
    pub const fn table_len(self) -> usize {
        match self {
            Activation::Tanh => TANH_POINTS,
            _ => 0,
        }
    }
}

/// Constants the activations need, encoded once in the activation format.
#[derive(Clone, Copy, Debug)]
pub struct ActConsts<S> {
    zero: S,
    one: S,
    half: S,
    quarter: S,
    /// Knot positions -4 + k/2 of the table (an address decoder in hardware; not stored).
    knots: [S; TANH_POINTS],
}

/// The constants an activation returns as results, converted once into one layer's format
/// (a constant hard-wired in that layer's datapath): see [`ActConsts::at`].
#[derive(Clone, Copy, Debug)]
pub struct LayerConsts<S> {
    zero: S,
    one: S,
    quarter: S,
    /// The first and last `tanh` table values (the flat ends), when there is a table.
    ends: Option<(S, S)>,
}

impl<S: Copy + Default + PartialOrd> ActConsts<S> {
    /// The constants of `self` and the ends of `table` in the format of `t`; the identity
    /// when `t` has the global activation format.
    pub fn at<B: Backend<S = S>>(&self, be: &mut B, table: &[S], t: Tag) -> LayerConsts<S> {
        let g = Tag::global(Class::Act);
        let ends = match (table.first(), table.last()) {
            (Some(&f), Some(&l)) => Some((be.convert(t, g, f), be.convert(t, g, l))),
            _ => None,
        };
        LayerConsts {
            zero: be.convert(t, g, self.zero),
            one: be.convert(t, g, self.one),
            quarter: be.convert(t, g, self.quarter),
            ends,
        }
    }

    /// Encodes the constants for back end `be`.
    pub fn new<B: Backend<S = S>>(be: &mut B) -> ActConsts<S> {
        let mut knots = [S::default(); TANH_POINTS];
        for (k, v) in knots.iter_mut().enumerate() {
            *v = be.encode(Tag::global(Class::Act), -4.0 + 0.5 * k as f32);
        }
        ActConsts {
            zero: be.encode(Tag::global(Class::Act), 0.0),
            one: be.encode(Tag::global(Class::Act), 1.0),
            half: be.encode(Tag::global(Class::Act), 0.5),
            quarter: be.encode(Tag::global(Class::Act), 0.25),
            knots,
        }
    }

    /// The value one in the activation format (saturated if the format cannot hold it).
    pub fn one(&self) -> S {
        self.one
    }
    /// Zero.
    pub fn zero(&self) -> S {
        self.zero
    }
}

/// Encodes the `tanh` table into `table` (which must hold [`TANH_POINTS`] values).
pub fn fill_tanh_table<B: Backend>(be: &mut B, table: &mut [B::S]) {
    for (v, &t) in table.iter_mut().zip(TANH_TABLE.iter()) {
        *v = be.encode(Tag::global(Class::Act), t);
    }
}

impl Activation {
    /// `(f(a), f'(a))` for a pre-activation `a` of tag `t` (the layer's activations); both
    /// results are in the format of `t`. `table` is the encoded `tanh` table (empty for the
    /// others). The constants `k` and the table are global activation values: comparisons with
    /// them are exact across formats; `lk` holds the constants returned as results, in the
    /// format of `t` (`k.at(be, table, t)`).
    #[inline]
    pub fn apply<B: Backend>(
        self,
        be: &mut B,
        k: &ActConsts<B::S>,
        lk: &LayerConsts<B::S>,
        table: &[B::S],
        a: B::S,
        t: Tag,
    ) -> (B::S, B::S) {
        let g = Tag::global(Class::Act);
        match self {
            Activation::Identity => (a, lk.one),
            Activation::HardTanh => {
                let neg_one = be.sub(g, g, k.zero, g, k.one);
                if be.ge(t, a, g, k.one) {
                    (lk.one, lk.zero)
                } else if be.le(t, a, g, neg_one) {
                    (be.convert(t, g, neg_one), lk.zero)
                } else {
                    (a, lk.one)
                }
            }
            Activation::LeakyRelu => {
                if be.ge(t, a, g, k.zero) {
                    (a, lk.one)
                } else {
                    (be.shift(t, a, -LEAKY_SHIFT), lk.quarter)
                }
            }
            Activation::Sigmoid => {
                let q = be.shift(t, a, -2);
                let y = be.add(t, t, q, g, k.half);
                if be.ge(t, y, g, k.one) {
                    (lk.one, lk.zero)
                } else if be.le(t, y, g, k.zero) {
                    (lk.zero, lk.zero)
                } else {
                    (y, lk.quarter)
                }
            }
            Activation::Tanh => tanh_pl(be, k, lk, table, a, t),
        }
    }

    /// `f⁻¹(h)` for the invertible activations, `h` and the result of tag `t`; `None` for
    /// the others.
    pub fn inverse<B: Backend>(
        self,
        be: &mut B,
        k: &ActConsts<B::S>,
        h: B::S,
        t: Tag,
    ) -> Option<B::S> {
        match self {
            Activation::Identity => Some(h),
            Activation::LeakyRelu => Some(if be.ge(t, h, Tag::global(Class::Act), k.zero) {
                h
            } else {
                be.shift(t, h, LEAKY_SHIFT)
            }),
            _ => None,
        }
    }
}

fn tanh_pl<B: Backend>(
    be: &mut B,
    k: &ActConsts<B::S>,
    lk: &LayerConsts<B::S>,
    table: &[B::S],
    a: B::S,
    t: Tag,
) -> (B::S, B::S) {
    let g = Tag::global(Class::Act);
    let Some((first, last)) = lk.ends else {
        return (a, lk.one);
    };
    if be.le(t, a, g, k.knots[0]) {
        return (first, lk.zero);
    }
    if be.ge(t, a, g, k.knots[TANH_POINTS - 1]) {
        return (last, lk.zero);
    }
    // The segment whose left knot is the last one at or below `a`.
    let seg = k.knots[1..TANH_POINTS - 1]
        .iter()
        .take_while(|&&x| be.le(g, x, t, a))
        .count();
    let (y0, y1) = match (table.get(seg), table.get(seg + 1)) {
        (Some(&y0), Some(&y1)) => (y0, y1),
        _ => return (last, lk.zero),
    };
    let rise = be.sub(t, g, y1, g, y0);
    let off = be.sub(t, t, a, g, k.knots[seg]);
    let x = be.shift(t, off, 1); // (a - x_k) / 0.5, in [0, 1)
    let lift = be.mul(t, t, rise, t, x);
    (be.add(t, g, y0, t, lift), be.shift(t, rise, 1))
}

#[cfg(test)]
mod tests {
    extern crate std;
    use super::*;
    use crate::backend::Float;

    fn eval(f: Activation, a: f32) -> (f32, f32) {
        let mut be = Float::new();
        let k = ActConsts::new(&mut be);
        let mut table = [0f32; TANH_POINTS];
        fill_tanh_table(&mut be, &mut table);
        let lk = k.at(&mut be, &table, Tag::act(1));
        f.apply(&mut be, &k, &lk, &table, a, Tag::act(1))
    }

    #[test]
    fn tanh_table_within_its_bound() {
        // Reference: the standard library's tanh (IEEE double), a general-purpose library.
        let mut worst = 0f64;
        for i in -6000..=6000 {
            let a = i as f32 / 1000.0;
            let (y, _) = eval(Activation::Tanh, a);
            worst = worst.max((f64::from(y) - f64::from(a).tanh()).abs());
        }
        assert!(worst <= 0.025, "worst error {worst}");
        assert!(worst > 0.01, "the bound should be tight, got {worst}");
    }

    #[test]
    fn sigmoid_within_its_bound() {
        let mut worst = 0f64;
        for i in -8000..=8000 {
            let a = f64::from(i) / 1000.0;
            let (y, _) = eval(Activation::Sigmoid, a as f32);
            worst = worst.max((f64::from(y) - 1.0 / (1.0 + (-a).exp())).abs());
        }
        assert!(worst <= 0.12, "worst error {worst}");
    }

    #[test]
    fn derivatives_match_finite_differences() {
        // Fact of the trade: away from kinks, f'(a) equals the central difference.
        for f in [
            Activation::Tanh,
            Activation::Sigmoid,
            Activation::LeakyRelu,
            Activation::HardTanh,
        ] {
            for &a in &[-2.3f32, -0.7, 0.3, 1.2, 3.1] {
                let h = 1e-3;
                let (yp, _) = eval(f, a + h);
                let (ym, _) = eval(f, a - h);
                let (_, d) = eval(f, a);
                assert!(((yp - ym) / (2.0 * h) - d).abs() < 2e-3, "{f:?} at {a}");
            }
        }
    }

    #[test]
    fn inverses_invert() {
        let mut be = Float::new();
        let k = ActConsts::new(&mut be);
        for f in [Activation::Identity, Activation::LeakyRelu] {
            for &a in &[-3.0f32, -0.5, 0.0, 0.25, 2.0] {
                let lk = k.at(&mut be, &[], Tag::act(1));
                let (y, _) = f.apply(&mut be, &k, &lk, &[], a, Tag::act(1));
                assert_eq!(f.inverse(&mut be, &k, y, Tag::act(1)), Some(a));
            }
        }
        assert_eq!(
            Activation::Tanh.inverse(&mut be, &k, 0.5, Tag::act(1)),
            None
        );
    }
}
