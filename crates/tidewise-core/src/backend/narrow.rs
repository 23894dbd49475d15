//! Kernels of the fixed back end in 32-bit arithmetic, for cores with 32-bit registers and
//! no vector unit (the Cortex-M boards): the dot product of words of up to 16 bits in a
//! 32-bit accumulator, the rounding of a result that fits `i32`, and the row update and decay
//! loops with the row's threshold keys ([`RowKeys`]) formed once per row.
//!
//! Each kernel either returns exactly what the element-by-element form (`backend/scalar.rs`)
//! returns, counters included, or declines (`None`) when its bound does not hold; the bounds
//! depend on the container, the formats and the row's step, never on a single element.

use super::{ClassSpec, Word};
use crate::format::Format;
use crate::rng::{self, Position, RowKeys};
use crate::round::{self, Rounding};

pub(super) use super::scalar::{FLOOR, NEAREST, STOCHASTIC};

/// Whether the core multiplies 32 × 32 → 64 bits in one instruction. ARMv6-M (Cortex-M0) has
/// no long multiply (nor atomic read-modify-write, which is how its target is told apart
/// here); there a 64-bit product is a library call, so the row update forms it from two
/// 32-bit products instead.
const LONG_MULTIPLY: bool = !cfg!(all(target_arch = "arm", not(target_has_atomic = "32")));

/// `start + Σ a[i·stride] · b[i]` in a 32-bit accumulator, when no partial sum leaves it:
/// [`dot_pairs`], else [`dot_terms`] when the pairs' tighter watch fired.
#[inline(always)]
pub(super) fn dot<W: Word>(
    a: &[W],
    stride: usize,
    b: &[W],
    start: i128,
    acc_hi: i128,
) -> Option<i128> {
    if W::BITS > 16 || acc_hi != i128::from(i32::MAX) {
        return None;
    }
    dot_pairs(a, stride, b, start).or_else(|| dot_terms(a, stride, b, start))
}

/// [`dot`] two terms at a time in wrapping 32-bit arithmetic, watching only the sums after
/// each pair against the tighter range [−2^30, 2^30). `None` when a watched sum (or `start`)
/// leaves it, which includes every case where a partial sum leaves the register, since:
/// a product of two words of up to 16 bits lies in [−2^30 + 2^15, 2^30], so from a watched
/// sum inside the range the sum after one more term stays inside `i32` (no overflow between
/// watches), a pair adds at most 2^31 in magnitude, and so the wrapped sum after a pair lies
/// in the range exactly when the true one does. A `None` here is only a slower path: the
/// caller then follows the register term by term.
#[inline(always)]
fn dot_pairs<W: Word>(a: &[W], stride: usize, b: &[W], start: i128) -> Option<i128> {
    const HALF: i32 = 1 << 30;
    let start = i32::try_from(start).ok()?;
    let mut acc = start;
    // Bit 31 of `acc + 2^30` (wrapping) is set exactly when `acc` is outside [−2^30, 2^30).
    let mut watch = start.wrapping_add(HALF) as u32;
    let mut pair = |p: i32| {
        acc = acc.wrapping_add(p);
        watch |= acc.wrapping_add(HALF) as u32;
    };
    let last = if stride == 1 {
        let n = a.len().min(b.len());
        let (a, b) = (
            a.get(..n).unwrap_or_default(),
            b.get(..n).unwrap_or_default(),
        );
        for (x, y) in a.chunks_exact(2).zip(b.chunks_exact(2)) {
            if let ([x0, x1], [y0, y1]) = (x, y) {
                pair((x0.get32() * y0.get32()).wrapping_add(x1.get32() * y1.get32()));
            }
        }
        a.chunks_exact(2)
            .remainder()
            .iter()
            .zip(b.chunks_exact(2).remainder())
            .map(|(x, y)| x.get32() * y.get32())
            .next()
    } else {
        let mut terms = a
            .iter()
            .step_by(stride.max(1))
            .zip(b)
            .map(|(x, y)| x.get32() * y.get32());
        loop {
            match (terms.next(), terms.next()) {
                (Some(p0), Some(p1)) => pair(p0.wrapping_add(p1)),
                (p0, _) => break p0,
            }
        }
    };
    // A last odd term from a watched sum stays inside `i32`.
    let sum = acc.wrapping_add(last.unwrap_or(0));
    (watch >> 31 == 0).then_some(i128::from(sum))
}

