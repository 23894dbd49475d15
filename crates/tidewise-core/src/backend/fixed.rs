//! The fixed-point back end: integer arithmetic end to end, written once over a kernel
//! strategy ([`Kernels`]): [`Fixed`] (the default) takes the fast kernels of [`Lanes`], the
//! scalar reference `FixedRef` (cargo feature `reference`) none of them.

use core::marker::PhantomData;

use core::cmp::Ordering;

use super::columns;
use super::config::STORED;
use super::narrow;
use super::rows::{self, by_mode};
use super::scalar::{
    cmp_wide, decay_row, each_product, shift_any, shift_i64, update_row, FLOOR, NEAREST, STOCHASTIC,
};
use super::{Backend, ClassSpec, ConfigError, FixedConfig, Word};
use crate::class::{Class, Counters, Tag, CLASSES, LAYER_ROWS};
use crate::format::Overflow;
use crate::rng::{self, streams, Position, RowKeys};
use crate::round::{self, Rounding};

/// Computes in integers: exact products, a configurable accumulator, one rounding per result.
/// `K` picks the shortcuts its kernels may take ([`Kernels`]); every choice gives the same
/// results, threshold positions and counters.
#[derive(Clone, Debug)]
pub struct FixedCore<W: Word, K: Kernels> {
    acc_bits: u8,
    acc_overflow: Overflow,
    /// Every tag's spec, `[row][class]` ([`Tag::row`]): resolved once, looked up by index.
    table: [[ClassSpec; CLASSES]; LAYER_ROWS + 1],
    /// The key of the stochastic-rounding thresholds ([`rng::key`]).
    key: u64,
    /// The next threshold position: one per rounding site (see [`crate::rng`]).
    draws: u64,
    layer: usize,
    counters: Counters,
    acc_lo: i128,
    acc_hi: i128,
    /// Dot results (inside an accumulator of at most 32 bits) are rounded in `i32`
    /// ([`Kernels::NARROW`]).
    narrow_dot: bool,
    _word: PhantomData<(W, K)>,
}

/// The fast fixed back end, the default (what the boards run).
pub type Fixed<W> = FixedCore<W, Lanes>;

/// The kernels in which the fast back end and its scalar reference differ: shortcuts that
/// either return exactly what the element-by-element path would, or decline (`None`, the
/// default, which leaves the element-by-element path).
pub trait Kernels: Clone + core::fmt::Debug {
    /// Whether results that fit `i32` are rounded in 32-bit arithmetic (`backend/narrow.rs`)
    /// rather than through the 64- and 128-bit forms: the same results, cheaper on a 32-bit
    /// core. Which results fit is decided once, at construction, from the container and the
    /// accumulator's width.
    const NARROW: bool = false;

    /// Whether [`Backend::update`] rounds its step in 64-bit integers when the shift is 1 to
    /// 62 bits (the same rounding as `round::requantize`, without its 128-bit set-up).
    const STEP64: bool = false;

    /// Whether [`Backend::dot_columns`] sums all columns at once, row by row
    /// (`backend/columns.rs`), keeping the exact sums wherever no partial sum can leave the
    /// accumulator and taking the strided dot for the others: the same results, positions and
    /// counters as one strided dot per output.
    const COLUMNS: bool = false;

    /// `start + Σ a[i·stride] · b[i]` of [`Backend::dot`], when the strategy can show that no
    /// partial sum leaves a register whose largest value is `acc_hi`.
    #[inline(always)]
    fn plain_sum<W: Word>(
        _a: &[W],
        _stride: usize,
        _b: &[W],
        _start: i128,
        _acc_hi: i128,
    ) -> Option<i128> {
        None
    }

    /// The row loop of [`Backend::update`]: `row[j] += round((s · x[j]) >> shift)` into
    /// `spec`, element `j` rounding at position `base + j` under `key`. Returns
    /// `(attempted, lost, saturated)`.
    #[inline(always)]
    fn update_row<W: Word>(
        _row: &mut [W],
        _x: &[W],
        _s: i64,
        _shift: i32,
        _spec: ClassSpec,
        _keys: (u64, u64),
    ) -> Option<(u32, u32, u32)> {
        None
    }

    /// The row loop of [`Backend::decay`]: `row[j] -= round((k · row[j]) >> shift)`, as
    /// [`Self::update_row`].
    #[inline(always)]
    fn decay_row<W: Word>(
        _row: &mut [W],
        _k: i64,
        _shift: i32,
        _spec: ClassSpec,
        _keys: (u64, u64),
    ) -> Option<(u32, u32, u32)> {
        None
    }
}

