//! The element-by-element fixed-point helpers the reference back end is built from, which
//! the fast back end also uses wherever its lane kernels' bounds do not hold: one copy, so
//! the two agree there by construction.

use core::cmp::Ordering;

use super::Word;
use crate::format::Format;
use crate::rng::{Position, Thresholds};
use crate::round::{self, Rounding};

/// Shifts a product right by `s` (1 to 62) bits with `mode`, in 64-bit integers.
#[inline(always)]
pub(super) fn shift_i64(p: i64, s: u32, mode: Rounding, rng: &mut impl Thresholds) -> i64 {
    let q = p >> s;
    let rem = p & ((1i64 << s) - 1);
    match mode {
        Rounding::Floor => q,
        Rounding::NearestEven => {
            let half = 1i64 << (s - 1);
            q + i64::from(rem > half || (rem == half && q & 1 == 1))
        }
        Rounding::Stochastic => {
            if rem == 0 {
                q
            } else {
                q + i64::from(rng.bits(s) < rem as u64)
            }
        }
    }
}

/// Calls `f` with each product `a[i·stride] · b[i]`, formed exactly in `i64`.
#[inline(always)]
pub(super) fn each_product<W: Word>(a: &[W], stride: usize, b: &[W], mut f: impl FnMut(i64)) {
    if stride == 1 {
        for (x, y) in a.iter().zip(b) {
            f(x.get() * y.get());
        }
    } else {
        // `max(1)`: `step_by(0)` would panic (callers never pass 0).
        for (x, y) in a.iter().step_by(stride.max(1)).zip(b) {
            f(x.get() * y.get());
        }
    }
}

pub(super) const FLOOR: u8 = 0;
pub(super) const NEAREST: u8 = 1;
pub(super) const STOCHASTIC: u8 = 2;

/// `p >> sh` rounded by `MODE`, as [`shift_i64`] (`mask` and `half`: the remainder's mask
/// and half its range, hoisted by the caller), a stochastic threshold taken at position `n`
/// under `key` only when there is a remainder.
#[inline(always)]
fn shift_mode<const MODE: u8>(p: i64, sh: u32, mask: i64, half: i64, (key, n): (u64, u64)) -> i64 {
    let (q, rem) = (p >> sh, p & mask);
    match MODE {
        FLOOR => q,
        NEAREST => q + i64::from(rem > half || (rem == half && q & 1 == 1)),
        _ => {
            if rem == 0 {
                q
            } else {
                let at = Position { key, n, lane: 0 };
                q + i64::from(at.threshold_bits(sh) < rem as u64)
            }
        }
    }
}

/// The hot loop of [`Backend::update`] for shifts of 1 to 62 bits, specialised per rounding
/// mode: `row[j] += round((s · x[j]) >> sh)` in `i64` (exact: |s · x| <= 2^62, so the
/// increment and the new value stay far inside `i64`). Element `j` rounds at position
/// `base + j` under `key`. Returns `(attempted, lost, saturated)`: attempted updates are
/// those with a non-zero exact increment (a non-zero input; the caller checks the step).
#[inline(always)]
pub(super) fn update_row<W: Word, const MODE: u8>(
    row: &mut [W],
    x: &[W],
    s: i64,
    sh: u32,
    format: Format,
    (key, base): (u64, u64),
) -> (u32, u32, u32) {
    let (lo, hi) = (format.raw_min(), format.raw_max());
    let mask = (1i64 << sh) - 1;
    let half = 1i64 << (sh - 1);
    let (mut att, mut lost, mut sat) = (0u32, 0u32, 0u32);
    for (j, (w, xj)) in row.iter_mut().zip(x).enumerate() {
        let xj = xj.get();
        if xj == 0 {
            continue;
        }
        att += 1;
        let p = s * xj;
        let inc = shift_mode::<MODE>(p, sh, mask, half, (key, base.wrapping_add(j as u64)));
        let new = w.get() + inc;
        let fitted = if new < lo || new > hi {
            sat += 1;
            round::fit(i128::from(new), format).raw
        } else {
            lost += u32::from(inc == 0);
            new
        };
        *w = W::put(fitted);
    }
    (att, lost, sat)
}

/// The hot loop of [`Backend::decay`]: `row[j] -= round((k · row[j]) >> sh)`, as
/// [`update_row`]. Returns `(attempted, lost, saturated)`, attempted those with a non-zero
/// exact decrement (a non-zero weight; the caller checks `k`).
#[inline(always)]
pub(super) fn decay_row<W: Word, const MODE: u8>(
    row: &mut [W],
    k: i64,
    sh: u32,
    format: Format,
    (key, base): (u64, u64),
) -> (u32, u32, u32) {
    let (lo, hi) = (format.raw_min(), format.raw_max());
    let mask = (1i64 << sh) - 1;
    let half = 1i64 << (sh - 1);
    let (mut att, mut lost, mut sat) = (0u32, 0u32, 0u32);
    for (j, w) in row.iter_mut().enumerate() {
        let old = w.get();
        let p = k * old;
        att += u32::from(p != 0);
        let dec = shift_mode::<MODE>(p, sh, mask, half, (key, base.wrapping_add(j as u64)));
        lost += u32::from(dec == 0 && p != 0);
        let new = old - dec;
        let fitted = if new < lo || new > hi {
            sat += 1;
            round::fit(i128::from(new), format).raw
        } else {
            new
        };
        *w = W::put(fitted);
    }
    (att, lost, sat)
}

/// The same rounding for any shift, through the exact 128-bit path.
#[inline]
pub(super) fn shift_any(p: i64, s: i32, mode: Rounding, rng: &mut impl Thresholds) -> i128 {
    if (1..=62).contains(&s) {
        i128::from(shift_i64(p, s as u32, mode, rng))
    } else if s <= 0 {
        round::shift_round(i128::from(p), s, mode, rng)
    } else if s >= 64 {
        // Only the sign survives; use the general rule.
        round::shift_round(i128::from(p), s, mode, rng)
    } else {
        // s == 63: the remainder needs 63 bits of threshold.
        let q = i128::from(p) >> 63;
        let rem = i128::from(p) - (q << 63);
        match mode {
            Rounding::Floor => q,
            Rounding::NearestEven => {
                let half = 1i128 << 62;
                q + i128::from(rem > half || (rem == half && q & 1 == 1))
            }
            Rounding::Stochastic => {
                if rem == 0 {
                    q
                } else {
                    q + i128::from(i128::from(rng.bits(63)) < rem)
                }
            }
        }
    }
}

/// `x · 2^-d` against `y` exactly (`x` has `d` more fraction bits than `y`), in 128 bits:
/// words of at most 32 bits shifted by at most 40.
#[cold]
#[inline(never)]
pub(super) fn cmp_wide(x: i64, y: i64, d: i32) -> Ordering {
    let s = d.unsigned_abs().min(64);
    if d > 0 {
        i128::from(x).cmp(&(i128::from(y) << s))
    } else {
        (i128::from(x) << s).cmp(&i128::from(y))
    }
}
