//! Multiply-accumulates of one training step, counted from the plan and the rule.
//!
//! A MAC here is one term of a vector kernel of the back end: a term of a dot product
//! (`Backend::dot`), one weight of a row update `w += step · x` (`Backend::update`), or one
//! weight of a decay `w -= k · w` (`Backend::decay`). Every term is counted whether or not
//! the back end skips it (a zero step or input), as a datapath without zero skipping
//! computes it. Element-wise products over the neurons (the output displacement `β e`,
//! `δ = d ⊙ f'`, noise scaling, activations) are not counted: they are O(neurons), the
//! counted terms O(weights).
//!
//! The counts follow the kernels of `tidewise_core::rules` term for term; a test checks them
//! against a back end that counts the terms it is asked for.

use serde::Serialize;
use tidewise_core::network::Regulariser;
use tidewise_core::plan::Plan;
use tidewise_core::rules::Rule;

/// MACs of one training sample, by phase.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Macs {
    /// The forward pass.
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
}

/// MACs of one evaluation sample: the forward pass.
pub fn forward(plan: &Plan) -> u64 {
    (1..=plan.layers()).map(|l| weights(plan, l)).sum()
}

fn n(plan: &Plan, l: usize) -> u64 {
    plan.n(l) as u64
}

/// Weights of layer `l`.
fn weights(plan: &Plan, l: usize) -> u64 {
    n(plan, l) * n(plan, l - 1)
}

/// Forward pass from layer `from` to the top.
fn chain(plan: &Plan, from: usize) -> u64 {
    (from + 1..=plan.layers()).map(|l| weights(plan, l)).sum()
}

/// One feedback-training step (`rules::train_feedback`).
fn feedback_step(plan: &Plan, rule: Rule, reg: Regulariser) -> u64 {
    let top = plan.layers();
    let out = n(plan, top);
    (1..top)
        .map(|i| {
            let (ni, nu) = (n(plan, i), n(plan, i + 1));
            match rule {
                Rule::Bp | Rule::Fa | Rule::Dfa => 0,
                // Noisy forward one layer up, inverse, row updates and bias updates.
                Rule::Tp | Rule::Dtp => weights(plan, i + 1) + ni * nu + ni * nu + ni,
                // Noisy forward to the top, Q Δ, row updates, decay.
                Rule::DtpDirect => chain(plan, i) + 3 * ni * out,
                // Data term: noisy forward to the top; down the loop, two inverses per layer
                // above i + 1; the last two inverses (ni·nu each); two row updates (ni·nu
                // each), two bias updates (ni each). Then either the output-noise term (no
                // forward pass: the same way down, last inverses and updates again) or one
                // decay of G_{i+1} (ni·nu).
                Rule::DtpDrl => {
                    let down: u64 = (i + 2..=top).map(|k| 2 * n(plan, k - 1) * n(plan, k)).sum();
                    let back = down + 2 * ni * nu + 2 * ni * nu + 2 * ni;
                    chain(plan, i)
                        + back
                        + match reg {
                            Regulariser::OutputNoise => back,
                            Regulariser::Decay => ni * nu,
                        }
                }
            }
        })
        .sum()
}

/// Hidden targets (`rules::displacements`).
fn targets(plan: &Plan, rule: Rule) -> u64 {
    let top = plan.layers();
    let out = n(plan, top);
    (1..top)
        .map(|i| {
            let (ni, nu) = (n(plan, i), n(plan, i + 1));
            match rule {
                Rule::Bp | Rule::Fa | Rule::Tp => ni * nu,
                Rule::Dfa | Rule::DtpDirect => ni * out,
                Rule::Dtp | Rule::DtpDrl => 2 * ni * nu,
            }
        })
        .sum()
}