/// The fast kernels: a plain (vectorisable) dot sum when the operands' widths bound it, and
/// the 32-bit lane loops of `backend/rows.rs` for row updates and decay on the host; on the
/// Cortex-M boards the 32-bit scalar kernels of [`Narrow`].
#[derive(Clone, Copy, Debug, Default)]
pub struct Lanes;

/// The kernels of 32-bit cores without a vector unit (what [`Lanes`] runs on the Cortex-M
/// boards), on any target: a dot of words of up to 16 bits in one 64-bit
/// multiply-accumulate a term with the 32-bit register's overflow watched on its high word,
/// results rounded in `i32`, and row loops in 32-bit arithmetic with the row's
/// stochastic-rounding keys formed once. Public so that the host's tests hold it to the
/// scalar reference.
#[derive(Clone, Copy, Debug, Default)]
pub struct Narrow;

impl Kernels for Narrow {
    const NARROW: bool = true;

    #[inline(always)]
    fn plain_sum<W: Word>(
        a: &[W],
        stride: usize,
        b: &[W],
        start: i128,
        acc_hi: i128,
    ) -> Option<i128> {
        // Both are exact when they answer; the 32-bit register first, as it needs no 128-bit
        // bound.
        narrow::dot(a, stride, b, start, acc_hi)
            .or_else(|| unbounded_sum(a, stride, b, start, acc_hi))
    }

    #[inline(always)]
    fn update_row<W: Word>(
        row: &mut [W],
        x: &[W],
        s: i64,
        shift: i32,
        spec: ClassSpec,
        keys: (u64, u64),
    ) -> Option<(u32, u32, u32)> {
        narrow::update_row(row, x, s, shift, spec, keys)
    }

    #[inline(always)]
    fn decay_row<W: Word>(
        row: &mut [W],
        k: i64,
        shift: i32,
        spec: ClassSpec,
        keys: (u64, u64),
    ) -> Option<(u32, u32, u32)> {
        narrow::decay_row(row, k, shift, spec, keys)
    }
}

/// Whether the row kernels use the 32-bit lane loops of [`rows`]: on the host. The Cortex-M
/// boards (no vector unit; a code-size allowance) take the 32-bit scalar kernels of
/// [`Narrow`] instead, which give the same results.
const LANES: bool = !cfg!(target_arch = "arm");

/// `start + Σ a[i] · b[i]` as a plain sum when no partial sum can leave the register.
///
/// Any product of two containers has a magnitude of at most 2^(2·BITS − 2): when `n` of them
/// cannot take the register (largest value `acc_hi`) out of range from `start`, the plain sum
/// is the register's, with no bound to watch (a loop the compiler vectorises).
#[inline(always)]
fn unbounded_sum<W: Word>(
    a: &[W],
    stride: usize,
    b: &[W],
    start: i128,
    acc_hi: i128,
) -> Option<i128> {
    let pmax = 1i128 << (2 * W::BITS - 2);
    let unbounded = (b.len() as i128) * pmax + start.abs() <= acc_hi;
    (stride == 1 && unbounded).then(|| start + i128::from(sum_products(a, b)))
}

/// `Σ a[i] · b[i]`, exact in `i64` when the caller has bounded it (wrapping adds keep the
/// loop free of overflow checks).
#[inline(always)]
fn sum_products<W: Word>(a: &[W], b: &[W]) -> i64 {
    a.iter()
        .zip(b)
        .fold(0i64, |s, (x, y)| s.wrapping_add(x.product(*y)))
}

impl Kernels for Lanes {
    const NARROW: bool = !LANES;
    const COLUMNS: bool = LANES;
    const STEP64: bool = LANES;

    #[inline(always)]
    fn plain_sum<W: Word>(
        a: &[W],
        stride: usize,
        b: &[W],
        start: i128,
        acc_hi: i128,
    ) -> Option<i128> {
        if !LANES {
            return Narrow::plain_sum(a, stride, b, start, acc_hi);
        }
        unbounded_sum(a, stride, b, start, acc_hi)
    }

    #[inline(always)]
    fn update_row<W: Word>(
        row: &mut [W],
        x: &[W],
        s: i64,
        shift: i32,
        spec: ClassSpec,
        (key, base): (u64, u64),
    ) -> Option<(u32, u32, u32)> {
        if !LANES {
            return Narrow::update_row(row, x, s, shift, spec, (key, base));
        }
        let n = row.len().min(x.len());
        let sh = shift.clamp(0, 63) as u32;
        let keys = RowKeys::new(key, base, n as u64);
        let (true, Some(keys)) = (LANES && rows::fits_i32::<W>(s, sh), keys) else {
            return None;
        };
        let fmt = spec.format;
        // Both cut to the `n` elements the row updates (the loop then needs no bounds).
        let (row, x) = (
            row.get_mut(..n).unwrap_or(&mut []),
            x.get(..n).unwrap_or(&[]),
        );
        Some(by_mode!(
            update,
            W,
            spec.rounding,
            fmt.overflow(),
            (row, x, s, sh, fmt, keys)
        ))
    }

