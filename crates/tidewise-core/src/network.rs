//! A network's tensors as views into one caller-provided arena.

use crate::activation::{fill_tanh_table, ActConsts};
use crate::backend::Backend;
use crate::class::{Class, Tag, MAX_LAYERS};
use crate::part::Part;
use crate::plan::{Plan, PlanError, SCRATCH_VECTORS};

/// Learning hyper-parameters, as reals; encoded once into the rate and noise classes.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Hyper {
    /// Forward learning rate η.
    pub lr: f32,
    /// Feedback learning rate. For `dtp-drl` and `dtp-direct` the rate of the unnormalised
    /// squared reconstruction error (of order σ²): a caller with the loss divided by σ²
    /// passes its rate over σ² (the host's spec does, `tidewise::spec::feedback_rates`).
    pub lr_feedback: f32,
    /// Output-target step β: τ_L = h_L − β ∂L/∂h_L.
    pub beta: f32,
    /// Noise scale σ of feedback training.
    pub sigma: f32,
    /// Regulariser weight λ of the difference reconstruction loss, relative to
    /// `lr_feedback` (the regulariser steps at `lr_feedback · decay`).
    pub decay: f32,
    /// Feedback steps per forward step.
    pub feedback_steps: u8,
    /// Reference fan-in of the per-layer forward rate: weight layer `l` learns with
    /// `η / 2^s_l`, `s_l` = [`fan_in_shift`]`(n_{l−1}, lr_fan_in)`; 0 turns the scaling off.
    #[serde(default)]
    pub lr_fan_in: u16,
    /// The regulariser of `dtp-drl`'s difference reconstruction loss.
    #[serde(default)]
    pub regulariser: Regulariser,
}

/// The regulariser of the difference reconstruction loss of `dtp-drl`, weight λ
/// ([`Hyper::decay`]); the equations and fixed points are in the rule's documentation.
/// `dtp-direct`'s linear feedback `Q_i` is its own Jacobian, so weight decay there already
/// is the Jacobian's norm (the output-noise term's expectation) and it keeps decay.
///
/// Weight decay is the default: at the shipped rates (normalised loss rate 10⁻⁴, damping 1)
/// it gives the smaller null-space share while the forward weights learn (digits, hidden
/// [64, 64], 40 epochs, float: 0.30 / 0.11 on layers 1 / 2 against output noise's
/// 0.54 / 0.21 at damping 0.01 and `dtp`'s 0.78 / 0.64); output noise is the one whose
/// fixed point is the damped pseudo-inverse on every layer
/// (`tests/tests/rules_drl_feedback.rs`), but that ideal was not reached at that rate while
/// the forward weights move.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum Regulariser {
    /// A second pass with noise at the output, pulled back to `h_i`: a noise estimate of the
    /// norm of the feedback Jacobian the loop uses. Fixed point: the damped pseudo-inverse.
    OutputNoise,
    /// Plain weight decay on the feedback weights.
    #[default]
    Decay,
}

impl Regulariser {
    /// Every regulariser.
    pub const ALL: [Regulariser; 2] = [Regulariser::OutputNoise, Regulariser::Decay];

    /// The name used in specs.
    pub const fn name(self) -> &'static str {
        match self {
            Regulariser::OutputNoise => "output-noise",
            Regulariser::Decay => "decay",
        }
    }

    /// Parses a name of [`Regulariser::name`].
    pub fn parse(name: &str) -> Option<Regulariser> {
        Regulariser::ALL.iter().copied().find(|r| r.name() == name)
    }
}

