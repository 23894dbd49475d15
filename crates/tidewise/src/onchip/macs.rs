//! Multiply-accumulates of one training step, by phase: the vector-kernel terms of the
//! operation census ([`crate::energy::census`]).
//!
//! A MAC here is one term of a vector kernel of the back end: a term of a dot product
//! (`Backend::dot`), one weight of a row update `w += step · x` (`Backend::update`), or one
//! weight of a decay `w -= k · w` (`Backend::decay`). Every term is counted whether or not
//! the back end skips it (a zero step or input), as a datapath without zero skipping
//! computes it. Element-wise products over the neurons (the output displacement `β e`,
//! `δ = d ⊙ f'`, noise scaling, activations) are not counted: they are O(neurons), the
//! counted terms O(weights).
//!
//! The counts come from running the rule's kernels through the census's counting back end,
//! so a change to a rule's equations changes them on its own; there is no per-rule model
//! to keep in step.

use serde::Serialize;
use tidewise_core::network::Hyper;
use tidewise_core::plan::Plan;

use crate::energy::{self, EnergyError, Phase};

/// MACs of one training sample, by phase.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Macs {
    /// The forward pass (and the output target, which has no vector-kernel terms).
    pub forward: u64,
    /// Feedback training, all `K` steps.
    pub feedback: u64,
    /// Hidden targets (displacements).
    pub targets: u64,
    /// Forward weight and bias updates.
    pub updates: u64,
}

impl Macs {
    /// A full step.
    pub fn total(&self) -> u64 {
        self.forward + self.feedback + self.targets + self.updates
    }

    /// A warm-up step (feedback only): forward pass and feedback training.
    pub fn warmup(&self) -> u64 {
        self.forward + self.feedback
    }

    /// An evaluation sample: the forward pass only.
    pub fn eval(&self) -> u64 {
        self.forward
    }
}

/// MACs of one training sample of `plan` with `hyper` (its `K = hyper.feedback_steps`
/// feedback steps for a rule that learns feedback), from the operation census.
pub fn per_step(plan: &Plan, hyper: &Hyper) -> Result<Macs, EnergyError> {
    let ops = energy::census(plan, hyper)?;
    let terms = |p: Phase| ops.phase(p).terms;
    Ok(Macs {
        forward: terms(Phase::Forward) + terms(Phase::OutputTarget),
        feedback: terms(Phase::Feedback),
        targets: terms(Phase::Targets),
        updates: terms(Phase::Update),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use tidewise_core::activation::Activation;
    use tidewise_core::plan::Shape;
    use tidewise_core::rules::Rule;

    fn hyper(k: u8) -> Hyper {
        Hyper {
            lr: 0.02,
            lr_feedback: 0.01,
            beta: 1.0,
            sigma: 0.1,
            decay: 0.01,
            feedback_steps: k,
            lr_fan_in: 0,
            regulariser: Default::default(),
        }
    }

    fn plan(sizes: &[usize], rule: Rule) -> Plan {
        Plan::new(
            Shape::new(sizes).unwrap(),
            rule,
            Activation::Tanh,
            Activation::Identity,
        )
    }

    #[test]
    fn a_hand_count() {
        // 64-16-10 dtp-direct, K = 1, worked by hand: forward 64·16 + 16·10 = 1184;
        // feedback: noisy forward 16·10 = 160, Q Δ 160, row updates 160, decay 160 = 640;
        // targets Q d_L = 160; updates 1184 weights + 26 biases = 1210. Total 3194.
        let m = per_step(&plan(&[64, 16, 10], Rule::DtpDirect), &hyper(1)).unwrap();
        assert_eq!(
            (m.forward, m.feedback, m.targets, m.updates),
            (1184, 640, 160, 1210)
        );
        assert_eq!(m.total(), 3194);
        assert_eq!(m.warmup(), 1824);
        assert_eq!(m.eval(), 1184);
    }

    #[test]
    fn a_hand_count_of_backprop() {
        // 64-16-10 bp, worked by hand: forward 1184 as above; no feedback training, whatever
        // K says; targets: the error carried down through W_2, 16·10 = 160; updates 1210.
        for k in [0, 3] {
            let m = per_step(&plan(&[64, 16, 10], Rule::Bp), &hyper(k)).unwrap();
            assert_eq!(
                (m.forward, m.feedback, m.targets, m.updates),
                (1184, 0, 160, 1210)
            );
        }
    }
}