    #[inline(always)]
    fn decay_row<W: Word>(
        row: &mut [W],
        k: i64,
        shift: i32,
        spec: ClassSpec,
        (key, base): (u64, u64),
    ) -> Option<(u32, u32, u32)> {
        if !LANES {
            return Narrow::decay_row(row, k, shift, spec, (key, base));
        }
        let sh = shift.clamp(0, 63) as u32;
        let keys = RowKeys::new(key, base, row.len() as u64);
        let (true, Some(keys)) = (LANES && rows::fits_i32::<W>(k, sh), keys) else {
            return None;
        };
        let fmt = spec.format;
        Some(by_mode!(
            decay,
            W,
            spec.rounding,
            fmt.overflow(),
            (row, k, sh, fmt, keys)
        ))
    }
}

impl<W: Word, K: Kernels> FixedCore<W, K> {
    /// A fixed back end for `cfg`, its rounding stream the training stream of `seed`.
    pub fn new(cfg: FixedConfig, seed: u64) -> Result<Self, ConfigError> {
        Self::on_stream(cfg, seed, streams::ROUNDING)
    }

    /// A fixed back end whose rounding thresholds are keyed by stream `stream` of `seed`.
    pub fn on_stream(cfg: FixedConfig, seed: u64, stream: u64) -> Result<Self, ConfigError> {
        for c in STORED {
            let w = cfg.classes[c.index()].format.word();
            if u32::from(w) > W::BITS {
                return Err(ConfigError::Container(c, w, W::BITS));
            }
        }
        for (c, l, f) in cfg.layers.entries() {
            if u32::from(f.word()) > W::BITS {
                return Err(ConfigError::LayerContainer(c, l, f.word(), W::BITS));
            }
        }
        if !(2..=64).contains(&cfg.acc_bits) {
            return Err(ConfigError::AccBits(cfg.acc_bits));
        }
        let half = 1i128 << (cfg.acc_bits - 1);
        Ok(FixedCore {
            acc_bits: cfg.acc_bits,
            acc_overflow: cfg.acc_overflow,
            table: cfg.table(),
            key: rng::key(seed, stream),
            draws: 0,
            layer: 0,
            counters: Counters::default(),
            acc_lo: -half,
            acc_hi: half - 1,
            narrow_dot: K::NARROW && cfg.acc_bits <= 32,
            _word: PhantomData,
        })
    }

    /// The key of this back end's stochastic-rounding thresholds ([`rng::threshold`]).
    pub fn key(&self) -> u64 {
        self.key
    }

    /// The threshold counter now: the position the next rounding site takes.
    pub fn draws(&self) -> u64 {
        self.draws
    }

    /// Takes the next `n` positions; returns the first.
    #[inline(always)]
    fn take(&mut self, n: u64) -> u64 {
        let base = self.draws;
        self.draws = base.wrapping_add(n);
        base
    }

    /// Takes the next position, lane 0.
    #[inline(always)]
    fn next(&mut self) -> Position {
        Position {
            key: self.key,
            n: self.take(1),
            lane: 0,
        }
    }

    #[inline(always)]
    fn spec(&self, t: Tag) -> ClassSpec {
        self.table[t.row()][t.class.index()]
    }

    #[inline(always)]
    fn frac(&self, t: Tag) -> i32 {
        i32::from(self.spec(t).format.frac())
    }

    /// Rounds an exact value with `frac` fraction bits into the format of `t`, counting
    /// overflow against its class.
    #[inline]
    fn put(&mut self, t: Tag, v: i128, frac: i32) -> W {
        let at = self.next();
        self.put_at(t, v, frac, at)
    }

    /// [`Self::put`] with its threshold position given.
    #[inline]
    fn put_at(&mut self, t: Tag, v: i128, frac: i32, at: Position) -> W {
        if K::NARROW {
            if let Ok(v) = i32::try_from(v) {
                return self.put32(t, v, frac, at);
            }
        }
        self.put_wide(t, v, frac, at)
    }

