//! `dtp-drl`: DTP targets, feedback trained by the difference reconstruction loss.
//!
//! For each hidden layer `i`, perturb `h̃_i = h_i + ε` and carry it through the forward
//! layers to the output, `r_L = h̃_L`; then come back down with the same difference
//! correction as the targets, `r_{k−1} = g_k(r_k) + h_{k−1} − g_k(h_k)`, to a reconstruction
//! `r_i`. The loss `‖r_i − h̃_i‖²` (its 1/σ² factor folded into the feedback rate) trains the
//! last inverse of the loop, `g_{i+1}`, with the others held fixed; with the error
//! `e = h̃_i − r_i` the delta rule gives
//! `ΔG_{i+1} = η [(e ⊙ f'(·)|_{r_{i+1}}) r_{i+1}ᵀ − (e ⊙ f'(·)|_{h_{i+1}}) h_{i+1}ᵀ] − η λ G_{i+1}`
//! (the second term comes from the correction's `−g(h_{i+1})`). Because the loop closes
//! through the output, the minimiser makes the propagated targets approximate Gauss-Newton
//! targets instead of layer-wise inverses. Source: "A Theoretical Framework for Target
//! Propagation", NeurIPS 2020 (`docs/references.md` \[5\]).

use crate::backend::Backend;
use crate::class::{Class, Tag};
use crate::kernels::forward_chain;
use crate::network::Net;
use crate::part::Part;
use crate::rng::Stream;

use super::shared::{add_noise, difference, inverse, sum};

pub(crate) fn train_feedback<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, noise: &mut Stream) {
    let plan = net.plan;
    let top = plan.layers();
    let zero = net.k.act.zero();
    let one = [net.k.act.one()];
    for i in 1..top {
        let hi = plan.h_range(i);
        add_noise(
            be,
            net.k.noise_amp,
            noise,
            i,
            net.h.part(hi.clone()),
            net.sh.part_mut(hi.clone()),
        );
        forward_chain(
            be, &plan, net.w, net.b, net.table, &net.k.act, net.sh, i, top, None,
        );
        let rt = plan.h_range(top);
        for (r, &h) in net.sr.part_mut(rt.clone()).iter_mut().zip(net.sh.part(rt)) {
            *r = h;
        }
        // Down the loop to layer i + 1, with the difference correction at every step.
        for k in (i + 2..=top).rev() {
            let [_, v1, v2, v3] = &mut net.v;
            let n = plan.n(k - 1);
            let (g_r, g_h, diff) = (v1.part_mut(..n), v2.part_mut(..n), v3.part_mut(..n));
            let r_k = net.sr.part(plan.h_range(k));
            inverse(
                &plan,
                net.fw,
                net.fb,
                net.table,
                &net.k.act,
                be,
                k - 1,
                r_k,
                g_r,
                None,
            );
            let h_k = net.h.part(plan.h_range(k));
            inverse(
                &plan,
                net.fw,
                net.fb,
                net.table,
                &net.k.act,
                be,
                k - 1,
                h_k,
                g_h,
                None,
            );
            difference(be, k - 1, g_r, g_h, diff);
            sum(
                be,
                k - 1,
                net.h.part(plan.h_range(k - 1)),
                diff,
                net.sr.part_mut(plan.h_range(k - 1)),
            );
        }
        // The last step of the loop, through g_{i+1}, is the one trained.
        let n = plan.n(i);
        let [v0, v1, v2, v3] = &mut net.v;
        let (g_r, fp_r, g_h, fp_h) = (
            v1.part_mut(..n),
            v2.part_mut(..n),
            v3.part_mut(..n),
            v0.part_mut(..n),
        );
        let x_r = net.sr.part(plan.h_range(i + 1));
        let h_up = net.h.part(plan.h_range(i + 1));
        inverse(
            &plan,
            net.fw,
            net.fb,
            net.table,
            &net.k.act,
            be,
            i,
            x_r,
            g_r,
            Some(fp_r),
        );
        inverse(
            &plan,
            net.fw,
            net.fb,
            net.table,
            &net.k.act,
            be,
            i,
            h_up,
            g_h,
            Some(fp_h),
        );
        be.set_layer(i - 1);
        let (noisy, clean) = (net.sh.part(hi.clone()), net.h.part(hi));
        let g = net.fw.part_mut(plan.fb_range(i));
        let c = net.fb.part_mut(plan.fbb_range(i));
        let (t, ft, ut) = (Tag::act(i), Tag::feedback(i), Tag::act(i + 1));
        let g1 = Tag::global(Class::Act);
        for (j, (row, bias)) in g
            .chunks_exact_mut((plan.n(i + 1)).max(1))
            .zip(c.chunks_exact_mut(1))
            .enumerate()
        {
            let at = |s: &[B::S]| s.get(j).copied();
            let (Some(nz), Some(cl), Some(gr), Some(gh), Some(fr), Some(fh)) =
                (at(noisy), at(clean), at(g_r), at(g_h), at(fp_r), at(fp_h))
            else {
                break;
            };
            let eps = be.sub(t, t, nz, t, cl);
            let rec = be.sub(t, t, gr, t, gh);
            let err = be.sub(t, t, eps, t, rec);
            let d_r = be.mul(t, t, err, t, fr);
            let d_h = be.mul(t, t, err, t, fh);
            let neg_d_h = be.sub(t, g1, zero, t, d_h);
            let eta = net.k.lr_feedback;
            be.update(ft, row, eta, t, d_r, ut, x_r);
            be.update(ft, row, eta, t, neg_d_h, ut, h_up);
            be.update(ft, bias, eta, t, d_r, g1, &one);
            be.update(ft, bias, eta, t, neg_d_h, g1, &one);
            be.decay(ft, row, net.k.decay);
        }
    }
}