/// The per-layer rate shift `s = max(0, round(log2(fan_in / reference)))` (0 when
/// `reference` is 0), computed exactly in integers: the smallest `s ≥ 0` with
/// `fan_in < reference · 2^(s + ½)`, i.e. `fan_in² < reference² · 2^(2s + 1)`, tested as
/// `⌊fan_in² / 2^(2s + 1)⌋ < reference²` (the same, as `reference²` is an integer) in 64 bits.
///
/// The delta rule's per-sample change of a unit's pre-activation is `η δ ‖h_{l−1}‖²`, and
/// `‖h_{l−1}‖²` grows with the fan-in; dividing η by the fan-in's ratio to a reference (to
/// the nearest power of two, so a fixed-point datapath applies it as a shift) keeps that
/// step roughly independent of the layer's width. Layers at or below the reference (up to
/// √2 times it) keep η.
pub const fn fan_in_shift(fan_in: usize, reference: u16) -> u32 {
    if reference == 0 {
        return 0;
    }
    // Layer sizes are at most 65535 (`Shape`), so the square fits in 32 bits.
    let f = if fan_in > 65_535 {
        65_535
    } else {
        fan_in as u64
    };
    let sq = f * f;
    let r = reference as u64;
    let mut s = 0u32;
    while s < 16 && (sq >> (2 * s + 1)) >= r * r {
        s += 1;
    }
    s
}

/// The encoded constants of a run, all global values (no layer).
#[derive(Clone, Copy, Debug)]
pub struct Consts<S> {
    /// Activation constants.
    pub act: ActConsts<S>,
    /// η (rate class).
    pub lr: S,
    /// Feedback η (rate class).
    pub lr_feedback: S,
    /// β (activation class: the output target is formed in the activation datapath).
    pub beta: S,
    /// σ·√3 (noise class): scales a unit Irwin-Hall draw to standard deviation σ.
    pub noise_amp: S,
    /// Feedback η·λ (rate class).
    pub decay: S,
    /// The forward rate of weight layers 1..=L (index `l − 1`): η / 2^s, s the
    /// layer's [`fan_in_shift`], encoded once (η itself where the shift is 0).
    pub lr_layers: [S; MAX_LAYERS],
    /// The regulariser of `dtp-drl`'s feedback loss.
    pub regulariser: Regulariser,
}

impl<S: Copy> Consts<S> {
    /// The forward rate of weight layer `l` (1..=L); η for a layer out of range.
    pub fn layer_lr(&self, l: usize) -> S {
        l.checked_sub(1)
            .and_then(|i| self.lr_layers.get(i))
            .copied()
            .unwrap_or(self.lr)
    }
}

/// √x for x ≥ 0 by Newton's method in basic IEEE operations, so it is bit-identical on every
/// platform (no libm).
pub fn sqrt_f32(x: f32) -> f32 {
    if x <= 0.0 || !x.is_finite() {
        return 0.0;
    }
    let mut y = f32::from_bits((x.to_bits() >> 1) + 0x1fbd_1df5);
    for _ in 0..4 {
        y = 0.5 * (y + x / y);
    }
    y
}

/// A network: weights, feedback, activations and working buffers, borrowed from an arena.
#[derive(Debug)]
pub struct Net<'a, S> {
    /// The storage plan.
    pub plan: Plan,
    /// Forward weights of all layers.
    pub w: &'a mut [S],
    /// Forward biases of layers 1..=L.
    pub b: &'a mut [S],
    /// Feedback matrices of the hidden layers.
    pub fw: &'a mut [S],
    /// Feedback biases of the hidden layers.
    pub fb: &'a mut [S],
    /// Activations h_0..=h_L.
    pub h: &'a mut [S],
    /// Activation derivatives f'(a_l), l = 1..=L.
    pub fp: &'a mut [S],
    /// Target displacements d_l = τ_l − h_l, l = 1..=L.
    pub d: &'a mut [S],
    /// Local errors δ_l = d_l ⊙ f'(a_l), l = 1..=L.
    pub delta: &'a mut [S],
    /// Working chain over all layers (noisy forward pass).
    pub sh: &'a mut [S],
    /// Working chain over all layers (reconstructions).
    pub sr: &'a mut [S],
    /// Widest-layer working vectors.
    pub v: [&'a mut [S]; SCRATCH_VECTORS],
    /// Activation table (tanh), empty when unused.
    pub table: &'a mut [S],
    /// Encoded constants.
    pub k: Consts<S>,
}

fn take<'a, S>(rest: &mut &'a mut [S], n: usize) -> &'a mut [S] {
    let all = core::mem::take(rest);
    let (head, tail) = all.split_at_mut(n.min(all.len()));
    *rest = tail;
    head
}

