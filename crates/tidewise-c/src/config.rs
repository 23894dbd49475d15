//! The C configuration struct and its translation into the core's [`Config`].

use tidewise_core::activation::Activation;
use tidewise_core::backend::{ClassSpec, FixedConfig};
use tidewise_core::class::{Class, CLASSES};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::learner::Config;
use tidewise_core::network::Hyper;
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;

use crate::status::TwStatus;

/// Rule code: error backpropagation (the reference).
pub const TW_RULE_BP: u8 = 0;
/// Rule code: feedback alignment.
pub const TW_RULE_FA: u8 = 1;
/// Rule code: direct feedback alignment.
pub const TW_RULE_DFA: u8 = 2;
/// Rule code: target propagation.
pub const TW_RULE_TP: u8 = 3;
/// Rule code: difference target propagation.
pub const TW_RULE_DTP: u8 = 4;
/// Rule code: difference target propagation, feedback trained by the difference
/// reconstruction loss.
pub const TW_RULE_DTP_DRL: u8 = 5;
/// Rule code: direct linear feedback from the output, trained by the difference
/// reconstruction loss.
pub const TW_RULE_DTP_DIRECT: u8 = 6;

/// Activation code: f(a) = a.
pub const TW_ACT_IDENTITY: u8 = 0;
/// Activation code: clamp(a, -1, 1).
pub const TW_ACT_HARD_TANH: u8 = 1;
/// Activation code: a for a >= 0, a/4 below.
pub const TW_ACT_LEAKY_RELU: u8 = 2;
/// Activation code: clamp(a/4 + 1/2, 0, 1).
pub const TW_ACT_SIGMOID: u8 = 3;
/// Activation code: tanh from a 17-entry table.
pub const TW_ACT_TANH: u8 = 4;

/// Rounding code: to nearest, ties to even.
pub const TW_ROUND_NEAREST_EVEN: u8 = 0;
/// Rounding code: toward minus infinity.
pub const TW_ROUND_FLOOR: u8 = 1;
/// Rounding code: stochastic, from the seeded stream.
pub const TW_ROUND_STOCHASTIC: u8 = 2;

/// Overflow code: saturate.
pub const TW_OVERFLOW_SATURATE: u8 = 0;
/// Overflow code: keep the low bits (wrap).
pub const TW_OVERFLOW_WRAP: u8 = 1;

/// Index into `TwConfig::formats`: forward weights.
pub const TW_CLASS_FORWARD: usize = 0;
/// Index into `TwConfig::formats`: forward biases.
pub const TW_CLASS_BIAS: usize = 1;
/// Index into `TwConfig::formats`: feedback weights and biases.
pub const TW_CLASS_FEEDBACK: usize = 2;
/// Index into `TwConfig::formats`: activations, targets and local errors.
pub const TW_CLASS_ACT: usize = 3;
/// Index into `TwConfig::formats`: the accumulator (its entry is ignored: see `acc_bits`).
pub const TW_CLASS_ACC: usize = 4;
/// Index into `TwConfig::formats`: learning rates and decay factors.
pub const TW_CLASS_RATE: usize = 5;
/// Index into `TwConfig::formats`: the per-neuron update step.
pub const TW_CLASS_STEP: usize = 6;
/// Index into `TwConfig::formats`: feedback-training noise.
pub const TW_CLASS_NOISE: usize = 7;
/// Entries of `TwConfig::formats`.
pub const TW_CLASSES: usize = 8;
const _: () = assert!(TW_CLASSES == CLASSES);

/// One tensor class's fixed-point format and rounding.
#[repr(C)]
#[derive(Clone, Copy, Debug)]
pub struct TwFormat {
    /// Word bits, sign included (2 to 32).
    pub word: u8,
    /// Fraction bits (0 to 40).
    pub frac: u8,
    /// `TW_OVERFLOW_*`.
    pub overflow: u8,
    /// `TW_ROUND_*`.
    pub rounding: u8,
}

