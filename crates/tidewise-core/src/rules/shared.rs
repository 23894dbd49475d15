//! Pieces several rules share: linear feedback, the learned inverse, noise, the difference
//! correction.

use crate::backend::Backend;
use crate::class::Tag;
use crate::kernels::{activate, linear};
use crate::network::Net;
use crate::part::Part;
use crate::rng::Stream;

/// `d_i = M_i · src` for every hidden layer `i`, top down, with the local error after each:
/// `src` is `δ_{i+1}` (`from_output == false`, fa) or `d_L` (dfa, dtp-direct).
pub fn linear_feedback<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, from_output: bool) {
    let plan = net.plan;
    let top = plan.layers();
    crate::kernels::local_error(net, be, top);
    for i in (1..top).rev() {
        be.set_layer(i - 1);
        let ri = plan.node_range(i);
        let Some((lo, hi)) = net.d.split_at_mut_checked(ri.end) else {
            return;
        };
        let out = lo.part_mut(ri.clone());
        let src: &[B::S] = if from_output {
            let rt = plan.node_range(top);
            hi.part(rt.start - ri.end..rt.end - ri.end)
        } else {
            net.delta.part(plan.node_range(i + 1))
        };
        // The source: δ_{i+1} (layer i + 1) or d_L (the output layer).
        let st = Tag::act(if from_output { top } else { i + 1 });
        linear(
            be,
            Tag::feedback(i),
            net.fw.part(plan.fb_range(i)),
            st,
            src,
            None,
            Tag::act(i),
            out,
        );
        crate::kernels::local_error(net, be, i);
    }
}

/// The learned inverse of layer `i + 1`: `out = f_i(G_{i+1} x + c_{i+1})`, derivatives into
/// `fp`. `x` is a layer-(i + 1) quantity (a target, an activation or a reconstruction of
/// `h_{i+1}`); `out` and `fp` are of layer `i`.
#[allow(clippy::too_many_arguments)]
pub fn inverse<B: Backend>(
    net_plan: &crate::plan::Plan,
    fw: &[B::S],
    fb: &[B::S],
    table: &[B::S],
    k: &crate::activation::ActConsts<B::S>,
    be: &mut B,
    i: usize,
    x: &[B::S],
    out: &mut [B::S],
    fp: Option<&mut [B::S]>,
) {
    be.set_layer(i - 1);
    linear(
        be,
        Tag::feedback(i),
        fw.part(net_plan.fb_range(i)),
        Tag::act(i + 1),
        x,
        Some((Tag::feedback(i), fb.part(net_plan.fbb_range(i)))),
        Tag::act(i),
        out,
    );
    activate(be, net_plan.act(i), k, table, Tag::act(i), out, fp);
}

/// `dst = src + ε` for activations of layer `l`, ε of standard deviation σ drawn from
/// `noise` (Irwin-Hall, see [`Stream`]).
pub fn add_noise<B: Backend>(
    be: &mut B,
    amp: B::S,
    noise: &mut Stream,
    l: usize,
    src: &[B::S],
    dst: &mut [B::S],
) {
    let t = Tag::act(l);
    for (d, &s) in dst.iter_mut().zip(src) {
        let e = be.noise(t, amp, noise.irwin_hall4());
        *d = be.add(t, t, s, t, e);
    }
}

/// The difference correction `out = g(τ) − g(h)` (added to `h` it gives DTP's target):
/// `a` holds g(τ), `b` holds g(h), all of layer `l`.
pub fn difference<B: Backend>(be: &mut B, l: usize, a: &[B::S], b: &[B::S], out: &mut [B::S]) {
    let t = Tag::act(l);
    for ((o, &x), &y) in out.iter_mut().zip(a).zip(b) {
        *o = be.sub(t, t, x, t, y);
    }
}

/// `out = x + y` elementwise, all activations of layer `l`.
pub fn sum<B: Backend>(be: &mut B, l: usize, x: &[B::S], y: &[B::S], out: &mut [B::S]) {
    let t = Tag::act(l);
    for ((o, &a), &b) in out.iter_mut().zip(x).zip(y) {
        *o = be.add(t, t, a, t, b);
    }
}
