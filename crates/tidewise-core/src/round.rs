//! Rounding a wide exact intermediate into a destination format, in integers only.
//!
//! Every fixed-point result in tidewise is formed exactly (in `i64` or `i128`) and then
//! passes once through [`requantize`]: an arithmetic shift with the chosen rounding, then the
//! destination's overflow policy. Conversion from `f32` uses the same path (the float's
//! mantissa and exponent are an exact integer and a shift), so no float operation decides a
//! fixed-point result.

use crate::format::{Format, Overflow};
use crate::rng::Thresholds;

/// How the bits below the destination's resolution are dropped.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum Rounding {
    /// Round to nearest, ties to even.
    NearestEven,
    /// Truncate toward minus infinity: what a bare arithmetic shifter does.
    Floor,
    /// Round up with probability equal to the dropped fraction, against a uniform threshold
    /// (counter-based in the fixed back end: `rng::threshold`), so the expected result
    /// equals the exact value.
    Stochastic,
}

impl Rounding {
    /// The names accepted by [`Rounding::parse`].
    pub const NAMES: [&'static str; 3] = ["nearest", "floor", "stochastic"];

    /// Parses `nearest`, `floor` or `stochastic`.
    pub fn parse(name: &str) -> Option<Rounding> {
        match name {
            "nearest" => Some(Rounding::NearestEven),
            "floor" => Some(Rounding::Floor),
            "stochastic" => Some(Rounding::Stochastic),
            _ => None,
        }
    }

    /// The name [`Rounding::parse`] accepts.
    pub const fn name(self) -> &'static str {
        match self {
            Rounding::NearestEven => "nearest",
            Rounding::Floor => "floor",
            Rounding::Stochastic => "stochastic",
        }
    }
}

/// The outcome of fitting a value into a format.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Fitted {
    /// The raw word, sign-extended.
    pub raw: i64,
    /// The value was outside the range and was clamped or wrapped.
    pub overflowed: bool,
}

/// Shifts `v` right by `shift` bits (left when negative) with `mode`, exactly.
///
/// Right shifts of 127 bits or more leave only the sign and the rounding decision.
pub fn shift_round(v: i128, shift: i32, mode: Rounding, rng: &mut impl Thresholds) -> i128 {
    if shift <= 0 {
        let s = shift.unsigned_abs();
        return if v == 0 {
            0
        } else if s >= 126 || v.unsigned_abs().leading_zeros() <= s + 1 {
            // Beyond any format's range: a saturated stand-in of the right sign.
            if v < 0 {
                i128::MIN / 2
            } else {
                i128::MAX / 2
            }
        } else {
            v << s
        };
    }
    let s = shift as u32;
    if s >= 127 {
        return match mode {
            Rounding::Floor => {
                if v < 0 {
                    -1
                } else {
                    0
                }
            }
            // |v| < 2^127 <= 2^(s-1) ... the value is below half an LSB, or negative and tiny.
            Rounding::NearestEven => 0,
            // |v| / 2^s < 2^-(s-127): the draw rounds a negative value up to 0 and leaves a
            // positive one at 0 except with that (negligible) probability.
            Rounding::Stochastic => 0,
        };
    }
    let q = v >> s;
    let rem = v - (q << s); // in [0, 2^s)
    match mode {
        Rounding::Floor => q,
        Rounding::NearestEven => {
            let half = 1i128 << (s - 1);
            if rem > half || (rem == half && q & 1 == 1) {
                q + 1
            } else {
                q
            }
        }
        Rounding::Stochastic => {
            if rem == 0 {
                return q;
            }
            // Compare the dropped fraction with a uniform threshold of the same width
            // (64 random bits; remainders wider than that compare on their top 64 bits).
            let (r, t) = if s <= 64 {
                (rem as u128, u128::from(rng.bits(s)))
            } else {
                ((rem >> (s - 64)) as u128, u128::from(rng.bits(64)))
            };
            if t < r {
                q + 1
            } else {
                q
            }
        }
    }
}

/// [`fit`] of a 64-bit value: the common in-range case without 128-bit comparisons (four-word
/// sequences on a 32-bit core), the rest out of line.
#[inline]
pub fn fit64(v: i64, format: Format) -> Fitted {
    if v >= format.raw_min() && v <= format.raw_max() {
        return Fitted {
            raw: v,
            overflowed: false,
        };
    }
    fit_cold(v, format)
}

#[cold]
#[inline(never)]
fn fit_cold(v: i64, format: Format) -> Fitted {
    fit(i128::from(v), format)
}

/// Fits an exact integer into `format` by its overflow policy.
pub fn fit(v: i128, format: Format) -> Fitted {
    let (lo, hi) = (i128::from(format.raw_min()), i128::from(format.raw_max()));
    if v >= lo && v <= hi {
        return Fitted {
            raw: v as i64,
            overflowed: false,
        };
    }
    let raw = match format.overflow() {
        Overflow::Saturate => {
            if v < lo {
                lo as i64
            } else {
                hi as i64
            }
        }
        Overflow::Wrap => {
            let unused = 128 - u32::from(format.word());
            ((v << unused) >> unused) as i64
        }
    };
    Fitted {
        raw,
        overflowed: true,
    }
}

/// Rounds `v` (an exact value with `v_frac` fraction bits) into `format`.
pub fn requantize(
    v: i128,
    v_frac: i32,
    format: Format,
    mode: Rounding,
    rng: &mut impl Thresholds,
) -> Fitted {
    let shift = v_frac - i32::from(format.frac());
    let shifted = shift_round(v, shift, mode, rng);
    if shift < 0 && format.overflow() == Overflow::Wrap {
        // A left shift past 128 bits gives a saturated stand-in, but wrapping keeps the
        // exact value's low bits, which a 128-bit wrapping shift still has.
        let s = shift.unsigned_abs();
        let low = if s >= 128 { 0 } else { v.wrapping_shl(s) };
        return Fitted {
            raw: fit(low, format).raw,
            overflowed: fit(shifted, format).overflowed,
        };
    }
    fit(shifted, format)
}