    /// [`Self::put_at`] in 64- and 128-bit integers.
    #[inline]
    fn put_wide(&mut self, t: Tag, v: i128, frac: i32, mut at: Position) -> W {
        let spec = self.spec(t);
        let c = t.class;
        let shift = frac - i32::from(spec.format.frac());
        // The common case in 64-bit integers; the same rounding as `round::requantize`.
        if (1..=62).contains(&shift) && v.unsigned_abs() < (1u128 << 62) {
            let q = shift_i64(v as i64, shift as u32, spec.rounding, &mut at);
            let fitted = round::fit64(q, spec.format);
            if fitted.overflowed {
                self.counters.saturated(self.layer, c);
            }
            return W::put(fitted.raw);
        }
        let fitted = round::requantize(v, frac, spec.format, spec.rounding, &mut at);
        if fitted.overflowed {
            self.counters.saturated(self.layer, c);
        }
        W::put(fitted.raw)
    }

    /// [`Self::put_at`] of a value that fits `i32`: shifted and fitted in 32-bit arithmetic
    /// when the shift is -31 to 31 bits and a left-shifted value stays inside `i32` (the same
    /// rounding as `round::requantize`); otherwise [`Self::put_wide`]. Both exits are out of
    /// line, so that the common path is small enough to inline on the boards.
    #[inline]
    fn put32(&mut self, t: Tag, v: i32, frac: i32, at: Position) -> W {
        let spec = self.spec(t);
        let shift = frac - i32::from(spec.format.frac());
        let q = match shift {
            1..=31 => narrow::shift32(v, shift as u32, spec.rounding, &at),
            -31..=0 => match narrow::shl32(v, shift.unsigned_abs()) {
                Some(q) => q,
                None => return self.put_wide_cold(t, v, frac, at),
            },
            _ => return self.put_wide_cold(t, v, frac, at),
        };
        // Words have at most 32 bits: the bounds are `i32`.
        let (lo, hi) = (spec.format.raw_min() as i32, spec.format.raw_max() as i32);
        if q >= lo && q <= hi {
            return W::put32(q);
        }
        self.fit_cold(t, q, spec)
    }

    /// [`Self::put_wide`] for [`Self::put32`].
    #[cold]
    #[inline(never)]
    fn put_wide_cold(&mut self, t: Tag, v: i32, frac: i32, at: Position) -> W {
        self.put_wide(t, i128::from(v), frac, at)
    }

    /// `q` outside the format of `t` fitted by its policy, the event counted.
    #[cold]
    #[inline(never)]
    fn fit_cold(&mut self, t: Tag, q: i32, spec: ClassSpec) -> W {
        self.counters.saturated(self.layer, t.class);
        W::put(round::fit(i128::from(q), spec.format).raw)
    }

    /// Rounds a dot product's sum (with `pf` fraction bits) into `out` at position `pos`.
    #[inline]
    fn put_dot(&mut self, out: Tag, sum: i128, pf: i32, pos: Position) -> W {
        if K::NARROW && self.narrow_dot {
            // The register holds at most 32 bits: the sum is an `i32`.
            return self.put32(out, sum as i32, pf, pos);
        }
        self.put_at(out, sum, pf, pos)
    }

    /// [`Backend::dot_columns`] from the column sums of [`columns::blocks`]; `false`, having
    /// done nothing, unless the stride is at least 2, the outputs lie inside one row, `a`
    /// holds every term and every exact sum fits `i64` (the bound [`Backend::dot`] takes its
    /// `i64` path under). A column whose magnitudes stay within the accumulator gets its exact
    /// sum, which is what the strided dot returns there (with no overflow); any other column
    /// is that dot, in its turn, so positions are taken in the same order.
    #[allow(clippy::too_many_arguments)]
    fn columns(
        &mut self,
        ot: Tag,
        at: Tag,
        a: &[W],
        stride: usize,
        bt: Tag,
        b: &[W],
        out: &mut [W],
    ) -> bool {
        let n = b.len();
        let wa = u32::from(self.spec(at).format.word());
        let wb = u32::from(self.spec(bt).format.word());
        let nbits = usize::BITS - n.leading_zeros();
        let need = (n.saturating_sub(1))
            .saturating_mul(stride)
            .saturating_add(out.len());
        if stride < 2 || out.len() > stride || n == 0 || a.len() < need || wa + wb + nbits > 63 {
            return false;
        }
        let pf = self.frac(at) + self.frac(bt);
        // `acc_hi` < 2^63: the accumulator has at most 64 bits.
        let limit = self.acc_hi as i64;
        // Any product of two containers has a magnitude of at most 2^(2·BITS − 2): when `n`
        // of them stay within the accumulator, no column needs its magnitudes.
        let pmax = 1i128 << (2 * W::BITS - 2);
        let bounded = (n as i128) * pmax <= self.acc_hi;
        let cols = out.len();
        let mut each = |j0: usize, sums: &[i64], mags: &[i64]| {
            for (k, (&s, &m)) in sums.iter().zip(mags).enumerate() {
                let j = j0 + k;
                let v = if m <= limit {
                    let pos = self.next();
                    self.put_dot(ot, i128::from(s), pf, pos)
                } else {
                    let col = a.get(j..).unwrap_or_default();
                    self.dot(ot, at, col, stride, bt, b, None)
                };
                if let Some(o) = out.get_mut(j) {
                    *o = v;
                }
            }
        };
        if bounded {
            columns::blocks::<W, false>(a, stride, b, cols, &mut each);
        } else {
            columns::blocks::<W, true>(a, stride, b, cols, &mut each);
        }
        true
    }

