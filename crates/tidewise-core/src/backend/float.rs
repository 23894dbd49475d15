//! The `f32` back end: the float reference arm.

use core::cmp::Ordering;

use super::Backend;
use crate::class::{Class, Counters, Tag};

/// Computes in `f32`, every operation rounded to nearest even as IEEE 754 defines it, with
/// no fused multiply-add (each product is rounded, then added) and a fixed order of
/// operations that does not depend on the target or its vector units, so a run gives the same
/// bits on every machine:
///
/// - [`Backend::dot`] with stride 1 keeps 32 partial sums: term `i` goes to sum `i mod 32`,
///   each sum adds its terms in increasing `i` starting from `+0`; the sums are then halved
///   pairwise (sum `k` += sum `k + w` for `w` = 16, 8, 4, 2, 1) and the bias, if any, is
///   added last. [`Backend::dot_rows`] gives exactly one such dot per row, computing four
///   rows at a time.
/// - [`Backend::dot`] with another stride (a column of a row-major matrix) adds its terms in
///   increasing `i` starting from `+0`, one addition chain, then the bias if any.
///   [`Backend::dot_columns`] gives exactly those results, computing all columns at once
///   row by row (an axpy along contiguous memory).
/// - [`Backend::update`] and [`Backend::decay`] work element by element.
///
/// It counts updates that `f32` itself absorbs (`w + Δ == w` with `Δ ≠ 0`) as lost, and
/// remembers the first non-finite value it produced so the run can stop and say where.
#[derive(Clone, Debug, Default)]
pub struct Float {
    layer: usize,
    counters: Counters,
    fault: Option<(usize, Class)>,
}

impl Float {
    /// A float back end with zeroed counters.
    pub fn new() -> Float {
        Float::default()
    }

    #[inline]
    fn check(&mut self, t: Tag, v: f32) -> f32 {
        if !v.is_finite() && self.fault.is_none() {
            self.fault = Some((self.layer, t.class));
        }
        v
    }
}

/// Partial sums of [`Backend::dot`]: an array the compiler keeps in vector registers (two
/// 512-bit or four 256-bit ones), enough independent additions to hide their latency.
const LANES: usize = 32;

/// `Σ a[i·stride] · b[i]` over `b.len()` terms (fewer if `a` runs out), in the order stated on
/// [`Float`].
fn dot_lanes(a: &[f32], stride: usize, b: &[f32]) -> f32 {
    if stride == 1 {
        contiguous(a, b)
    } else {
        let mut acc = 0.0;
        for (x, y) in a.iter().step_by(stride.max(1)).zip(b) {
            acc += x * y;
        }
        acc
    }
}

/// The stride-1 case, in its own function so that its partial sums are only ever indexed by
/// constants and stay in registers.
fn contiguous(a: &[f32], b: &[f32]) -> f32 {
    let mut acc = [0f32; LANES];
    let n = a.len().min(b.len());
    let (a, b) = (
        a.get(..n).unwrap_or_default(),
        b.get(..n).unwrap_or_default(),
    );
    let (ca, ra) = a.as_chunks::<LANES>();
    let (cb, rb) = b.as_chunks::<LANES>();
    for (x, y) in ca.iter().zip(cb) {
        acc = add(acc, mul(x, y));
    }
    finish(acc, ra, rb)
}

/// [`contiguous`] of four rows against the same `x` at once (sharing its loads), each with
/// exactly the operations of its own call; `None` unless `m` holds four rows of `x.len()`.
fn contiguous4(m: &[f32], x: &[f32]) -> Option<[f32; 4]> {
    let mut rows = m.chunks_exact(x.len().max(1));
    let (Some(r0), Some(r1), Some(r2), Some(r3), true) = (
        rows.next(),
        rows.next(),
        rows.next(),
        rows.next(),
        m.len() == 4 * x.len() && !x.is_empty(),
    ) else {
        return None;
    };
    let ((c0, t0), (c1, t1)) = (r0.as_chunks::<LANES>(), r1.as_chunks::<LANES>());
    let ((c2, t2), (c3, t3)) = (r2.as_chunks::<LANES>(), r3.as_chunks::<LANES>());
    let (cx, tx) = x.as_chunks::<LANES>();
    let mut acc = [[0f32; LANES]; 4];
    for ((((p0, p1), p2), p3), q) in c0.iter().zip(c1).zip(c2).zip(c3).zip(cx) {
        acc[0] = add(acc[0], mul(p0, q));
        acc[1] = add(acc[1], mul(p1, q));
        acc[2] = add(acc[2], mul(p2, q));
        acc[3] = add(acc[3], mul(p3, q));
    }
    Some([
        finish(acc[0], t0, tx),
        finish(acc[1], t1, tx),
        finish(acc[2], t2, tx),
        finish(acc[3], t3, tx),
    ])
}

