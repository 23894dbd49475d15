//! Tensor names and shapes of a network's learned parameters, and where each lies in
//! [`tidewise_core::network::Net::params`].

use std::ops::Range;

use tidewise_core::class::{Class, Tag};
use tidewise_core::plan::Plan;

/// What a tensor holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Kind {
    /// Forward weights W_l.
    ForwardWeights,
    /// Forward biases b_l.
    Biases,
    /// Feedback matrix of a hidden layer (B, G or Q, by rule).
    FeedbackWeights,
    /// Feedback bias of a hidden layer (learned inverses).
    FeedbackBiases,
}

impl Kind {
    /// Every kind, in [`tidewise_core::network::Net::params`] order.
    pub const ALL: [Kind; 4] = [
        Kind::ForwardWeights,
        Kind::Biases,
        Kind::FeedbackWeights,
        Kind::FeedbackBiases,
    ];

    /// The name in tensor names.
    pub fn name(self) -> &'static str {
        match self {
            Kind::ForwardWeights => "forward_weights",
            Kind::Biases => "biases",
            Kind::FeedbackWeights => "feedback_weights",
            Kind::FeedbackBiases => "feedback_biases",
        }
    }

    /// The tensor class (and so the fixed-point format) of its values.
    pub fn class(self) -> Class {
        match self {
            Kind::ForwardWeights => Class::Forward,
            Kind::Biases => Class::Bias,
            Kind::FeedbackWeights | Kind::FeedbackBiases => Class::Feedback,
        }
    }

    /// Index into `Net::params`.
    pub fn part(self) -> usize {
        self as usize
    }

    /// Whether the rule may do without it (feedback is drawn from the seed when absent).
    pub fn optional(self) -> bool {
        matches!(self, Kind::FeedbackWeights | Kind::FeedbackBiases)
    }
}

/// One tensor of a network.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Tensor {
    /// 1-based weight layer.
    pub layer: usize,
    /// What it holds.
    pub kind: Kind,
    /// Row-major shape.
    pub shape: Vec<usize>,
    /// Its values in `Net::params()[kind.part()]`.
    pub range: Range<usize>,
}

impl Tensor {
    /// The tag its values are stored under (class and layer: the fixed-point format).
    pub fn tag(&self) -> Tag {
        Tag::at(self.kind.class(), self.layer)
    }

    /// `layer<L>.<kind>`.
    pub fn name(&self) -> String {
        name(self.layer, self.kind)
    }

    /// Number of values.
    pub fn len(&self) -> usize {
        self.range.len()
    }

    /// Whether it holds no values.
    pub fn is_empty(&self) -> bool {
        self.range.is_empty()
    }

    /// Its values among a network's parameters (`Net::params()`).
    pub fn of<'a, S>(&self, params: &[&'a [S]; 4]) -> &'a [S] {
        params
            .get(self.kind.part())
            .and_then(|p| p.get(self.range.clone()))
            .unwrap_or(&[])
    }
}

/// `layer<L>.<kind>`.
pub fn name(layer: usize, kind: Kind) -> String {
    format!("layer{layer}.{}", kind.name())
}

/// The layer and kind a tensor name says, if it is one.
pub fn parse(name: &str) -> Option<(usize, Kind)> {
    let (layer, kind) = name.strip_prefix("layer")?.split_once('.')?;
    if layer.is_empty() || !layer.bytes().all(|b| b.is_ascii_digit()) || layer.starts_with('0') {
        return None;
    }
    let kind = Kind::ALL.into_iter().find(|k| k.name() == kind)?;
    Some((layer.parse().ok()?, kind))
}

/// Every learned tensor of `plan`, in `Net::params` order (all forward weights, then biases,
/// feedback matrices, feedback biases; layer by layer within each).
pub fn tensors(plan: &Plan) -> Vec<Tensor> {
    let layers = plan.layers();
    let mut out = Vec::new();
    let mut push = |layer: usize, kind: Kind, shape: Vec<usize>, range: Range<usize>| {
        // Feedback tensors the rule does not have are empty.
        if !range.is_empty() {
            out.push(Tensor {
                layer,
                kind,
                shape,
                range,
            });
        }
    };
    for l in 1..=layers {
        let shape = vec![plan.n(l), plan.n(l - 1)];
        push(l, Kind::ForwardWeights, shape, plan.w_range(l));
    }
    for l in 1..=layers {
        push(l, Kind::Biases, vec![plan.n(l)], plan.node_range(l));
    }
    for i in 1..layers {
        let shape = vec![plan.n(i), plan.fb_cols(i)];
        push(i, Kind::FeedbackWeights, shape, plan.fb_range(i));
    }
    for i in 1..layers {
        push(i, Kind::FeedbackBiases, vec![plan.n(i)], plan.fbb_range(i));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use tidewise_core::activation::Activation;
    use tidewise_core::plan::Shape;
    use tidewise_core::rules::Rule;

    fn plan(rule: Rule) -> Plan {
        Plan::new(
            Shape::new(&[7, 5, 3, 2]).unwrap(),
            rule,
            Activation::Tanh,
            Activation::Identity,
        )
    }

    #[test]
    fn tensors_tile_the_parameters() {
        for rule in Rule::ALL {
            let p = plan(rule);
            let c = p.counts();
            let ts = tensors(&p);
            for (kind, total) in [
                (Kind::ForwardWeights, c.forward_weights),
                (Kind::Biases, c.biases),
            ] {
                let mut at = 0;
                for t in ts.iter().filter(|t| t.kind == kind) {
                    assert_eq!(t.range.start, at, "{rule:?} {}", t.name());
                    assert_eq!(t.len(), t.shape.iter().product::<usize>());
                    at = t.range.end;
                }
                assert_eq!(at, total, "{rule:?} {kind:?}");
            }
            let fb: usize = ts
                .iter()
                .filter(|t| t.kind.optional())
                .map(Tensor::len)
                .sum();
            assert_eq!(fb, c.feedback_weights, "{rule:?}");
        }
        let names: Vec<String> = tensors(&plan(Rule::Dtp)).iter().map(Tensor::name).collect();
        assert_eq!(
            names,
            [
                "layer1.forward_weights",
                "layer2.forward_weights",
                "layer3.forward_weights",
                "layer1.biases",
                "layer2.biases",
                "layer3.biases",
                "layer1.feedback_weights",
                "layer2.feedback_weights",
                "layer1.feedback_biases",
                "layer2.feedback_biases"
            ]
        );
        let dtp = tensors(&plan(Rule::Dtp));
        assert_eq!(dtp[6].shape, [5, 3]);
        let direct = tensors(&plan(Rule::DtpDirect));
        assert_eq!(direct[6].shape, [5, 2]);
        assert_eq!(tensors(&plan(Rule::Bp)).len(), 6);
    }

    #[test]
    fn names_parse_back() {
        for t in tensors(&plan(Rule::Tp)) {
            assert_eq!(parse(&t.name()), Some((t.layer, t.kind)));
        }
        for bad in [
            "layer0.biases",
            "layer01.biases",
            "layer.biases",
            "layer1.weights",
            "w1",
            "layer1biases",
            "layer-1.biases",
        ] {
            assert_eq!(parse(bad), None, "{bad}");
        }
    }
}