    /// `x + y` (`x − y` when `negate`) aligned to the finer of the two fractions and rounded
    /// into `out`. Exact in 32 bits when both words have at most 16 bits and neither moves by
    /// more than 15 (each term then stays within 2^30), which the boards' `NARROW` kernels
    /// use; in 128 bits otherwise.
    #[inline]
    fn sum(&mut self, out: Tag, xt: Tag, x: W, yt: Tag, y: W, negate: bool) -> W {
        let (fx, fy) = (self.frac(xt), self.frac(yt));
        let f = fx.max(fy);
        let (dx, dy) = ((f - fx) as u32, (f - fy) as u32);
        if K::NARROW && W::BITS <= 16 && dx <= 15 && dy <= 15 {
            let (a, b) = (x.get32() << dx, y.get32() << dy);
            let at = self.next();
            return self.put32(out, if negate { a - b } else { a + b }, f, at);
        }
        let (a, b) = (i128::from(x.get()) << dx, i128::from(y.get()) << dy);
        self.put(out, if negate { a - b } else { a + b }, f)
    }

    /// Fits a running sum into the accumulator by its policy; `true` when it overflowed.
    #[inline]
    fn fit_acc(&self, v: i128) -> (i128, bool) {
        if v >= self.acc_lo && v <= self.acc_hi {
            return (v, false);
        }
        let out = match self.acc_overflow {
            // `clamp` without its bounds assertion (acc_lo < acc_hi by construction).
            Overflow::Saturate => v.max(self.acc_lo).min(self.acc_hi),
            Overflow::Wrap => {
                let unused = 128 - u32::from(self.acc_bits);
                (v << unused) >> unused
            }
        };
        (out, true)
    }

    /// The exact sum, when no partial sum can leave the register: `None` as soon as the
    /// running sum of magnitudes passes `limit` (then only a term-by-term register can say).
    /// No overflow is possible in `i64` (the caller checks the widths).
    #[inline]
    fn sums_bounded(a: &[W], stride: usize, b: &[W], limit: i64) -> Option<i64> {
        /// Terms between checks of the bound: long enough to keep the loop vectorised,
        /// short enough to give up early on sums that overflow.
        const CHUNK: usize = 64;
        let (mut s, mut m) = (0i64, 0i64);
        if stride == 1 {
            for (ca, cb) in a.chunks(CHUNK).zip(b.chunks(CHUNK)) {
                for (x, y) in ca.iter().zip(cb) {
                    let p = x.get() * y.get();
                    s += p;
                    m += p.abs();
                }
                if m > limit {
                    return None;
                }
            }
        } else {
            for (x, y) in a.iter().step_by(stride.max(1)).zip(b) {
                let p = x.get() * y.get();
                s += p;
                m += p.abs();
            }
        }
        (m <= limit).then_some(s)
    }

    /// Follows the register term by term in `i64`, applying its policy after every addition;
    /// `true` when any addition overflowed. Needs every product inside the register's range
    /// (`wa + wb <= acc_bits`): the register is held scaled to the top of an `i64`, where
    /// `i64`'s own saturating or wrapping addition is the register's, and its overflow flag
    /// is the register's. (Low bits left set by saturating at the top never reach the
    /// value: the products' low bits are zero.) No data-dependent branch.
    fn sums_register_scaled(&self, start: i64, a: &[W], stride: usize, b: &[W]) -> (i128, bool) {
        let u = 64 - u32::from(self.acc_bits);
        let mut acc = start << u;
        // Overflows are counted, not or-ed: an add keeps the flag off the critical path.
        let mut overflows = 0u32;
        match self.acc_overflow {
            Overflow::Saturate => each_product(a, stride, b, |p| {
                // An overflow goes the way of the product, so its bound comes from `p`:
                // ready before the addition, it keeps the loop's chain to an add and a move.
                let bound = (p >> 63) ^ i64::MAX;
                let (v, o) = acc.overflowing_add(p << u);
                overflows = overflows.wrapping_add(u32::from(o));
                acc = if o { bound } else { v };
            }),
            Overflow::Wrap => each_product(a, stride, b, |p| {
                let (v, o) = acc.overflowing_add(p << u);
                overflows = overflows.wrapping_add(u32::from(o));
                acc = v;
            }),
        }
        (i128::from(acc >> u), overflows != 0)
    }

