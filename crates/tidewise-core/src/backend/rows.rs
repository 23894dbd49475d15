//! Row kernels of the fixed back end in 32-bit lanes: the weight update
//! `row[j] += round((s · x[j]) >> sh)` and the decay `row[j] -= round((k · row[j]) >> sh)`,
//! written without data-dependent branches so that the compiler vectorises them, the rounding
//! mode and the overflow policy fixed per instance, and a whole row's stochastic-rounding
//! thresholds formed from [`RowKeys`] position by position.
//!
//! The caller proves the 32-bit bound ([`fits_i32`]): every product, increment and new value
//! then lies inside `i32`, and the results are those of the 64-bit element-by-element form
//! (the reference back end), counters included.

use super::Word;
use crate::format::Format;
use crate::rng::RowKeys;

pub(super) use super::scalar::{FLOOR, NEAREST, STOCHASTIC};

/// Whether a row kernel of factor `s` and shift `sh` stays inside `i32` for every pair of
/// container words: `|s| · 2^(BITS−1)` bounds a product, and a new value is at most a
/// container bound plus the product's magnitude plus one (the rounding).
///
/// `(|s| + 1) · 2^(BITS−1) + 1 < 2^31` holds exactly when `|s| <= 2^(32−BITS) − 2` (the left
/// side is a multiple of 2^(BITS−1)), which needs no multiply (a library call on the
/// Cortex-M0).
#[inline]
pub(super) fn fits_i32<W: Word>(s: i64, sh: u32) -> bool {
    (1..=31).contains(&sh) && s.unsigned_abs() + 2 <= 1u64 << (32 - W::BITS)
}

/// Runs `rows::$kernel::<W, MODE, WRAP>($args)` for a run-time rounding mode and overflow policy.
macro_rules! by_mode {
    ($kernel:ident, $w:ty, $rounding:expr, $overflow:expr, ($($arg:expr),*)) => {{
        use $crate::format::Overflow::{Saturate, Wrap};
        use $crate::round::Rounding::{Floor, NearestEven, Stochastic};
        use $crate::backend::rows::{FLOOR, NEAREST, STOCHASTIC};
        match ($rounding, $overflow) {
            (Floor, Saturate) => $crate::backend::rows::$kernel::<$w, FLOOR, false>($($arg),*),
            (Floor, Wrap) => $crate::backend::rows::$kernel::<$w, FLOOR, true>($($arg),*),
            (NearestEven, Saturate) => $crate::backend::rows::$kernel::<$w, NEAREST, false>($($arg),*),
            (NearestEven, Wrap) => $crate::backend::rows::$kernel::<$w, NEAREST, true>($($arg),*),
            (Stochastic, Saturate) => $crate::backend::rows::$kernel::<$w, STOCHASTIC, false>($($arg),*),
            (Stochastic, Wrap) => $crate::backend::rows::$kernel::<$w, STOCHASTIC, true>($($arg),*),
        }
    }};
}
pub(super) use by_mode;

/// `q + 1` when the dropped `rem` (of `sh` bits) rounds `q` up under `MODE`; `t` is the
/// element's 32-bit threshold (used by stochastic rounding only).
#[inline(always)]
fn rounds_up<const MODE: u8>(q: i32, rem: u32, sh: u32, t: u32) -> bool {
    match MODE {
        FLOOR => false,
        NEAREST => {
            let half = 1u32 << (sh - 1);
            (rem > half) | ((rem == half) & (q & 1 == 1))
        }
        // A zero remainder never rounds up: no threshold is below zero.
        _ => (t >> (32 - sh)) < rem,
    }
}

/// `v` fitted into `[lo, hi]`: clamped, or wrapped to the low `32 − unused` bits.
#[inline(always)]
fn fit<const WRAP: bool>(v: i32, lo: i32, hi: i32, unused: u32) -> i32 {
    if WRAP {
        (v << unused) >> unused
    } else {
        v.max(lo).min(hi)
    }
}

/// The format's bounds and the unused top bits of its word in 32 bits.
#[inline(always)]
fn bounds(format: Format) -> (i32, i32, u32) {
    (
        format.raw_min() as i32,
        format.raw_max() as i32,
        32 - u32::from(format.word()),
    )
}

