//! `bp`: error backpropagation, the reference.
//!
//! `d_l = W_{l+1}ᵀ δ_{l+1}`, `δ_l = d_l ⊙ f'(a_l)`: with `d_L = −β ∂L/∂h_L` this is exactly
//! `−β ∂L/∂h_l`, so the delta rule takes a step of `η β` down the gradient. It needs the
//! forward weights in the backward path (weight transport), which is why it is a baseline
//! and not a local rule. Source: "Learning representations by back-propagating errors",
//! Nature 323, 1986 (`docs/references.md` \[1\]).

use crate::backend::Backend;
use crate::class::Tag;
use crate::kernels::local_error;
use crate::network::Net;
use crate::part::Part;

pub(crate) fn displacements<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B) {
    let plan = net.plan;
    let top = plan.layers();
    local_error(net, be, top);
    for l in (1..top).rev() {
        be.set_layer(l - 1);
        let n = plan.n(l);
        let w = net.w.part(plan.w_range(l + 1));
        let e = net.delta.part(plan.node_range(l + 1));
        // Wᵀ_{l+1} δ_{l+1}: column j of W_{l+1} (stride n) against δ_{l+1}.
        be.dot_columns(
            Tag::act(l),
            Tag::weights(l + 1),
            w,
            n,
            Tag::act(l + 1),
            e,
            net.d.part_mut(plan.node_range(l)),
        );
        local_error(net, be, l);
    }
}