    /// Follows a register of at most 62 bits term by term in `i64`, applying its policy after
    /// every addition; `true` when any addition overflowed. Exact: |acc| <= 2^61 and a
    /// product of two 32-bit words has |p| <= 2^62, so `acc + p` never leaves `i64`.
    fn sums_register_i64(&self, start: i64, a: &[W], stride: usize, b: &[W]) -> (i128, bool) {
        use core::hint::select_unpredictable as select;
        let (lo, hi) = (self.acc_lo as i64, self.acc_hi as i64);
        let mut acc = start;
        let mut overflows = 0u32;
        match self.acc_overflow {
            Overflow::Saturate => each_product(a, stride, b, |p| {
                let v = acc + p;
                let (below, above) = (v < lo, v > hi);
                overflows = overflows.wrapping_add(u32::from(below | above));
                acc = select(above, hi, select(below, lo, v));
            }),
            Overflow::Wrap => {
                let unused = 64 - u32::from(self.acc_bits);
                each_product(a, stride, b, |p| {
                    let v = acc + p;
                    acc = (v << unused) >> unused;
                    overflows = overflows.wrapping_add(u32::from(acc != v));
                })
            }
        }
        (i128::from(acc), overflows != 0)
    }

    /// Accumulates term by term, applying the accumulator's policy after every addition.
    fn sums_sequential(&self, start: i128, a: &[W], stride: usize, b: &[W]) -> (i128, bool) {
        let mut acc = start;
        let mut over = false;
        for (x, y) in a.iter().step_by(stride.max(1)).zip(b) {
            let (v, o) = self.fit_acc(acc + i128::from(x.get() * y.get()));
            acc = v;
            over |= o;
        }
        (acc, over)
    }
}

impl<W: Word, K: Kernels> Backend for FixedCore<W, K> {
    type S = W;

    fn encode(&mut self, t: Tag, x: f32) -> W {
        let spec = self.spec(t);
        let mut at = self.next();
        let fitted = round::from_f32(x, spec.format, spec.rounding, &mut at);
        if fitted.overflowed {
            self.counters.saturated(self.layer, t.class);
        }
        W::put(fitted.raw)
    }

    fn decode(&self, t: Tag, v: W) -> f32 {
        round::to_f32(v.get(), self.spec(t).format)
    }

    fn set_layer(&mut self, layer: usize) {
        self.layer = layer;
    }

    fn dot(
        &mut self,
        out: Tag,
        at: Tag,
        a: &[W],
        stride: usize,
        bt: Tag,
        b: &[W],
        bias: Option<(Tag, W)>,
    ) -> W {
        let stride = stride.max(1);
        let pf = self.frac(at) + self.frac(bt);
        let pos = self.next();
        let start = match bias {
            None => 0,
            Some((c, v)) => {
                // Aligning the bias to the products' fraction is exact when it has fewer bits;
                // when it is not, it rounds in lane 1 of the dot's position.
                let mode = self.spec(out).rounding;
                let mut lane1 = Position { lane: 1, ..pos };
                let shift = self.frac(c) - pf;
                let small = if K::NARROW {
                    narrow::shift_small(v.get(), shift, mode, &lane1)
                } else {
                    None
                };
                match small {
                    Some(q) => i128::from(q),
                    None => round::shift_round(i128::from(v.get()), shift, mode, &mut lane1),
                }
            }
        };
        // A 32-bit register holds any start that fits `i32` (the boards' common case, checked
        // without the 128-bit comparisons).
        let (start, mut over) = if K::NARROW && self.acc_bits == 32 && i32::try_from(start).is_ok()
        {
            (start, false)
        } else {
            self.fit_acc(start)
        };
        let wa = u32::from(self.spec(at).format.word());
        let wb = u32::from(self.spec(bt).format.word());
        let nbits = usize::BITS - b.len().leading_zeros();
        // An overflow of any partial sum counts, as a register's sticky flag would, so a
        // wrapping sum that leaves the range and comes back is still an event.
        let register = |be: &Self| {
            if wa + wb <= u32::from(be.acc_bits) {
                be.sums_register_scaled(start as i64, a, stride, b)
            } else if be.acc_bits <= 62 {
                be.sums_register_i64(start as i64, a, stride, b)
            } else {
                be.sums_sequential(start, a, stride, b)
            }
        };
        let (sum, o) = if let Some(sum) = K::plain_sum(a, stride, b, start, self.acc_hi) {
            (sum, false)
        } else if wa + wb + nbits <= 63 && start.unsigned_abs() < (1u128 << 62) {
            // No partial sum can leave the range while |start| + Σ|p| stays inside it.
            let limit = (self.acc_hi - start.abs()) as i64;
            match Self::sums_bounded(a, stride, b, limit) {
                Some(s) => (start + i128::from(s), false),
                None => register(self),
            }
        } else {
            register(self)
        };
        over |= o;
        if over {
            self.counters.saturated(self.layer, Class::Acc);
        }
        self.put_dot(out, sum, pf, pos)
    }

