//! `dtp-direct`: direct linear feedback from the output, trained by the difference
//! reconstruction loss.
//!
//! Targets: `τ_i = h_i + Q_i (τ_L − h_L)`, i.e. `d_i = Q_i d_L`, `Q_i` of size `n_i × n_L`.
//!
//! Feedback: perturb `h̃_i = h_i + σε`, carry it to the output, `Δ = h̃_L − h_L`, reconstruct
//! with the same difference correction, `r_i = h_i + Q_i Δ`, and descend
//! `E‖r_i − h̃_i‖² + λ‖Q_i‖²`: `ΔQ_i = η [(σε − Q_i Δ) Δᵀ − λ Q_i]`, η = `lr_feedback`,
//! λ = `decay`. These are the core's folded rates: a spec's loss is divided by σ², and the
//! host turns its rate η' and damping λ' into `η = η'/σ²`, `λ = σ² λ'`
//! (`tidewise::spec::feedback_rates`), so that `λ/σ² = λ'` below.
//!
//! **Fixed point of the loss.** When the map from `h_i` to the output is linear near the
//! current point, `Δ = J σε` with `J = ∂h_L/∂h_i`. The expected update vanishes where
//! `E[(σε − Q J σε)(J σε)ᵀ] = λ Q`, i.e. `σ² (Jᵀ − Q J Jᵀ) = λ Q` (using `E[εεᵀ] = I`), so
//! `Q (J Jᵀ + (λ/σ²) I) = Jᵀ` and
//!
//! `Q* = Jᵀ (J Jᵀ + (λ/σ²) I)⁻¹`,
//!
//! the damped pseudo-inverse of the output's Jacobian with the spec's damping `λ/σ² = λ'`:
//! `λ' → 0` gives `J⁺` (Gauss-Newton targets), large `λ'` a multiple of `Jᵀ` (gradient-like
//! targets). Source: "A
//! Theoretical Framework for Target Propagation", NeurIPS 2020 (`docs/references.md` \[5\]).

use crate::backend::Backend;
use crate::class::Tag;
use crate::kernels::{forward_chain, linear};
use crate::network::Net;
use crate::part::Part;
use crate::rng::Stream;

use super::shared::{add_noise, difference};

pub(crate) fn displacements<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B) {
    super::shared::linear_feedback(net, be, true);
}

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
        be.set_layer(i - 1);
        let rt = plan.h_range(top);
        let [v0, v1, _, _] = &mut net.v;
        let delta_out = v0.part_mut(..plan.n(top));
        difference(be, top, net.sh.part(rt.clone()), net.h.part(rt), delta_out);
        let rec = v1.part_mut(..plan.n(i));
        let q = net.fw.part_mut(plan.fb_range(i));
        let (t, ft, ot) = (Tag::act(i), Tag::feedback(i), Tag::act(top));
        linear(be, ft, q, ot, delta_out, None, t, rec);
        let (noisy, clean) = (net.sh.part(hi.clone()), net.h.part(hi));
        for (j, row) in q.chunks_exact_mut(plan.n(top).max(1)).enumerate() {
            let (Some(&nz), Some(&cl), Some(&rc)) = (noisy.get(j), clean.get(j), rec.get(j)) else {
                break;
            };
            let eps = be.sub(t, t, nz, t, cl);
            let err = be.sub(t, t, eps, t, rc);
            be.update(ft, row, net.k.lr_feedback, t, err, ot, delta_out);
            be.decay(ft, row, net.k.decay);
        }
    }
}
