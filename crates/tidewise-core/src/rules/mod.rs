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

/// A learning rule, by its published name.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum Rule {
    /// Error backpropagation (needs weight transport: the reference, not a local rule).
    Bp,
    /// Feedback alignment: fixed random feedback from the layer above.
    Fa,
    /// Direct feedback alignment: fixed random feedback from the output.
    Dfa,
    /// Target propagation through learned approximate inverses.
    Tp,
    /// Difference target propagation.
    Dtp,
    /// Difference target propagation with feedback trained by the difference reconstruction loss.
    DtpDrl,
    /// Direct linear feedback from the output, trained by the difference reconstruction loss.
    DtpDirect,
}

/// What feedback tensors a rule keeps for each hidden layer `i`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Feedback {
    /// None (bp uses the forward weights themselves).
    None,
    /// A matrix `n_i × n_{i+1}` from the layer above (fa).
    NextLayer,
    /// A learned inverse `g_{i+1}(v) = f_i(G v + c)`: `n_i × n_{i+1}` plus a bias (tp family).
    Inverse,
    /// A matrix `n_i × n_L` from the output (dfa, dtp-direct).
    Direct,
}

impl Rule {
    /// Every rule.
    pub const ALL: [Rule; 7] = [
        Rule::Bp,
        Rule::Fa,
        Rule::Dfa,
        Rule::Tp,
        Rule::Dtp,
        Rule::DtpDrl,
        Rule::DtpDirect,
    ];
    /// Names accepted by [`Rule::parse`].
    pub const NAMES: [&'static str; 7] = ["bp", "fa", "dfa", "tp", "dtp", "dtp-drl", "dtp-direct"];

    /// Parses a rule name.
    pub fn parse(name: &str) -> Option<Rule> {
        Rule::ALL.iter().copied().find(|r| r.name() == name)
    }

    /// The rule's name.
    pub const fn name(self) -> &'static str {
        match self {
            Rule::Bp => "bp",
            Rule::Fa => "fa",
            Rule::Dfa => "dfa",
            Rule::Tp => "tp",
            Rule::Dtp => "dtp",
            Rule::DtpDrl => "dtp-drl",
            Rule::DtpDirect => "dtp-direct",
        }
    }

    /// The feedback tensors the rule keeps.
    pub const fn feedback(self) -> Feedback {
        match self {
            Rule::Bp => Feedback::None,
            Rule::Fa => Feedback::NextLayer,
            Rule::Dfa | Rule::DtpDirect => Feedback::Direct,
            Rule::Tp | Rule::Dtp | Rule::DtpDrl => Feedback::Inverse,
        }
    }

    /// Whether the feedback is trained (rather than fixed or absent).
    pub const fn learns_feedback(self) -> bool {
        matches!(self, Rule::Tp | Rule::Dtp | Rule::DtpDrl | Rule::DtpDirect)
    }
}

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
