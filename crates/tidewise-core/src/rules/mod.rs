//! Learning rules: how each hidden layer gets its target, and how feedback is learned.
//!
//! Every rule ends in the same local delta rule (see [`crate::kernels::update_layer`]):
//! layer `l` moves towards its target `τ_l = h_l + d_l` by
//! `ΔW_l = η ((τ_l − h_l) ⊙ f'(a_l)) h_{l−1}ᵀ`. The output displacement is
//! `d_L = β (y − h_L)`, a step of β down the squared error. The rules differ only in how
//! they compute the hidden displacements `d_l` and in how their feedback is trained;
//! each file states its equations.

mod bp;
mod dfa;
mod dtp;
mod dtp_direct;
mod dtp_drl;
mod fa;
pub mod shared;
mod tp;

use crate::backend::Backend;
use crate::network::Net;
use crate::rng::Stream;

pub use crate::rule::{Feedback, Rule};

/// Fills the hidden displacements `d_l` and all local errors `δ_l`, top down, from the
/// output displacement already in place. Uses the weights as they are (before this sample's
/// update).
pub fn displacements<B: Backend>(rule: Rule, net: &mut Net<'_, B::S>, be: &mut B) {
    match rule {
        Rule::Bp => bp::displacements(net, be),
        Rule::Fa => fa::displacements(net, be),
        Rule::Dfa => dfa::displacements(net, be),
        Rule::Tp => tp::displacements(net, be),
        Rule::Dtp | Rule::DtpDrl => dtp::displacements(net, be),
        Rule::DtpDirect => dtp_direct::displacements(net, be),
    }
}

/// One feedback-training step on the current sample (after its forward pass).
pub fn train_feedback<B: Backend>(
    rule: Rule,
    net: &mut Net<'_, B::S>,
    be: &mut B,
    noise: &mut Stream,
) {
    match rule {
        Rule::Bp | Rule::Fa | Rule::Dfa => {}
        Rule::Tp | Rule::Dtp => tp::train_feedback(net, be, noise),
        Rule::DtpDrl => dtp_drl::train_feedback(net, be, noise),
        Rule::DtpDirect => dtp_direct::train_feedback(net, be, noise),
    }
}
