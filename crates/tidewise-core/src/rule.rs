//! The learning rules by name, and the feedback storage each needs: what the storage plan
//! ([`crate::plan`]) reads. The rules' kernels are in [`crate::rules`], which re-exports these
//! types; keeping them apart lets the plan depend on the rules' names without depending on
//! their kernels (which work on a [`crate::network::Net`] laid out by the plan).

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

    /// Whether the rule trains its feedback with the difference reconstruction loss, whose
    /// error terms are of order σ² (`dtp-drl`, `dtp-direct`): a spec gives its rate for the
    /// loss divided by σ², which the host folds into the core's rate constants.
    pub const fn normalises_feedback_loss(self) -> bool {
        matches!(self, Rule::DtpDrl | Rule::DtpDirect)
    }
}