/// The update of one row, `(attempted, lost, saturated)` as the reference counts them: an
/// element with a zero input is left alone and not attempted; an attempted one is lost when
/// its increment rounds to zero and saturated when the new value leaves the format.
/// Element `j` rounds against threshold `keys.at(j)`.
#[inline(always)]
pub(super) fn update<W: Word, const MODE: u8, const WRAP: bool>(
    row: &mut [W],
    x: &[W],
    s: i64,
    sh: u32,
    format: Format,
    keys: RowKeys,
) -> (u32, u32, u32) {
    let (lo, hi, unused) = bounds(format);
    let s = s as i32;
    let mask = ((1u64 << sh) - 1) as u32;
    let (mut att, mut lost, mut sat) = (0u32, 0u32, 0u32);
    for (j, (w, xj)) in row.iter_mut().zip(x).enumerate() {
        let (old, xj) = (w.get32(), xj.get32());
        // Inside `i32` by `fits_i32`: plain wrapping arithmetic keeps the loop branch-free.
        let p = s.wrapping_mul(xj);
        let (q, rem) = (p >> sh, p as u32 & mask);
        let t = if MODE == STOCHASTIC {
            keys.at(j as u32)
        } else {
            0
        };
        let inc = q.wrapping_add(i32::from(rounds_up::<MODE>(q, rem, sh, t)));
        let new = old.wrapping_add(inc);
        let out = (new < lo) | (new > hi);
        let live = xj != 0;
        *w = W::put32(if live {
            fit::<WRAP>(new, lo, hi, unused)
        } else {
            old
        });
        att = att.wrapping_add(u32::from(live));
        sat = sat.wrapping_add(u32::from(live & out));
        lost = lost.wrapping_add(u32::from(live & !out & (inc == 0)));
    }
    (att, lost, sat)
}

/// The decay of one row by `k`, `(attempted, lost, saturated)` as the reference counts them:
/// attempted when the exact decrement is non-zero, lost when it rounds to zero.
#[inline(always)]
pub(super) fn decay<W: Word, const MODE: u8, const WRAP: bool>(
    row: &mut [W],
    k: i64,
    sh: u32,
    format: Format,
    keys: RowKeys,
) -> (u32, u32, u32) {
    let (lo, hi, unused) = bounds(format);
    let k = k as i32;
    let mask = ((1u64 << sh) - 1) as u32;
    let (mut att, mut lost, mut sat) = (0u32, 0u32, 0u32);
    for (j, w) in row.iter_mut().enumerate() {
        let old = w.get32();
        let p = k.wrapping_mul(old);
        let (q, rem) = (p >> sh, p as u32 & mask);
        let t = if MODE == STOCHASTIC {
            keys.at(j as u32)
        } else {
            0
        };
        let dec = q.wrapping_add(i32::from(rounds_up::<MODE>(q, rem, sh, t)));
        let new = old.wrapping_sub(dec);
        let out = (new < lo) | (new > hi);
        let live = p != 0;
        *w = W::put32(fit::<WRAP>(new, lo, hi, unused));
        att = att.wrapping_add(u32::from(live));
        lost = lost.wrapping_add(u32::from(live & (dec == 0)));
        sat = sat.wrapping_add(u32::from(out));
    }
    (att, lost, sat)
}

#[cfg(test)]
mod tests {
    use super::fits_i32;

    /// The bound as it is defined, in 128-bit integers.
    fn defined(bits: u32, s: i64) -> bool {
        let word = 1i128 << (bits - 1);
        i128::from(s.unsigned_abs()) * word + word + 1 < 1i128 << 31
    }

    #[test]
    fn the_bound_without_a_multiply_is_the_bound() {
        for s in (-70_000i64..70_000).chain([i64::MIN, i64::MAX, 1 << 24, (1 << 24) - 2]) {
            for sh in [0, 1, 31, 32] {
                let shift_ok = (1..=31).contains(&sh);
                assert_eq!(fits_i32::<i8>(s, sh), shift_ok && defined(8, s), "{s}");
                assert_eq!(fits_i32::<i16>(s, sh), shift_ok && defined(16, s), "{s}");
                assert_eq!(fits_i32::<i32>(s, sh), shift_ok && defined(32, s), "{s}");
            }
        }
        for s in (1i64 << 24) - 5..(1 << 24) + 5 {
            assert_eq!(fits_i32::<i8>(s, 3), defined(8, s), "{s}");
        }
    }
}
