//! The float arm's value ranges, observed at its checkpoints without changing its training.

use tidewise_core::activation::Activation;
use tidewise_core::backend::Backend;
use tidewise_core::class::{Class, Tag};
use tidewise_core::kernels::{activate, linear};

use crate::arms::{Arm, Checkpoint, Observer};

/// Largest magnitudes the float arm produced, per searched class.
#[derive(Clone, Copy, Debug, Default, PartialEq, serde::Serialize)]
pub struct Ranges {
    /// Forward weights, all epochs.
    pub forward_weights: f64,
    /// Forward biases, all epochs.
    pub biases: f64,
    /// Feedback weights and biases, all epochs.
    pub feedback_weights: f64,
    /// Inputs, activations, pre-activations inside the activation's non-flat region, and
    /// output displacements, on the test split after every epoch.
    pub activations: f64,
}

impl Ranges {
    /// The larger of two observations, class by class.
    pub fn max(self, o: Ranges) -> Ranges {
        Ranges {
            forward_weights: self.forward_weights.max(o.forward_weights),
            biases: self.biases.max(o.biases),
            feedback_weights: self.feedback_weights.max(o.feedback_weights),
            activations: self.activations.max(o.activations),
        }
    }
}

/// Where an activation stops changing: pre-activations beyond it need no range of their own
/// (the output is flat there, so a saturated input gives the same result).
fn flat_beyond(a: Activation) -> Option<f64> {
    match a {
        Activation::Tanh => Some(4.0),
        Activation::HardTanh => Some(1.0),
        Activation::Sigmoid => Some(2.0),
        Activation::Identity | Activation::LeakyRelu => None,
    }
}

/// Integer bits (`m` of `Qm.n`, sign excluded) whose range `[-2^m, 2^m)` holds magnitudes up
/// to `max`: `floor(log2 max) + 1`, clamped to `-8..=24`; `0` for no observation.
pub fn int_bits_for(max: f64) -> i32 {
    if !max.is_finite() || max <= 0.0 {
        return 0;
    }
    (max.log2().floor() as i32 + 1).clamp(-8, 24)
}

/// Records [`Ranges`] from the float arm's checkpoints.
pub struct RangeObserver {
    /// What was seen so far.
    pub ranges: Ranges,
    /// Test samples run through a copy of the network at each checkpoint.
    pub samples: usize,
}

impl RangeObserver {
    /// An observer looking at up to `samples` test samples per checkpoint.
    pub fn new(samples: usize) -> RangeObserver {
        RangeObserver {
            ranges: Ranges::default(),
            samples,
        }
    }
}

impl Observer for RangeObserver {
    fn checkpoint<B: Backend + Clone>(&mut self, at: Checkpoint<'_, B>) {
        if at.arm != Arm::Float {
            return;
        }
        let mut be = at.backend.clone();
        let net = at.net;
        let peak = |c: Tag, vals: &[B::S], be: &B| {
            vals.iter()
                .map(|&v| f64::from(be.decode(c, v)).abs())
                .fold(0.0, f64::max)
        };
        let r = &mut self.ranges;
        // The float arm: its decode ignores layers, so class-wide tags read every layer.
        let (fw, fb) = (Tag::global(Class::Forward), Tag::global(Class::Bias));
        r.forward_weights = r.forward_weights.max(peak(fw, &net.w[..], &be));
        r.biases = r.biases.max(peak(fb, &net.b[..], &be));
        let q = Tag::global(Class::Feedback);
        r.feedback_weights =
            r.feedback_weights
                .max(peak(q, &net.fw[..], &be))
                .max(peak(q, &net.fb[..], &be));
        let plan = at.plan;
        let top = plan.layers();
        let mut chain = vec![B::S::default(); plan.h_range(top).end];
        let beta = f64::from(at.hyper.beta);
        for i in 0..at.test.len().min(self.samples) {
            let x = at.test.row(i);
            let input = plan.h_range(0);
            for (h, &v) in chain[input.clone()].iter_mut().zip(x) {
                *h = v;
            }
            r.activations = r.activations.max(peak(Tag::act(0), &chain[input], &be));
            for l in 1..=top {
                be.set_layer(l - 1);
                let (lo, hi) = chain.split_at_mut(plan.h_range(l).start);
                let out = &mut hi[..plan.n(l)];
                linear(
                    &mut be,
                    Tag::weights(l),
                    &net.w[plan.w_range(l)],
                    Tag::act(l - 1),
                    &lo[plan.h_range(l - 1)],
                    Some((Tag::bias(l), &net.b[plan.node_range(l)])),
                    Tag::act(l),
                    out,
                );
                let z = peak(Tag::act(l), out, &be);
                // Just below the flat point: a range ending at it suffices (the flat
                // point itself saturates to one step below, where the output is the same
                // to within the table's bound).
                let z = flat_beyond(plan.act(l)).map_or(z, |f| z.min(f * (1.0 - 1e-6)));
                r.activations = r.activations.max(z);
                let t = Tag::act(l);
                activate(
                    &mut be,
                    plan.act(l),
                    &net.k.act,
                    &net.table[..],
                    t,
                    out,
                    None,
                );
                r.activations = r.activations.max(peak(t, out, &be));
            }
            // The output displacement β (y − h_L) of this sample.
            let label = usize::from(at.test.labels[i]);
            for (j, &h) in chain[plan.h_range(top)].iter().enumerate() {
                let y = if j == label { 1.0 } else { 0.0 };
                let d = beta * (y - f64::from(be.decode(Tag::act(top), h)));
                r.activations = r.activations.max(d.abs());
            }
        }
    }
}