/// [`dot`] term by term, for any start inside the register.
///
/// Words of up to 16 bits make every product fit `i32`. The sum runs in `i64` (one
/// multiply-accumulate-long a term on a Cortex-M4) offset by 2^31, so that a partial sum is
/// inside the register exactly when the high word of the offset sum is zero; or-ing the high
/// words is the register's sticky overflow flag. `None` when the flag is set (the caller then
/// follows the register term by term).
#[inline(always)]
fn dot_terms<W: Word>(a: &[W], stride: usize, b: &[W], start: i128) -> Option<i128> {
    const BIAS: i64 = 1 << 31;
    if start < -i128::from(BIAS) || start >= i128::from(BIAS) {
        return None;
    }
    let mut acc = start as i64 + BIAS;
    let mut high = 0u32;
    let mut term = |x: &W, y: &W| {
        acc += i64::from(x.get32() * y.get32());
        high |= (acc >> 32) as u32;
    };
    if stride == 1 {
        a.iter().zip(b).for_each(|(x, y)| term(x, y));
    } else {
        a.iter()
            .step_by(stride.max(1))
            .zip(b)
            .for_each(|(x, y)| term(x, y));
    }
    (high == 0).then_some(i128::from(acc - BIAS))
}

/// `v >> sh` (`sh` in 1..=31) rounded by `mode`, the threshold (stochastic rounding only, and
/// only when bits are dropped) taken at `at`: what `round::shift_round` gives for a value of
/// `i32`.
#[inline(always)]
pub(super) fn shift32(v: i32, sh: u32, mode: Rounding, at: &Position) -> i32 {
    let q = v >> sh;
    let rem = v as u32 & (u32::MAX >> (32 - sh));
    // `q` is at most 2^30 in magnitude: `q + 1` stays inside `i32`.
    match mode {
        Rounding::Floor => q,
        Rounding::NearestEven => {
            let half = 1u32 << (sh - 1);
            q + i32::from(rem > half || (rem == half && q & 1 == 1))
        }
        Rounding::Stochastic => {
            if rem == 0 {
                q
            } else {
                let t = rng::threshold_lane(at.key, at.n, at.lane) >> (32 - sh);
                q + i32::from(t < rem)
            }
        }
    }
}

/// `v` shifted right by `shift` bits (left when negative) with `mode`, exactly as
/// `round::shift_round`, for `|v| < 2^31` and shifts of -31 to 31 bits; `None` otherwise. A
/// left shift then stays inside `i64` and loses nothing, so the value is also what a
/// wrapping destination keeps.
#[inline(always)]
pub(super) fn shift_small(v: i64, shift: i32, mode: Rounding, at: &Position) -> Option<i64> {
    let v32 = i32::try_from(v).ok()?;
    match shift {
        -31..=0 => {
            let k = shift.unsigned_abs();
            Some(match shl32(v32, k) {
                Some(short) => i64::from(short),
                None => shl_cold(v, k),
            })
        }
        1..=31 => Some(i64::from(shift32(v32, shift as u32, mode, at))),
        _ => None,
    }
}

/// `v << k` (`k` in 0..=31) when it fits `i32`: in 32 bits, where a 64-bit shift is a
/// library call on the Cortex-M0.
#[inline(always)]
pub(super) fn shl32(v: i32, k: u32) -> Option<i32> {
    let short = v.wrapping_shl(k);
    (short >> k == v).then_some(short)
}

/// `v << k` in 64 bits, out of line so that the compiler does not form it ahead of the
/// 32-bit test (it is rare).
#[cold]
#[inline(never)]
fn shl_cold(v: i64, k: u32) -> i64 {
    v << k
}

/// The value fitted into `format` by its policy, kept out of the row loops (it is rare).
#[cold]
#[inline(never)]
fn fit_cold(v: i32, format: Format) -> i32 {
    round::fit(i128::from(v), format).raw as i32
}

/// The format's bounds in `i32`, for words of up to 32 bits.
#[inline(always)]
fn bounds(format: Format) -> (i32, i32) {
    (format.raw_min() as i32, format.raw_max() as i32)
}

/// `q + 1` when the dropped bits round `q` up under `MODE`: `r` holds them at the top of a
/// word (the remainder `rem` of `sh` bits as `rem << (32 − sh)`), so that the stochastic
/// test `(t >> (32 − sh)) < rem` is `t < r`, and half an LSB is 2^31. The threshold of the
/// element at `j` is formed only when bits are dropped.
#[inline(always)]
fn round_up<const MODE: u8>(q: i32, r: u32, keys: &RowKeys, j: u32) -> i32 {
    const HALF: u32 = 1 << 31;
    let up = match MODE {
        FLOOR => false,
        NEAREST => r > HALF || (r == HALF && q & 1 == 1),
        _ => r != 0 && keys.at(j) < r,
    };
    q.wrapping_add(i32::from(up))
}

