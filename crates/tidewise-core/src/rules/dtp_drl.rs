//! `dtp-drl`: DTP targets, feedback trained by the difference reconstruction loss.
//!
//! **Loop.** For hidden layer `i`, the difference-corrected way down from the output is
//! `r_{k−1} = g_k(r_k) + h_{k−1} − g_k(h_k)` (the same correction as the targets), from
//! `r_L` to `r_i`, with `g_k(v) = f_{k−1}(G_k v + c_k)`.
//!
//! **Data term.** Perturb `h̃_i = h_i + σε₁`, carry it through the forward layers to the
//! output, `r_L = h̃_L`, come back down to `r_i`, and penalise `‖r_i − h̃_i‖²`.
//!
//! **Regulariser** ([`crate::network::Regulariser`]), weight λ:
//! - `OutputNoise`: perturb the output instead, `r_L = h_L + σε₂`, come back
//!   down to `r'_i`, and penalise `λ‖r'_i − h_i‖²`. To first order `r'_i − h_i = M_i σε₂`,
//!   `M_i = ∂g_{i+1}/∂h_{i+1} ⋯ ∂g_L/∂h_L` the feedback Jacobian the loop uses, so the term
//!   is a noise estimate of `λσ²‖M_i‖²_F` whatever the feedback layers' nonlinearity.
//! - `Decay` (the default, see [`Regulariser`] for why): plain weight decay `λ‖G_{i+1}‖²` (the norm of the feedback Jacobian only for a
//!   single linear feedback layer).
//!
//! The loss of layer `i` trains the last inverse of its loop, `g_{i+1}`, the others held.
//! With `u = r_{i+1}`, `v = h_{i+1}`, `f'_u`, `f'_v` the slopes at the two pre-activations
//! and `e` the error of a term (`e = h̃_i − r_i` for the data term, `e = −(r'_i − h_i)` for
//! the output-noise term), the descent step of a term is
//! `ΔG_{i+1} = η_e [(e ⊙ f'_u) uᵀ − (e ⊙ f'_v) vᵀ]`, `Δc_{i+1} = η_e (e ⊙ f'_u − e ⊙ f'_v)`,
//! with `η_e = η` for the data term and `η λ` for the regulariser (η = `lr_feedback`,
//! λ = `decay`). Weight decay instead steps `ΔG_{i+1} = −η λ G_{i+1}`. These are the
//! core's folded rates: a spec divides the loss by σ² and the host folds that into them
//! (`tidewise::spec::feedback_rates`: `η = η'/σ²`, and `λ = λ'` for output noise, `σ² λ'`
//! for weight decay), so that in the spec's terms both fixed points below have damping λ'.
//!
//! **Fixed point (output noise).** Linearised, with `J_i = ∂h_L/∂h_i` and `M_i = A B`
//! (`A = ∂g_{i+1}`, `B = M_{i+1}`), the expected step vanishes where
//! `A B (J_i J_iᵀ + λ I) Bᵀ = J_iᵀ Bᵀ`; with `B` of full column rank this is
//! `M_i = J_iᵀ (J_i J_iᵀ + λ I)⁻¹`, the damped pseudo-inverse with `γ = λ` (σ² cancels: both
//! terms carry it). Weight decay gives `M_i = J_iᵀ Bᵀ (B J_i J_iᵀ Bᵀ + (λ/σ²) I)⁻¹ B`
//! instead, the damped pseudo-inverse only when `i` is the last hidden layer (`B = I`).
//! `tests/tests/rules_drl_feedback.rs` measures both on a two-hidden-layer network.
//! Because the loop closes through the output, the minimiser makes the propagated targets
//! approximate Gauss-Newton targets instead of layer-wise inverses. Source: "A Theoretical
//! Framework for Target Propagation", NeurIPS 2020 (`docs/references.md` \[5\]).

use crate::backend::Backend;
use crate::class::{Class, Tag};
use crate::kernels::forward_chain;
use crate::network::{Net, Regulariser};
use crate::part::Part;
use crate::rng::Stream;