/// Splits a finite `f32` into an exact signed integer mantissa and a power-of-two exponent.
/// Returns `None` for NaN; infinities come back as a mantissa far outside every range.
pub fn decompose_f32(x: f32) -> Option<(i128, i32)> {
    if x.is_nan() {
        return None;
    }
    let bits = x.to_bits();
    let neg = bits >> 31 == 1;
    let exp = ((bits >> 23) & 0xff) as i32;
    let man = bits & 0x7f_ffff;
    let (m, e) = if exp == 0xff {
        (1i128 << 100, 0) // infinity: beyond every format
    } else if exp == 0 {
        (i128::from(man), -149)
    } else {
        (i128::from(man | 0x80_0000), exp - 150)
    };
    Some((if neg { -m } else { m }, e))
}

/// Converts `x` into `format` with `mode`; NaN becomes zero and is reported as an overflow.
pub fn from_f32(x: f32, format: Format, mode: Rounding, rng: &mut impl Thresholds) -> Fitted {
    match decompose_f32(x) {
        None => Fitted {
            raw: 0,
            overflowed: true,
        },
        Some((m, e)) => requantize(m, -e, format, mode, rng),
    }
}

/// The real value of a raw word, rounded to the nearest `f32` (exact for words up to 24 bits).
///
/// A raw value under 2^24 in magnitude is exact in `f32`, and so is its scaling by 2^−frac
/// while the result stays normal: that is an exponent change, made on the bits (no
/// floating-point multiply, which is a library call on a core without an FPU). Everything
/// else goes through `f64`, which gives the same value where both apply.
pub fn to_f32(raw: i64, format: Format) -> f32 {
    let frac = u32::from(format.frac());
    if raw == 0 {
        return 0.0;
    }
    if raw.unsigned_abs() < 1 << 24 {
        let bits = (raw as i32 as f32).to_bits();
        if (bits >> 23) & 0xff > frac {
            return f32::from_bits(bits - (frac << 23));
        }
    }
    to_f32_wide(raw, format)
}

/// [`to_f32`] through `f64`: exact scaling, one rounding.
fn to_f32_wide(raw: i64, format: Format) -> f32 {
    (raw as f64 * crate::format::pow2(-i32::from(format.frac()))) as f32
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::Stream;

    fn q15() -> Format {
        Format::new(16, 15).unwrap()
    }

    #[test]
    fn decoding_on_the_exponent_equals_decoding_through_f64() {
        let mut g = Stream::new(11, 0);
        for frac in 0..=crate::format::MAX_FRAC {
            let f = Format::new(32, frac.min(31)).unwrap();
            let f = if frac > 31 {
                Format::new(16, frac).unwrap()
            } else {
                f
            };
            let edges = [
                0i64,
                1,
                -1,
                (1 << 24) - 1,
                1 << 24,
                -(1 << 24),
                i32::MIN.into(),
            ];
            let draws = (0..2000).map(|_| i64::from(g.next_u32() as i32) >> (g.next_u32() % 32));
            for raw in edges.into_iter().chain(draws) {
                let got = to_f32(raw, f);
                let want = to_f32_wide(raw, f);
                assert_eq!(got.to_bits(), want.to_bits(), "{raw} frac {frac}");
            }
        }
    }

    #[test]
    fn rounding_probe_of_half_lsb_products() {
        // Exact product a/2 LSB (a · 0x4000 in Q15): values derived by hand from the rounding
        // modes' definitions (a fact of the trade, docs/references.md).
        let mut rng = Stream::new(1, 0);
        let cases = [
            (1, 0, 0),
            (3, 1, 2),
            (5, 2, 2),
            (-1, -1, 0),
            (-3, -2, -2),
            (-5, -3, -2),
        ];
        for (a, floor, even) in cases {
            let p = i128::from(a) * 0x4000;
            assert_eq!(
                requantize(p, 30, q15(), Rounding::Floor, &mut rng).raw,
                floor
            );
            assert_eq!(
                requantize(p, 30, q15(), Rounding::NearestEven, &mut rng).raw,
                even
            );
        }
    }

    #[test]
    fn saturate_and_wrap() {
        let f = Format::new(8, 0).unwrap();
        assert_eq!(fit(300, f).raw, 127);
        assert_eq!(fit(300, f.overflowing(Overflow::Wrap)).raw, 44);
        assert_eq!(fit(-129, f.overflowing(Overflow::Wrap)).raw, 127);
        assert!(fit(-129, f).overflowed);
    }

    #[test]
    fn huge_shifts_do_not_panic() {
        let mut rng = Stream::new(2, 0);
        for mode in [Rounding::Floor, Rounding::NearestEven, Rounding::Stochastic] {
            for v in [i128::MIN / 4, -1, 0, 1, i128::MAX / 4] {
                for s in [-200, -127, -64, 0, 1, 64, 126, 127, 300] {
                    let _ = requantize(v, s, q15(), mode, &mut rng);
                }
            }
        }
        assert_eq!(
            from_f32(f32::INFINITY, q15(), Rounding::Floor, &mut rng).raw,
            32767
        );
        assert_eq!(
            from_f32(f32::NEG_INFINITY, q15(), Rounding::Floor, &mut rng).raw,
            -32768
        );
        assert!(from_f32(f32::NAN, q15(), Rounding::Floor, &mut rng).overflowed);
    }
}