/// MACs of one training sample of `plan` under `rule` with `feedback_steps` feedback steps
/// (`reg`: `dtp-drl`'s regulariser).
pub fn per_step(plan: &Plan, rule: Rule, feedback_steps: u8, reg: Regulariser) -> Macs {
    let updates = (1..=plan.layers())
        .map(|l| weights(plan, l) + n(plan, l))
        .sum();
    Macs {
        forward: forward(plan),
        feedback: u64::from(feedback_steps) * feedback_step(plan, rule, reg),
        targets: targets(plan, rule),
        updates,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use tidewise_core::activation::Activation;
    use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig};
    use tidewise_core::class::{Class, Counters, Tag, CLASSES};
    use tidewise_core::format::{Format, Overflow};
    use tidewise_core::kernels::{forward as forward_pass, output_target, update_layer};
    use tidewise_core::network::Hyper;
    use tidewise_core::plan::Shape;
    use tidewise_core::rng::{streams, Stream};
    use tidewise_core::round::Rounding;
    use tidewise_core::rules::{displacements, train_feedback};
    use tidewise_core::train;

    /// The fixed back end, counting the terms of every vector kernel it is asked for.
    #[derive(Clone)]
    struct Counting {
        inner: Fixed<i16>,
        terms: u64,
    }

    impl Backend for Counting {
        type S = i16;
        fn encode(&mut self, c: Tag, x: f32) -> i16 {
            self.inner.encode(c, x)
        }
        fn decode(&self, c: Tag, v: i16) -> f32 {
            self.inner.decode(c, v)
        }
        fn set_layer(&mut self, layer: usize) {
            self.inner.set_layer(layer)
        }
        fn dot(
            &mut self,
            out: Tag,
            ac: Tag,
            a: &[i16],
            stride: usize,
            bc: Tag,
            b: &[i16],
            bias: Option<(Tag, i16)>,
        ) -> i16 {
            self.terms += b.len() as u64;
            self.inner.dot(out, ac, a, stride, bc, b, bias)
        }
        fn mul(&mut self, out: Tag, xc: Tag, x: i16, yc: Tag, y: i16) -> i16 {
            self.inner.mul(out, xc, x, yc, y)
        }
        fn add(&mut self, out: Tag, xc: Tag, x: i16, yc: Tag, y: i16) -> i16 {
            self.inner.add(out, xc, x, yc, y)
        }
        fn sub(&mut self, out: Tag, xc: Tag, x: i16, yc: Tag, y: i16) -> i16 {
            self.inner.sub(out, xc, x, yc, y)
        }
        fn shift(&mut self, c: Tag, x: i16, k: i32) -> i16 {
            self.inner.shift(c, x, k)
        }
        fn convert(&mut self, out: Tag, xc: Tag, x: i16) -> i16 {
            self.inner.convert(out, xc, x)
        }
        fn cmp(&self, xc: Tag, x: i16, yc: Tag, y: i16) -> Option<core::cmp::Ordering> {
            self.inner.cmp(xc, x, yc, y)
        }
        fn update(
            &mut self,
            wc: Tag,
            row: &mut [i16],
            eta: i16,
            dc: Tag,
            delta: i16,
            xc: Tag,
            x: &[i16],
        ) {
            self.terms += row.len().min(x.len()) as u64;
            self.inner.update(wc, row, eta, dc, delta, xc, x)
        }
        fn decay(&mut self, wc: Tag, row: &mut [i16], k: i16) {
            self.terms += row.len() as u64;
            self.inner.decay(wc, row, k)
        }
        fn noise(&mut self, out: Tag, amp: i16, z: i32) -> i16 {
            self.inner.noise(out, amp, z)
        }
        fn counters(&self) -> &Counters {
            self.inner.counters()
        }
        fn reset_counters(&mut self) {
            self.inner.reset_counters()
        }
        fn fault(&self) -> Option<(usize, Class)> {
            None
        }
        fn is_fixed(&self) -> bool {
            true
        }
        fn raw_bits(v: i16) -> u32 {
            Fixed::<i16>::raw_bits(v)
        }
    }

    fn config() -> FixedConfig {
        let q = |w, f| ClassSpec {
            format: Format::new(w, f).unwrap(),
            rounding: Rounding::Stochastic,
        };
        let mut classes = [q(16, 12); CLASSES];
        classes[Class::Forward.index()] = q(16, 13);
        classes[Class::Rate.index()] = q(16, 15);
        classes[Class::Step.index()] = q(32, 28);
        FixedConfig {
            layers: Default::default(),
            classes,
            acc_bits: 32,
            acc_overflow: Overflow::Saturate,
        }
    }

    /// Counts each phase of `train::train_sample`, called phase by phase in its order.
    fn counted(plan: Plan, k: u8, regulariser: Regulariser) -> Macs {
        let hyper = Hyper {
            lr: 0.02,
            lr_feedback: 0.01,
            beta: 1.0,
            sigma: 0.1,
            decay: 0.01,
            feedback_steps: k,
            lr_fan_in: 0,
            regulariser,
        };
        let mut be = Counting {
            inner: Fixed::new(config(), 3).unwrap(),
            terms: 0,
        };
        let mut arena = vec![0i16; plan.counts().total()];
        let mut net = train::setup(plan, &hyper, &mut arena, &mut be, 3).unwrap();
        let x: Vec<i16> = (0..plan.n(0)).map(|i| (i as i16 * 397) % 4096).collect();
        let mut noise = Stream::new(3, streams::NOISE);
        let phase = |be: &mut Counting, f: &mut dyn FnMut(&mut Counting)| {
            let before = be.terms;
            f(be);
            be.terms - before
        };
        let forward = phase(&mut be, &mut |be| {
            forward_pass(&mut net, be, &x);
            let _ = output_target(&mut net, be, 1);
        });
        let feedback = phase(&mut be, &mut |be| {
            for _ in 0..k {
                train_feedback(plan.rule, &mut net, be, &mut noise);
            }
        });
        let targets = phase(&mut be, &mut |be| displacements(plan.rule, &mut net, be));
        let updates = phase(&mut be, &mut |be| {
            for l in 1..=plan.layers() {
                update_layer(&mut net, be, l);
            }
        });
        Macs {
            forward,
            feedback,
            targets,
            updates,
        }
    }

    #[test]
    fn counts_match_the_kernels_for_every_rule() {
        for sizes in [&[7usize, 5, 3][..], &[6, 5, 4, 3][..], &[4, 9, 3, 5, 2][..]] {
            for rule in Rule::ALL {
                let shape = Shape::new(sizes).unwrap();
                let plan = Plan::new(shape, rule, Activation::Tanh, Activation::Identity);
                for k in [0u8, 1, 2] {
                    let k = if rule.learns_feedback() { k } else { 0 };
                    for reg in Regulariser::ALL {
                        assert_eq!(
                            per_step(&plan, rule, k, reg),
                            counted(plan, k, reg),
                            "{} {sizes:?} K={k} {}",
                            rule.name(),
                            reg.name()
                        );
                    }
                }
            }
        }
    }

    #[test]
    fn a_hand_count() {
        // 64-16-10 dtp-direct, K = 1, worked by hand: forward 64·16 + 16·10 = 1184;
        // feedback: noisy forward 16·10 = 160, Q Δ 160, row updates 160, decay 160 = 640;
        // targets Q d_L = 160; updates 1184 weights + 26 biases = 1210. Total 3194.
        let shape = Shape::new(&[64, 16, 10]).unwrap();
        let plan = Plan::new(
            shape,
            Rule::DtpDirect,
            Activation::Tanh,
            Activation::Identity,
        );
        let m = per_step(&plan, Rule::DtpDirect, 1, Regulariser::default());
        assert_eq!(
            (m.forward, m.feedback, m.targets, m.updates),
            (1184, 640, 160, 1210)
        );
        assert_eq!(m.total(), 3194);
        assert_eq!(m.warmup(), 1824);
    }
}
