//! The `f32` back end: the float reference arm.

use core::cmp::Ordering;

use super::Backend;
use crate::class::{Class, Counters, Tag};

/// Computes in `f32`, in the same order as the fixed back end (no fused multiply-add).
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
        let mut acc = bias.map_or(0.0, |(_, v)| v);
        if stride == 1 {
            for (x, y) in a.iter().zip(b) {
                acc += x * y;
            }
        } else {
            for (x, y) in a.iter().step_by(stride.max(1)).zip(b) {
                acc += x * y;
            }
        }
        self.check(out, acc)
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
        let (mut att, mut lost) = (0u32, 0u32);
        for (w, &xj) in row.iter_mut().zip(x) {
            let inc = step * xj;
            let new = *w + inc;
            let nonzero = inc != 0.0;
            att = att.wrapping_add(u32::from(nonzero));
            lost = lost.wrapping_add(u32::from(nonzero & (new == *w)));
            *w = new;
        }
        self.counters.updated(self.layer, wt.class, att, lost);
        if !step.is_finite() || row.iter().any(|w| !w.is_finite()) {
            self.check(wt, f32::NAN);
        }
    }

    fn decay(&mut self, wt: Tag, row: &mut [f32], k: f32) {
        for w in row.iter_mut() {
            *w -= k * *w;
        }
        if row.iter().any(|w| !w.is_finite()) {
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