/// The tail (fewer than [`LANES`] terms) added into the partial sums, then the reduction.
#[inline(always)]
fn finish(acc: [f32; LANES], ra: &[f32], rb: &[f32]) -> f32 {
    // The tail's products, padded with −0 (`s + (−0) == s` for every `s`, so the padding
    // changes nothing).
    let mut tail = [-0.0f32; LANES];
    for ((t, p), q) in tail.iter_mut().zip(ra).zip(rb) {
        *t = p * q;
    }
    // Kept apart from the reduction so the compiler vectorises the loops that formed `acc`
    // across all lanes instead of in pairs shaped by the reduction's last steps (no effect
    // on results).
    reduce(core::hint::black_box(add(acc, tail)))
}

/// Lane by lane `x · y`.
#[inline(always)]
fn mul(x: &[f32; LANES], y: &[f32; LANES]) -> [f32; LANES] {
    core::array::from_fn(|k| x[k] * y[k])
}

/// Lane by lane `x + y`.
#[inline(always)]
fn add(x: [f32; LANES], y: [f32; LANES]) -> [f32; LANES] {
    core::array::from_fn(|k| x[k] + y[k])
}

/// The partial sums halved pairwise, written out so every step has a constant width.
#[inline(always)]
fn reduce(mut acc: [f32; LANES]) -> f32 {
    const _: () = assert!(LANES == 32);
    fold(&mut acc, 16);
    fold(&mut acc, 8);
    fold(&mut acc, 4);
    fold(&mut acc, 2);
    fold(&mut acc, 1);
    acc[0]
}

/// `v[k] += v[k + w]` for `k < w`.
#[inline(always)]
fn fold(v: &mut [f32], w: usize) {
    if let Some((lo, hi)) = v.split_at_mut_checked(w) {
        for (s, t) in lo.iter_mut().zip(hi.iter()) {
            *s += *t;
        }
    }
}

/// The bits of `|v|`: at least [`INF_BITS`] exactly when `v` is not finite. A running maximum
/// of these is an integer reduction the compiler vectorises, cheaper than testing each value.
#[inline(always)]
fn magnitude_bits(v: f32) -> u32 {
    v.to_bits() & 0x7fff_ffff
}

/// The bits of `+∞`; every NaN's magnitude bits are above them.
const INF_BITS: u32 = 0x7f80_0000;

fn pow2f(k: i32) -> f32 {
    crate::format::pow2(k) as f32
}

impl Backend for Float {
    type S = f32;

    fn encode(&mut self, t: Tag, x: f32) -> f32 {
        self.check(t, x)
    }
    fn decode(&self, _t: Tag, v: f32) -> f32 {
        v
    }
    fn set_layer(&mut self, layer: usize) {
        self.layer = layer;
    }