/// A learner's configuration. Per-layer formats are not offered through C: each class has
/// one format for every layer.
#[repr(C)]
#[derive(Clone, Copy, Debug)]
pub struct TwConfig {
    /// Layer sizes: inputs, hidden layers..., classes. Read during the call only.
    pub sizes: *const usize,
    /// Entries of `sizes` (at least 2).
    pub n_sizes: usize,
    /// `TW_RULE_*`.
    pub rule: u8,
    /// `TW_ACT_*` of the hidden layers.
    pub hidden: u8,
    /// `TW_ACT_*` of the output layer.
    pub output: u8,
    /// Feedback steps per sample (0 for rules without learned feedback).
    pub feedback_steps: u8,
    /// Forward learning rate.
    pub lr: f32,
    /// Feedback learning rate, as the core steps it: for `TW_RULE_DTP_DRL` and
    /// `TW_RULE_DTP_DIRECT` on the squared reconstruction error before its division by
    /// sigma^2, so a host spec's `rule.feedback_lr` of the normalised loss is passed here
    /// divided by sigma^2.
    pub lr_feedback: f32,
    /// Output-target step.
    pub beta: f32,
    /// Noise scale of feedback training.
    pub sigma: f32,
    /// Regulariser weight of the difference reconstruction loss relative to `lr_feedback`
    /// (the regulariser steps at lr_feedback * decay); a host spec's damping `rule.decay`
    /// is passed as decay * sigma^2 for weight decay, and as is for output noise.
    pub decay: f32,
    /// Reference fan-in of the forward rate: a weight layer with fan-in n learns at
    /// lr / 2^max(0, round(log2(n / lr_fan_in))), a shift; 0 turns the scaling off. The host's
    /// default (`rule.lr_fan_in`) is 64.
    pub lr_fan_in: u16,
    /// Formats by `TW_CLASS_*` (the `TW_CLASS_ACC` entry is ignored).
    pub formats: [TwFormat; TW_CLASSES],
    /// Accumulator word bits (2 to 64); its fraction is that of the products.
    pub acc_bits: u8,
    /// `TW_OVERFLOW_*` of the accumulator.
    pub acc_overflow: u8,
    /// Run seed: initialisation, feedback noise, rounding bits, sample order.
    pub seed: u64,
}

fn rule(code: u8) -> Option<Rule> {
    Rule::ALL.get(usize::from(code)).copied()
}

fn activation(code: u8) -> Option<Activation> {
    Some(match code {
        TW_ACT_IDENTITY => Activation::Identity,
        TW_ACT_HARD_TANH => Activation::HardTanh,
        TW_ACT_LEAKY_RELU => Activation::LeakyRelu,
        TW_ACT_SIGMOID => Activation::Sigmoid,
        TW_ACT_TANH => Activation::Tanh,
        _ => return None,
    })
}

fn overflow(code: u8) -> Result<Overflow, TwStatus> {
    match code {
        TW_OVERFLOW_SATURATE => Ok(Overflow::Saturate),
        TW_OVERFLOW_WRAP => Ok(Overflow::Wrap),
        _ => Err(TwStatus::TwBadCode),
    }
}

fn rounding(code: u8) -> Result<Rounding, TwStatus> {
    match code {
        TW_ROUND_NEAREST_EVEN => Ok(Rounding::NearestEven),
        TW_ROUND_FLOOR => Ok(Rounding::Floor),
        TW_ROUND_STOCHASTIC => Ok(Rounding::Stochastic),
        _ => Err(TwStatus::TwBadCode),
    }
}

fn class_spec(f: &TwFormat) -> Result<ClassSpec, TwStatus> {
    let format = Format::with_overflow(f.word, f.frac, overflow(f.overflow)?)
        .map_err(|_| TwStatus::TwBadFormat)?;
    Ok(ClassSpec {
        format,
        rounding: rounding(f.rounding)?,
    })
}

impl TwConfig {
    /// The core configuration, given the layer sizes read from `sizes`.
    pub fn to_core(&self, sizes: &[usize]) -> Result<Config, TwStatus> {
        let rule = rule(self.rule).ok_or(TwStatus::TwBadCode)?;
        let hidden = activation(self.hidden).ok_or(TwStatus::TwBadCode)?;
        let output = activation(self.output).ok_or(TwStatus::TwBadCode)?;
        let act = class_spec(&self.formats[TW_CLASS_ACT])?;
        let mut classes = [act; CLASSES];
        for (c, (slot, f)) in classes.iter_mut().zip(&self.formats).enumerate() {
            if c != Class::Acc.index() {
                *slot = class_spec(f)?;
            }
        }
        let fixed = FixedConfig::uniform(classes, self.acc_bits, overflow(self.acc_overflow)?);
        let hyper = Hyper {
            lr: self.lr,
            lr_feedback: self.lr_feedback,
            beta: self.beta,
            sigma: self.sigma,
            decay: self.decay,
            feedback_steps: self.feedback_steps,
            lr_fan_in: self.lr_fan_in,
            regulariser: Default::default(),
        };
        Config::new(
            sizes,
            rule,
            hidden,
            output,
            hyper,
            self.feedback_steps,
            fixed,
            self.seed,
        )
        .map_err(TwStatus::from)
    }
}