impl<'a, S: Copy + Default + PartialOrd> Net<'a, S> {
    /// Lays the network out in `arena`, zeroed, and encodes the constants with `be`.
    pub fn new<B: Backend<S = S>>(
        plan: Plan,
        hyper: &Hyper,
        arena: &'a mut [S],
        be: &mut B,
    ) -> Result<Net<'a, S>, PlanError> {
        let c = plan.counts();
        let need = c.total();
        if arena.len() < need {
            return Err(PlanError::Arena(need, arena.len()));
        }
        let (arena, _) = arena.split_at_mut(need);
        arena.fill(S::default());
        let nodes_1 = c.biases;
        let nodes = plan.h_range(plan.layers()).end;
        let fbb: usize = (1..plan.layers()).map(|i| plan.fbb_range(i).len()).sum();
        let mut rest = arena;
        let w = take(&mut rest, c.forward_weights);
        let b = take(&mut rest, c.biases);
        let fw = take(&mut rest, c.feedback_weights - fbb);
        let fb = take(&mut rest, fbb);
        let h = take(&mut rest, nodes);
        let fp = take(&mut rest, nodes_1);
        let d = take(&mut rest, nodes_1);
        let delta = take(&mut rest, nodes_1);
        let chain = if c.scratch == 0 { 0 } else { nodes };
        let width = if c.scratch == 0 {
            0
        } else {
            plan.shape.widest()
        };
        let sh = take(&mut rest, chain);
        let sr = take(&mut rest, chain);
        let v = [
            take(&mut rest, width),
            take(&mut rest, width),
            take(&mut rest, width),
            take(&mut rest, width),
        ];
        let table = take(&mut rest, c.table);
        fill_tanh_table(be, table);
        be.set_layer(0);
        // The encoding order decides the rounding draws (stochastic rounding): keep it.
        let act = ActConsts::new(be);
        let lr = be.encode(Tag::global(Class::Rate), hyper.lr);
        let mut k = Consts {
            act,
            lr,
            lr_feedback: be.encode(Tag::global(Class::Rate), hyper.lr_feedback),
            beta: be.encode(Tag::global(Class::Act), hyper.beta),
            noise_amp: be.encode(Tag::global(Class::Noise), hyper.sigma * sqrt_f32(3.0)),
            decay: be.encode(Tag::global(Class::Rate), hyper.lr_feedback * hyper.decay),
            lr_layers: [lr; MAX_LAYERS],
            regulariser: hyper.regulariser,
        };
        for (i, r) in k.lr_layers.iter_mut().enumerate().take(plan.layers()) {
            let s = fan_in_shift(plan.n(i), hyper.lr_fan_in);
            if s > 0 {
                // η / 2^s (exact in `f32`) in the rate format: with `fixed.rate = "shift"` the
                // rate word shifted right by s, a shifter; otherwise one rounding of it.
                *r = be.encode(
                    Tag::global(Class::Rate),
                    hyper.lr * crate::format::pow2(-(s as i32)) as f32,
                );
            }
        }
        Ok(Net {
            plan,
            w,
            b,
            fw,
            fb,
            h,
            fp,
            d,
            delta,
            sh,
            sr,
            v,
            table,
            k,
        })
    }

    /// The learned parameters in a fixed order: forward weights, biases, feedback weights,
    /// feedback biases.
    pub fn params(&self) -> [&[S]; 4] {
        [self.w, self.b, self.fw, self.fb]
    }

    /// The learned parameters, writable, in [`Net::params`] order.
    pub fn params_mut(&mut self) -> [&mut [S]; 4] {
        [&mut *self.w, &mut *self.b, &mut *self.fw, &mut *self.fb]
    }

    /// Copies the learned parameters of `other` (same plan) into this network.
    pub fn copy_params_from(&mut self, other: &Net<'_, S>) {
        for (dst, src) in [
            (&mut *self.w, &*other.w),
            (&mut *self.b, &*other.b),
            (&mut *self.fw, &*other.fw),
            (&mut *self.fb, &*other.fb),
        ] {
            for (d, s) in dst.iter_mut().zip(src) {
                *d = *s;
            }
        }
    }

    /// The output activations h_L.
    pub fn output(&self) -> &[S] {
        let r = self.plan.h_range(self.plan.layers());
        self.h.part(r)
    }
}