    fn dot(
        &mut self,
        out: Tag,
        _at: Tag,
        a: &[f32],
        stride: usize,
        _bt: Tag,
        b: &[f32],
        bias: Option<(Tag, f32)>,
    ) -> f32 {
        let sum = dot_lanes(a, stride, b);
        let v = bias.map_or(sum, |(_, v)| sum + v);
        self.check(out, v)
    }
    fn dot_rows(
        &mut self,
        ot: Tag,
        mt: Tag,
        m: &[f32],
        xt: Tag,
        x: &[f32],
        bias: Option<(Tag, &[f32])>,
        out: &mut [f32],
    ) {
        let cols = x.len();
        if cols == 0 {
            return super::rows_by_dots(self, ot, mt, m, xt, x, bias, out);
        }
        // Four rows at a time, each with the operations of its own `dot`.
        for (k, (o4, m4)) in out.chunks_mut(4).zip(m.chunks(4 * cols)).enumerate() {
            let sums: [Option<f32>; 4] = match contiguous4(m4, x) {
                Some(s) => s.map(Some),
                None => {
                    let mut s = [None; 4];
                    for (v, row) in s.iter_mut().zip(m4.chunks_exact(cols)) {
                        *v = Some(contiguous(row, x));
                    }
                    s
                }
            };
            for (i, (o, sum)) in o4.iter_mut().zip(sums).enumerate() {
                let Some(sum) = sum else { break };
                let b = bias.and_then(|(_, b)| b.get(4 * k + i));
                *o = self.check(ot, b.map_or(sum, |&v| sum + v));
            }
        }
    }
    fn dot_columns(
        &mut self,
        ot: Tag,
        at: Tag,
        a: &[f32],
        stride: usize,
        bt: Tag,
        b: &[f32],
        out: &mut [f32],
    ) {
        if stride <= 1 || out.len() > stride {
            // Stride 1 (a contiguous dot, with its own order) or outputs that would reach
            // into the next row: the definition, dot by dot.
            return super::columns_by_dots(self, ot, at, a, stride, bt, b, out);
        }
        // Row by row, an axpy: the same additions in the same order as one addition chain
        // per column, but along contiguous memory and across outputs at once.
        out.fill(0.0);
        for (row, &y) in a.chunks(stride).zip(b) {
            for (o, &x) in out.iter_mut().zip(row) {
                *o += x * y;
            }
        }
        if out.iter().any(|v| !v.is_finite()) {
            self.check(ot, f32::NAN);
        }
    }
    fn mul(&mut self, out: Tag, _xt: Tag, x: f32, _yt: Tag, y: f32) -> f32 {
        self.check(out, x * y)
    }
    fn add(&mut self, out: Tag, _xt: Tag, x: f32, _yt: Tag, y: f32) -> f32 {
        self.check(out, x + y)
    }
    fn sub(&mut self, out: Tag, _xt: Tag, x: f32, _yt: Tag, y: f32) -> f32 {
        self.check(out, x - y)
    }
    fn shift(&mut self, t: Tag, x: f32, k: i32) -> f32 {
        self.check(t, x * pow2f(k))
    }
    fn convert(&mut self, _out: Tag, _xt: Tag, x: f32) -> f32 {
        x
    }
    fn cmp(&self, _xt: Tag, x: f32, _yt: Tag, y: f32) -> Option<Ordering> {
        x.partial_cmp(&y)
    }

    fn update(
        &mut self,
        wt: Tag,
        row: &mut [f32],
        eta: f32,
        _dt: Tag,
        delta: f32,
        _xt: Tag,
        x: &[f32],
    ) {
        let step = eta * delta;
        // Branch-free counts (attempted: a non-zero increment; lost: of those, absorbed), so
        // the loop stays vectorisable; a row is far shorter than 2^32.
        let (mut att, mut lost, mut top) = (0u32, 0u32, 0u32);
        for (w, &xj) in row.iter_mut().zip(x) {
            let inc = step * xj;
            let new = *w + inc;
            let nonzero = inc != 0.0;
            att = att.wrapping_add(u32::from(nonzero));
            lost = lost.wrapping_add(u32::from(nonzero & (new == *w)));
            top = top.max(magnitude_bits(new));
            *w = new;
        }
        self.counters.updated(self.layer, wt.class, att, lost);
        // Weights past the end of `x` are not updated but still watched, as before.
        let rest = row.get(x.len()..).unwrap_or_default();
        if !step.is_finite() || top >= INF_BITS || rest.iter().any(|w| !w.is_finite()) {
            self.check(wt, f32::NAN);
        }
    }

    fn decay(&mut self, wt: Tag, row: &mut [f32], k: f32) {
        let mut top = 0u32;
        for w in row.iter_mut() {
            *w -= k * *w;
            top = top.max(magnitude_bits(*w));
        }
        if top >= INF_BITS {
            self.check(wt, f32::NAN);
        }
    }

    fn noise(&mut self, out: Tag, amp: f32, z: i32) -> f32 {
        self.check(out, amp * (z as f32 * pow2f(-16)))
    }

    fn counters(&self) -> &Counters {
        &self.counters
    }
    fn reset_counters(&mut self) {
        self.counters = Counters::default();
    }
    fn fault(&self) -> Option<(usize, Class)> {
        self.fault
    }
    fn is_fixed(&self) -> bool {
        false
    }
    fn raw_bits(v: f32) -> u32 {
        v.to_bits()
    }
}