    #[allow(clippy::too_many_arguments)]
    fn dot_columns(
        &mut self,
        ot: Tag,
        at: Tag,
        a: &[W],
        stride: usize,
        bt: Tag,
        b: &[W],
        out: &mut [W],
    ) {
        if !(K::COLUMNS && self.columns(ot, at, a, stride, bt, b, out)) {
            super::columns_by_dots(self, ot, at, a, stride, bt, b, out);
        }
    }

    fn mul(&mut self, out: Tag, xt: Tag, x: W, yt: Tag, y: W) -> W {
        let f = self.frac(xt) + self.frac(yt);
        if K::NARROW && W::BITS <= 16 {
            // A product of two words of up to 16 bits is an `i32`.
            let at = self.next();
            return self.put32(out, x.get32() * y.get32(), f, at);
        }
        let p = i128::from(x.get() * y.get());
        self.put(out, p, f)
    }

    fn add(&mut self, out: Tag, xt: Tag, x: W, yt: Tag, y: W) -> W {
        self.sum(out, xt, x, yt, y, false)
    }

    fn sub(&mut self, out: Tag, xt: Tag, x: W, yt: Tag, y: W) -> W {
        self.sum(out, xt, x, yt, y, true)
    }

    fn shift(&mut self, t: Tag, x: W, k: i32) -> W {
        let f = self.frac(t);
        self.put(t, i128::from(x.get()), f.saturating_sub(k))
    }

    fn convert(&mut self, out: Tag, xt: Tag, x: W) -> W {
        let from = self.spec(xt).format;
        // The same format: the value is already in range (what `put` would return); the
        // site still takes its position.
        if self.spec(out).format == from {
            self.take(1);
            return x;
        }
        self.put(out, i128::from(x.get()), i32::from(from.frac()))
    }

    fn cmp(&self, xt: Tag, x: W, yt: Tag, y: W) -> Option<Ordering> {
        let (fx, fy) = (self.frac(xt), self.frac(yt));
        let (x, y) = (x.get(), y.get());
        // Words have at most 32 bits, so a shift of up to 31 bits stays inside `i64`; wider
        // differences (up to 40 bits) take the 128-bit path, kept out of line so that
        // comparisons stay small where they are inlined (the tanh segment search).
        Some(match fx - fy {
            0 => x.cmp(&y),
            d @ 1..=31 => x.cmp(&(y << d)),
            d @ -31..=-1 => (x << -d).cmp(&y),
            d => cmp_wide(x, y, d),
        })
    }

