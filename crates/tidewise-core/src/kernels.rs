//! Layer kernels shared by every rule: linear maps, activations, the forward pass, the
//! output target and the local delta-rule update.

use crate::activation::{ActConsts, Activation};
use crate::backend::Backend;
use crate::class::{Class, Tag};
use crate::network::Net;
use crate::part::Part;
use crate::plan::Plan;

/// `out[r] = Σ_c m[r, c] · x[c] (+ bias[r])`, `m` row-major with `x.len()` columns; `m` is
/// of tag `mt`, `x` of `xt`, the bias of its own tag and `out` is rounded into `ot`.
#[allow(clippy::too_many_arguments)]
pub fn linear<B: Backend>(
    be: &mut B,
    mt: Tag,
    m: &[B::S],
    xt: Tag,
    x: &[B::S],
    bias: Option<(Tag, &[B::S])>,
    ot: Tag,
    out: &mut [B::S],
) {
    be.dot_rows(ot, mt, m, xt, x, bias, out);
}

/// Applies `f` in place to the pre-activations `z` of tag `t`, storing `f'` (also of tag
/// `t`) into `fp` when given.
pub fn activate<B: Backend>(
    be: &mut B,
    f: Activation,
    k: &ActConsts<B::S>,
    table: &[B::S],
    t: Tag,
    z: &mut [B::S],
    mut fp: Option<&mut [B::S]>,
) {
    let lk = k.at(be, table, t);
    for (j, v) in z.iter_mut().enumerate() {
        let (y, d) = f.apply(be, k, &lk, table, *v, t);
        *v = y;
        if let Some(slot) = fp.as_deref_mut().and_then(|fp| fp.get_mut(j)) {
            *slot = d;
        }
    }
}

/// The forward pass from layer `from` (whose values are already in `chain`) up to layer `to`,
/// in a buffer laid out like the activations; derivatives go to `fp` when given.
#[allow(clippy::too_many_arguments)]
pub fn forward_chain<B: Backend>(
    be: &mut B,
    plan: &Plan,
    w: &[B::S],
    b: &[B::S],
    table: &[B::S],
    k: &ActConsts<B::S>,
    chain: &mut [B::S],
    from: usize,
    to: usize,
    mut fp: Option<&mut [B::S]>,
) {
    for l in from + 1..=to.min(plan.layers()) {
        be.set_layer(l - 1);
        let Some((lo, hi)) = chain.split_at_mut_checked(plan.h_range(l).start) else {
            return;
        };
        let x = lo.part(plan.h_range(l - 1));
        let out = hi.part_mut(..plan.n(l));
        linear(
            be,
            Tag::weights(l),
            w.part(plan.w_range(l)),
            Tag::act(l - 1),
            x,
            Some((Tag::bias(l), b.part(plan.node_range(l)))),
            Tag::act(l),
            out,
        );
        let fpl = fp.as_deref_mut().map(|fp| fp.part_mut(plan.node_range(l)));
        activate(be, plan.act(l), k, table, Tag::act(l), out, fpl);
    }
}

/// The forward pass of `x` through the network, keeping activations and derivatives.
pub fn forward<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, x: &[B::S]) {
    let r = net.plan.h_range(0);
    for (h, &v) in net.h.part_mut(r).iter_mut().zip(x) {
        *h = v;
    }
    let top = net.plan.layers();
    forward_chain(
        be,
        &net.plan,
        net.w,
        net.b,
        net.table,
        &net.k.act,
        net.h,
        0,
        top,
        Some(net.fp),
    );
}

/// Index of the largest output (the first of equals).
pub fn argmax<S: PartialOrd + Copy>(v: &[S]) -> usize {
    let mut best: Option<(usize, S)> = None;
    for (j, &x) in v.iter().enumerate() {
        if best.is_none_or(|(_, b)| x > b) {
            best = Some((j, x));
        }
    }
    best.map_or(0, |(j, _)| j)
}

/// The output displacement `d_L = τ_L − h_L = β (y − h_L)` for the squared error
/// `½‖h_L − y‖²` on a one-hot label; returns that loss and whether the prediction was right.
pub fn output_target<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, label: usize) -> (f64, bool) {
    let plan = net.plan;
    let l = plan.layers();
    be.set_layer(l - 1);
    let out = net.h.part(plan.h_range(l));
    let correct = argmax(out) == label;
    let (t, g) = (Tag::act(l), Tag::global(Class::Act));
    let mut loss = 0f64;
    for (j, (d, &h)) in net
        .d
        .part_mut(plan.node_range(l))
        .iter_mut()
        .zip(out)
        .enumerate()
    {
        let y = if j == label {
            net.k.act.one()
        } else {
            net.k.act.zero()
        };
        let e = be.sub(t, g, y, t, h);
        let ef = f64::from(be.decode(t, e));
        loss += 0.5 * ef * ef;
        *d = be.mul(t, g, net.k.beta, t, e);
    }
    (loss, correct)
}

/// `δ_l = d_l ⊙ f'(a_l)` for layer `l`.
pub fn local_error<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, l: usize) {
    be.set_layer(l - 1);
    let t = Tag::act(l);
    let r = net.plan.node_range(l);
    for ((e, &d), &fp) in net
        .delta
        .part_mut(r.clone())
        .iter_mut()
        .zip(net.d.part(r.clone()))
        .zip(net.fp.part(r))
    {
        *e = be.mul(t, t, d, t, fp);
    }
}

/// The local delta rule of layer `l`: `W_l += η δ_l h_{l−1}ᵀ`, `b_l += η δ_l`.
pub fn update_layer<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, l: usize) {
    let plan = net.plan;
    be.set_layer(l - 1);
    let cols = plan.n(l - 1);
    let x = net.h.part(plan.h_range(l - 1));
    let w = net.w.part_mut(plan.w_range(l));
    let nr = plan.node_range(l);
    let one = [net.k.act.one()];
    let (wt, bt, et, xt) = (Tag::weights(l), Tag::bias(l), Tag::act(l), Tag::act(l - 1));
    let g = Tag::global(Class::Act);
    // The layer's own rate: η, shifted down for a wide fan-in (`Consts::layer_lr`).
    let lr = net.k.layer_lr(l);
    for ((row, bias), &e) in w
        .chunks_exact_mut(cols.max(1))
        .zip(net.b.part_mut(nr.clone()).chunks_exact_mut(1))
        .zip(net.delta.part(nr))
    {
        be.update(wt, row, lr, et, e, xt, x);
        be.update(bt, bias, lr, et, e, g, &one);
    }
}