/// The exact `(s · x) >> sh` and its dropped low `sh` bits at the top of a word (as
/// [`round_up`] takes them), for `|x| <= 2^15`, `sh` in 1..=31, when the caller has shown the
/// quotient fits `i32`. `HIGH` is `sh >= 16`, fixed per loop so the two-multiply form (no long
/// multiply) does not test it per element.
#[inline(always)]
fn mul_shift<const HIGH: bool>(s: i32, x: i32, sh: u32) -> (i32, u32) {
    let up = 32 - sh;
    if LONG_MULTIPLY {
        let p = i64::from(s) * i64::from(x);
        let (lo, hi) = (p as u32, (p >> 32) as u32);
        (
            (hi.wrapping_shl(up) | (lo >> sh)) as i32,
            lo.wrapping_shl(up),
        )
    } else {
        // s · x = A · 2^16 + B with A = (s >> 16) · x (|A| <= 2^30) and B = (s mod 2^16) · x
        // (|B| < 2^31); c = A + (B >> 16) = ⌊s · x / 2^16⌋ exactly. Wrapping shifts are exact
        // where the true quotient fits, which the caller has shown.
        let a = (s >> 16) * x;
        let b = (s & 0xffff) * x;
        let c = a + (b >> 16);
        let lo = ((c as u32) << 16) | (b as u32 & 0xffff);
        let q = if HIGH {
            c >> (sh - 16)
        } else {
            c.wrapping_shl(16 - sh) | ((lo & 0xffff) >> sh) as i32
        };
        (q, lo.wrapping_shl(up))
    }
}

/// One attempted update in a row loop's packed counter (lost ones count in the low half).
const ATTEMPTED: u32 = 1 << 16;

/// Whether [`update_row`] may run for step `s` and shift `sh`: words of up to 16 bits, `s`
/// in `i32`, and every quotient plus a word and a rounding step inside `i32`.
#[inline(always)]
fn update_fits<W: Word>(s: i64, sh: i32) -> bool {
    if W::BITS > 16 || !(1..=31).contains(&sh) || i32::try_from(s).is_err() {
        return false;
    }
    // The largest quotient (|s| · 2^e) >> sh with e = BITS − 1, by 32-bit shifts (a 64-bit
    // multiply is a library call on the Cortex-M0); one that needs more than 32 bits fails.
    let (e, sh, s) = (W::BITS - 1, sh as u32, s.unsigned_abs() as u32);
    let qmax = if sh >= e {
        s >> (sh - e)
    } else {
        let up = s << (e - sh);
        if up >> (e - sh) != s {
            return false;
        }
        up
    };
    u64::from(qmax) + 1 + (1u64 << e) < 1 << 31
}

/// The row loop of `Backend::update`, `row[j] += round((s · x[j]) >> shift)`, element `j`
/// rounding at position `base + j`: `(attempted, lost, saturated)` as the scalar form counts
/// them, or `None` when the 32-bit bounds do not hold for this row or it has 2^16 elements or
/// more.
#[inline(always)]
pub(super) fn update_row<W: Word>(
    row: &mut [W],
    x: &[W],
    s: i64,
    shift: i32,
    spec: ClassSpec,
    (key, base): (u64, u64),
) -> Option<(u32, u32, u32)> {
    let n = row.len().min(x.len());
    let keys = RowKeys::new(key, base, n as u64)?;
    if n >= 1 << 16 || !update_fits::<W>(s, shift) {
        return None;
    }
    let (s, sh, f) = (s as i32, shift as u32, spec.format);
    Some(match spec.rounding {
        Rounding::Floor => update::<W, FLOOR>(row, x, s, sh, f, keys),
        Rounding::NearestEven => update::<W, NEAREST>(row, x, s, sh, f, keys),
        Rounding::Stochastic => update::<W, STOCHASTIC>(row, x, s, sh, f, keys),
    })
}

/// Out of line: the loop gets the registers to itself. It counts attempted and lost updates
/// in one register, the attempted ones in its high half (rows have fewer than 2^16
/// elements: [`update_row`] declines longer ones); on a core without a long multiply it is
/// compiled for `sh >= 16` and `sh < 16` apart.
#[inline(never)]
fn update<W: Word, const MODE: u8>(
    row: &mut [W],
    x: &[W],
    s: i32,
    sh: u32,
    format: Format,
    keys: RowKeys,
) -> (u32, u32, u32) {
    if !LONG_MULTIPLY && sh >= 16 {
        update_loop::<W, MODE, true>(row, x, s, sh, format, keys)
    } else {
        update_loop::<W, MODE, false>(row, x, s, sh, format, keys)
    }
}

