//! `tp`: target propagation through learned approximate inverses.
//!
//! Targets: `τ_L = h_L + d_L`, then `τ_i = g_{i+1}(τ_{i+1})` down the hidden layers, with the
//! learned inverse `g_{i+1}(v) = f_i(G_{i+1} v + c_{i+1})`; so `d_i = g_{i+1}(τ_{i+1}) − h_i`.
//!
//! Feedback (also used by `dtp`): the layer-wise reconstruction loss on noise-perturbed
//! activations, `‖g_{i+1}(f_{i+1}(W_{i+1} h̃_i + b_{i+1})) − h̃_i‖²` with `h̃_i = h_i + ε`,
//! `ε ~ σ·N(0, 1)` (Irwin-Hall), minimised by the delta rule on `G_{i+1}` and `c_{i+1}`.
//! Source: "Difference Target Propagation", ECML PKDD 2015 (LNCS, Springer;
//! `docs/references.md` \[4\]).

use crate::backend::Backend;
use crate::class::{Class, Tag};
use crate::kernels::{forward_chain, local_error};
use crate::network::Net;
use crate::part::Part;
use crate::rng::Stream;

use super::shared::{add_noise, inverse, sum};

pub(crate) fn displacements<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B) {
    let plan = net.plan;
    let top = plan.layers();
    local_error(net, be, top);
    for i in (1..top).rev() {
        let [v0, v1, _, _] = &mut net.v;
        let up = plan.node_range(i + 1);
        let tau = v0.part_mut(..plan.n(i + 1));
        sum(
            be,
            i + 1,
            net.h.part(plan.h_range(i + 1)),
            net.d.part(up),
            tau,
        );
        let g = v1.part_mut(..plan.n(i));
        inverse(
            &plan, net.fw, net.fb, net.table, &net.k.act, be, i, tau, g, None,
        );
        let h = net.h.part(plan.h_range(i));
        let t = Tag::act(i);
        for ((d, &gv), &hv) in net
            .d
            .part_mut(plan.node_range(i))
            .iter_mut()
            .zip(g.iter())
            .zip(h)
        {
            *d = be.sub(t, t, gv, t, hv);
        }
        local_error(net, be, i);
    }
}

/// One step of the layer-wise reconstruction loss for every learned inverse.
pub(crate) fn train_feedback<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, noise: &mut Stream) {
    let plan = net.plan;
    let one = [net.k.act.one()];
    for i in 1..plan.layers() {
        let (hi, hu) = (plan.h_range(i), plan.h_range(i + 1));
        add_noise(
            be,
            net.k.noise_amp,
            noise,
            i,
            net.h.part(hi.clone()),
            net.sh.part_mut(hi.clone()),
        );
        forward_chain(
            be,
            &plan,
            net.w,
            net.b,
            net.table,
            &net.k.act,
            net.sh,
            i,
            i + 1,
            None,
        );
        let [_, v1, v2, _] = &mut net.v;
        let (r, fp) = (v1.part_mut(..plan.n(i)), v2.part_mut(..plan.n(i)));
        let y = net.sh.part(hu);
        inverse(
            &plan,
            net.fw,
            net.fb,
            net.table,
            &net.k.act,
            be,
            i,
            y,
            r,
            Some(fp),
        );
        be.set_layer(i - 1);
        let target = net.sh.part(hi);
        let g = net.fw.part_mut(plan.fb_range(i));
        let c = net.fb.part_mut(plan.fbb_range(i));
        let (t, ft, yt) = (Tag::act(i), Tag::feedback(i), Tag::act(i + 1));
        let g1 = Tag::global(Class::Act);
        for (j, (row, bias)) in g
            .chunks_exact_mut((plan.n(i + 1)).max(1))
            .zip(c.chunks_exact_mut(1))
            .enumerate()
        {
            let (Some(&tv), Some(&rj), Some(&fj)) = (target.get(j), r.get(j), fp.get(j)) else {
                break;
            };
            let err = be.sub(t, t, tv, t, rj);
            let delta = be.mul(t, t, err, t, fj);
            be.update(ft, row, net.k.lr_feedback, t, delta, yt, y);
            be.update(ft, bias, net.k.lr_feedback, t, delta, g1, &one);
        }
    }
}
