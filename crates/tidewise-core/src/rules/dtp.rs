//! `dtp`: difference target propagation.
//!
//! `τ_i = g_{i+1}(τ_{i+1}) + h_i − g_{i+1}(h_{i+1})`, so `d_i = g_{i+1}(τ_{i+1}) − g_{i+1}(h_{i+1})`:
//! the difference correction cancels the inverse's reconstruction error, so a zero output
//! displacement gives zero hidden displacements even with an imperfect `g`. Feedback is
//! trained by the layer-wise reconstruction loss of [`super::tp`]. Source: "Difference
//! Target Propagation", ECML PKDD 2015 (LNCS, Springer; `docs/references.md` \[4\]).
//! `dtp-drl` shares these targets.

use crate::backend::Backend;
use crate::kernels::local_error;
use crate::network::Net;
use crate::part::Part;

use super::shared::{difference, inverse, sum};

pub(crate) fn displacements<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B) {
    let plan = net.plan;
    let top = plan.layers();
    local_error(net, be, top);
    for i in (1..top).rev() {
        let [v0, v1, v2, _] = &mut net.v;
        let tau = v0.part_mut(..plan.n(i + 1));
        sum(
            be,
            i + 1,
            net.h.part(plan.h_range(i + 1)),
            net.d.part(plan.node_range(i + 1)),
            tau,
        );
        let (g_tau, g_h) = (v1.part_mut(..plan.n(i)), v2.part_mut(..plan.n(i)));
        inverse(
            &plan, net.fw, net.fb, net.table, &net.k.act, be, i, tau, g_tau, None,
        );
        let h_up = net.h.part(plan.h_range(i + 1));
        inverse(
            &plan, net.fw, net.fb, net.table, &net.k.act, be, i, h_up, g_h, None,
        );
        difference(be, i, g_tau, g_h, net.d.part_mut(plan.node_range(i)));
        local_error(net, be, i);
    }
}