#[inline(always)]
fn update_loop<W: Word, const MODE: u8, const HIGH: bool>(
    row: &mut [W],
    x: &[W],
    s: i32,
    sh: u32,
    format: Format,
    keys: RowKeys,
) -> (u32, u32, u32) {
    let (lo, hi) = bounds(format);
    // `new` is outside [lo, hi] exactly when `new − lo`, as an unsigned word, passes `hi − lo`
    // (every `new` lies within 2^31 of the bounds).
    let span = hi.wrapping_sub(lo) as u32;
    let (mut counts, mut sat) = (0u32, 0u32);
    for (j, (w, xj)) in row.iter_mut().zip(x).enumerate() {
        let xj = xj.get32();
        if xj != 0 {
            let (q, r) = mul_shift::<HIGH>(s, xj, sh);
            let inc = round_up::<MODE>(q, r, &keys, j as u32);
            let new = w.get32() + inc;
            let fitted = if new.wrapping_sub(lo) as u32 > span {
                sat += 1;
                counts += ATTEMPTED;
                fit_cold(new, format)
            } else {
                counts += ATTEMPTED | u32::from(inc == 0);
                new
            };
            *w = W::put32(fitted);
        }
    }
    (counts >> 16, counts & 0xffff, sat)
}

/// The row loop of `Backend::decay`, `row[j] -= round((k · row[j]) >> shift)`, as
/// [`update_row`]; `None` unless the product of `k` and any word fits `i32` and the row has
/// fewer than 2^16 elements.
#[inline(always)]
pub(super) fn decay_row<W: Word>(
    row: &mut [W],
    k: i64,
    shift: i32,
    spec: ClassSpec,
    (key, base): (u64, u64),
) -> Option<(u32, u32, u32)> {
    let keys = RowKeys::new(key, base, row.len() as u64)?;
    let sh = shift.clamp(0, 63) as u32;
    if row.len() >= 1 << 16 || !super::rows::fits_i32::<W>(k, sh) {
        return None;
    }
    let (k, f) = (k as i32, spec.format);
    Some(match spec.rounding {
        Rounding::Floor => decay::<W, FLOOR>(row, k, sh, f, keys),
        Rounding::NearestEven => decay::<W, NEAREST>(row, k, sh, f, keys),
        Rounding::Stochastic => decay::<W, STOCHASTIC>(row, k, sh, f, keys),
    })
}

/// Out of line, as [`update`], with its counters and bounds test.
#[inline(never)]
fn decay<W: Word, const MODE: u8>(
    row: &mut [W],
    k: i32,
    sh: u32,
    format: Format,
    keys: RowKeys,
) -> (u32, u32, u32) {
    let (lo, hi) = bounds(format);
    let span = hi.wrapping_sub(lo) as u32;
    let up = 32 - sh;
    let (mut counts, mut sat) = (0u32, 0u32);
    for (j, w) in row.iter_mut().enumerate() {
        let old = w.get32();
        let p = k * old;
        // A zero product takes nothing away and is not attempted (the word is unchanged).
        if p != 0 {
            let dec = round_up::<MODE>(p >> sh, (p as u32).wrapping_shl(up), &keys, j as u32);
            counts += ATTEMPTED | u32::from(dec == 0);
            let new = old - dec;
            let fitted = if new.wrapping_sub(lo) as u32 > span {
                sat += 1;
                fit_cold(new, format)
            } else {
                new
            };
            *w = W::put32(fitted);
        }
    }
    (counts >> 16, counts & 0xffff, sat)
}

#[cfg(test)]
mod tests {
    use super::update_fits;

    /// The bound as it is defined, with a 64-bit multiply.
    fn defined(bits: u32, s: i64, sh: i32) -> bool {
        if !(1..=31).contains(&sh) || i32::try_from(s).is_err() {
            return false;
        }
        let word = 1u64 << (bits - 1);
        ((s.unsigned_abs() * word) >> sh) + 1 + word < 1 << 31
    }

    #[test]
    fn the_update_bound_by_shifts_is_the_bound() {
        let edges = [
            0i64,
            1,
            2,
            3,
            65_534,
            65_535,
            65_536,
            1 << 24,
            (1 << 31) - 1,
            1 << 31,
        ];
        let steps = edges
            .iter()
            .flat_map(|&s| [s, -s, s + 1, s - 1])
            .chain((0..4096).map(|k| k * 524_309 - (1 << 30)));
        for s in steps {
            for sh in -1..=33 {
                assert_eq!(update_fits::<i8>(s, sh), defined(8, s, sh), "{s} {sh}");
                assert_eq!(update_fits::<i16>(s, sh), defined(16, s, sh), "{s} {sh}");
            }
        }
    }
}