use super::shared::{add_noise, difference, inverse, sum};

pub(crate) fn train_feedback<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, noise: &mut Stream) {
    let plan = net.plan;
    let top = plan.layers();
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
        for (r, &h) in net
            .sr
            .part_mut(rt.clone())
            .iter_mut()
            .zip(net.sh.part(rt.clone()))
        {
            *r = h;
        }
        loop_down(net, be, i);
        let eta = net.k.lr_feedback;
        let decay = match net.k.regulariser {
            Regulariser::Decay => Some(net.k.decay),
            Regulariser::OutputNoise => None,
        };
        train_last(net, be, i, eta, true, decay);
        if net.k.regulariser == Regulariser::OutputNoise {
            add_noise(
                be,
                net.k.noise_amp,
                noise,
                top,
                net.h.part(rt.clone()),
                net.sr.part_mut(rt),
            );
            loop_down(net, be, i);
            let eta_lambda = net.k.decay;
            train_last(net, be, i, eta_lambda, false, None);
        }
    }
}

/// Down the loop from `r_L` (in `sr`) to `r_{i+1}`, with the difference correction at every
/// step.
fn loop_down<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, i: usize) {
    let plan = net.plan;
    for k in (i + 2..=plan.layers()).rev() {
        let [_, v1, v2, v3] = &mut net.v;
        let n = plan.n(k - 1);
        let (g_r, g_h, diff) = (v1.part_mut(..n), v2.part_mut(..n), v3.part_mut(..n));
        let r_k = net.sr.part(plan.h_range(k));
        let (fw, fb, table, act) = (&*net.fw, &*net.fb, &*net.table, &net.k.act);
        inverse(&plan, fw, fb, table, act, be, k - 1, r_k, g_r, None);
        let h_k = net.h.part(plan.h_range(k));
        inverse(&plan, fw, fb, table, act, be, k - 1, h_k, g_h, None);
        difference(be, k - 1, g_r, g_h, diff);
        sum(
            be,
            k - 1,
            net.h.part(plan.h_range(k - 1)),
            diff,
            net.sr.part_mut(plan.h_range(k - 1)),
        );
    }
}

/// The step through `g_{i+1}`, the trained one: `r_i − h_i = g_{i+1}(r_{i+1}) − g_{i+1}(h_{i+1})`
/// and the delta rule of the module doc at rate `eta`. `data` selects the error: `h̃_i − r_i`
/// (the noisy copy in `sh`) for the data term, `h_i − r'_i` for the output-noise term;
/// `decay` (η λ) decays each row after its update.
fn train_last<B: Backend>(
    net: &mut Net<'_, B::S>,
    be: &mut B,
    i: usize,
    eta: B::S,
    data: bool,
    decay: Option<B::S>,
) {
    let plan = net.plan;
    let zero = net.k.act.zero();
    let one = [net.k.act.one()];
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
    let (fw, fb, table, act) = (&*net.fw, &*net.fb, &*net.table, &net.k.act);
    inverse(&plan, fw, fb, table, act, be, i, x_r, g_r, Some(fp_r));
    inverse(&plan, fw, fb, table, act, be, i, h_up, g_h, Some(fp_h));
    be.set_layer(i - 1);
    let hi = plan.h_range(i);
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
        let rec = be.sub(t, t, gr, t, gh);
        let err = if data {
            let eps = be.sub(t, t, nz, t, cl);
            be.sub(t, t, eps, t, rec)
        } else {
            be.sub(t, g1, zero, t, rec)
        };
        let d_r = be.mul(t, t, err, t, fr);
        let d_h = be.mul(t, t, err, t, fh);
        let neg_d_h = be.sub(t, g1, zero, t, d_h);
        be.update(ft, row, eta, t, d_r, ut, x_r);
        be.update(ft, row, eta, t, neg_d_h, ut, h_up);
        be.update(ft, bias, eta, t, d_r, g1, &one);
        be.update(ft, bias, eta, t, neg_d_h, g1, &one);
        if let Some(k) = decay {
            be.decay(ft, row, k);
        }
    }
}