    fn update(&mut self, wt: Tag, row: &mut [W], eta: W, dt: Tag, delta: W, xt: Tag, x: &[W]) {
        let wc = wt.class;
        let n = row.len().min(x.len());
        // The step's position, then one per element (see `crate::rng`).
        let mut at = self.next();
        let base = self.take(n as u64);
        // Two words of up to 16 bits multiply in 32 bits (no 64-bit multiply on the M0).
        let exact = if W::BITS <= 16 {
            i64::from(eta.get32() * delta.get32())
        } else {
            eta.get() * delta.get()
        };
        if exact == 0 {
            // No element has a non-zero exact increment: nothing is attempted.
            return;
        }
        let step = self.spec(Tag::global(Class::Step));
        let ef = self.frac(Tag::global(Class::Rate)) + self.frac(dt);
        let shift = ef - i32::from(step.format.frac());
        let narrow = if K::NARROW {
            narrow::shift_small(exact, shift, step.rounding, &at)
        } else if K::STEP64 && (1..=62).contains(&shift) && exact.unsigned_abs() < 1 << 62 {
            Some(shift_i64(exact, shift as u32, step.rounding, &mut at))
        } else {
            None
        };
        // The same rounding as `round::requantize` (a left shift here loses nothing).
        let sf = match narrow {
            Some(q) => round::fit64(q, step.format),
            None => round::requantize(i128::from(exact), ef, step.format, step.rounding, &mut at),
        };
        if sf.overflowed {
            self.counters.saturated(self.layer, Class::Step);
        }
        let s = sf.raw;
        let wspec = self.spec(wt);
        let (lo, hi) = (wspec.format.raw_min(), wspec.format.raw_max());
        let shift = i32::from(step.format.frac()) + self.frac(xt) - i32::from(wspec.format.frac());
        let (att, lost, sat) =
            if let Some(r) = K::update_row(row, x, s, shift, wspec, (self.key, base)) {
                r
            } else if (1..=62).contains(&shift) {
                let (sh, fmt, kb) = (shift as u32, wspec.format, (self.key, base));
                match wspec.rounding {
                    Rounding::Floor => update_row::<W, FLOOR>(row, x, s, sh, fmt, kb),
                    Rounding::NearestEven => update_row::<W, NEAREST>(row, x, s, sh, fmt, kb),
                    Rounding::Stochastic => update_row::<W, STOCHASTIC>(row, x, s, sh, fmt, kb),
                }
            } else {
                let (mut att, mut lost, mut sat) = (0u32, 0u32, 0u32);
                for (j, (w, xj)) in row.iter_mut().zip(x).enumerate() {
                    let xj = xj.get();
                    if xj == 0 {
                        continue;
                    }
                    att += 1;
                    let mut at = Position {
                        key: self.key,
                        n: base.wrapping_add(j as u64),
                        lane: 0,
                    };
                    let inc = shift_any(s * xj, shift, wspec.rounding, &mut at);
                    let new = i128::from(w.get()) + inc;
                    let fitted = if new < i128::from(lo) || new > i128::from(hi) {
                        sat += 1;
                        round::fit(new, wspec.format).raw
                    } else {
                        lost += u32::from(inc == 0);
                        new as i64
                    };
                    *w = W::put(fitted);
                }
                (att, lost, sat)
            };
        self.counters.updated(self.layer, wc, att, lost);
        for _ in 0..sat {
            self.counters.saturated(self.layer, wc);
        }
    }

    fn decay(&mut self, wt: Tag, row: &mut [W], k: W) {
        let k = k.get();
        // One position per element, also when nothing decays (see `crate::rng`).
        let base = self.take(row.len() as u64);
        if k == 0 {
            return;
        }
        let wc = wt.class;
        let wspec = self.spec(wt);
        let shift = self.frac(Tag::global(Class::Rate));
        let (att, lost, sat) = if let Some(r) = K::decay_row(row, k, shift, wspec, (self.key, base))
        {
            r
        } else if (1..=62).contains(&shift) {
            let (sh, fmt, kb) = (shift as u32, wspec.format, (self.key, base));
            match wspec.rounding {
                Rounding::Floor => decay_row::<W, FLOOR>(row, k, sh, fmt, kb),
                Rounding::NearestEven => decay_row::<W, NEAREST>(row, k, sh, fmt, kb),
                Rounding::Stochastic => decay_row::<W, STOCHASTIC>(row, k, sh, fmt, kb),
            }
        } else {
            let (mut att, mut lost, mut sat) = (0u32, 0u32, 0u32);
            for (j, w) in row.iter_mut().enumerate() {
                let old = w.get();
                let p = k * old;
                att += u32::from(p != 0);
                let mut at = Position {
                    key: self.key,
                    n: base.wrapping_add(j as u64),
                    lane: 0,
                };
                let dec = shift_any(p, shift, wspec.rounding, &mut at);
                lost += u32::from(dec == 0 && p != 0);
                let fitted = round::fit(i128::from(old) - dec, wspec.format);
                sat += u32::from(fitted.overflowed);
                *w = W::put(fitted.raw);
            }
            (att, lost, sat)
        };
        for _ in 0..sat {
            self.counters.saturated(self.layer, wc);
        }
        self.counters.updated(self.layer, wc, att, lost);
    }

    fn noise(&mut self, out: Tag, amp: W, z: i32) -> W {
        // Exact in 64 bits: |amp| < 2^31 and |z| <= 2^31.
        let p = i128::from(amp.get() * i64::from(z));
        let f = self.frac(Tag::global(Class::Noise)) + 16;
        self.put(out, p, f)
    }

    fn counters(&self) -> &Counters {
        &self.counters
    }
    fn reset_counters(&mut self) {
        self.counters = Counters::default();
    }
    fn fault(&self) -> Option<(usize, Class)> {
        None
    }
    fn is_fixed(&self) -> bool {
        true
    }
    fn raw_bits(v: W) -> u32 {
        v.get() as u32
    }
}
