//! Memory figures of a fixed-point design, and advice drawn from a run's counters.

use serde::Serialize;
use tidewise_core::backend::{container_bits, FixedConfig};
use tidewise_core::class::{Class, Tag};
use tidewise_core::plan::Plan;

use crate::spec::{Design, Spec};

/// One tensor class's storage.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct ClassMemory {
    /// Values stored.
    pub values: usize,
    /// Word bits of the class's format (what a chip would store); with per-layer formats,
    /// the widest layer's word.
    pub word_bits: u8,
    /// Σ values × word bits, each layer's values at its own word: the silicon figure.
    pub bits: u64,
    /// `values × container bytes`: the microcontroller figure (8-, 16- or 32-bit containers).
    pub bytes: u64,
}

/// The learner's storage per tensor class.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Memory {
    /// Bytes of the container every stored value uses on a microcontroller.
    pub container_bytes: u8,
    /// Forward weights.
    pub forward_weights: ClassMemory,
    /// Forward biases.
    pub biases: ClassMemory,
    /// Feedback weights and biases.
    pub feedback_weights: ClassMemory,
    /// Activations, derivatives, targets and local errors.
    pub activations: ClassMemory,
    /// Working buffers of target propagation and feedback training.
    pub scratch: ClassMemory,
    /// Activation tables.
    pub table: ClassMemory,
    /// Sum of the bytes.
    pub total: u64,
    /// Sum of the bits.
    pub total_bits: u64,
}

impl Memory {
    /// The memory of `plan` stored in the formats of `cfg`, each layer's tensors at that
    /// layer's word.
    ///
    /// Per layer: `W_l` holds `n_l · n_{l−1}` values and `b_l` holds `n_l`; the activations
    /// of layer `l` are `h_l` (l = 0..=L) and, for l >= 1, `f'(a_l)`, `d_l` and `δ_l`; the
    /// two working chains of target propagation are laid out like `h`. The four widest-layer
    /// working vectors hold values of several layers, so they are counted at the widest
    /// activation word; the tanh table holds global constants (the class format).
    pub fn of(plan: &Plan, cfg: &FixedConfig) -> Memory {
        let counts = plan.counts();
        let container = u64::from(container_bits(cfg) / 8);
        let top = plan.layers();
        let word = |t: Tag| u64::from(cfg.format(t).word());
        let sum = |values: &dyn Fn(usize) -> usize, tag: &dyn Fn(usize) -> Tag, from: usize| {
            (from..=top)
                .map(|l| values(l) as u64 * word(tag(l)))
                .sum::<u64>()
        };
        let part = |values: usize, bits: u64, c: Class| ClassMemory {
            values,
            word_bits: cfg.widest_word(c),
            bits,
            bytes: values as u64 * container,
        };
        let chains = if counts.scratch == 0 { 0 } else { 2 };
        let h_bits = sum(&|l| plan.n(l), &Tag::act, 0);
        let node_bits = sum(&|l| plan.n(l), &Tag::act, 1);
        let vectors = counts
            .scratch
            .saturating_sub(chains * plan.h_range(top).end);
        let widest_act = u64::from(cfg.widest_word(Class::Act));
        let class_word = |c: Class| u64::from(cfg.classes[c.index()].format.word());
        let parts = [
            part(
                counts.forward_weights,
                sum(&|l| plan.n(l) * plan.n(l - 1), &Tag::weights, 1),
                Class::Forward,
            ),
            part(
                counts.biases,
                sum(&|l| plan.n(l), &Tag::bias, 1),
                Class::Bias,
            ),
            part(
                counts.feedback_weights,
                counts.feedback_weights as u64 * class_word(Class::Feedback),
                Class::Feedback,
            ),
            part(counts.activations, h_bits + 3 * node_bits, Class::Act),
            part(
                counts.scratch,
                chains as u64 * h_bits + vectors as u64 * widest_act,
                Class::Act,
            ),
            ClassMemory {
                word_bits: cfg.classes[Class::Act.index()].format.word(),
                ..part(
                    counts.table,
                    counts.table as u64 * class_word(Class::Act),
                    Class::Act,
                )
            },
        ];
        Memory {
            container_bytes: container as u8,
            forward_weights: parts[0],
            biases: parts[1],
            feedback_weights: parts[2],
            activations: parts[3],
            scratch: parts[4],
            table: parts[5],
            total: parts.iter().map(|p| p.bytes).sum(),
            total_bits: parts.iter().map(|p| p.bits).sum(),
        }
    }

    /// `(name, figures)` for each class, in report order.
    pub fn rows(&self) -> [(&'static str, ClassMemory); 6] {
        [
            ("forward_weights", self.forward_weights),
            ("biases", self.biases),
            ("feedback_weights", self.feedback_weights),
            ("activations", self.activations),
            ("scratch", self.scratch),
            ("table", self.table),
        ]
    }
}

/// The counters of a fixed-point run that [`advice`] reads (the training arm fills them in,
/// so this module does not depend on it).
#[derive(Clone, Copy, Debug)]
pub struct RunCounts<'a> {
    /// Saturations while encoding the data into the activation format.
    pub data_saturations: u64,
    /// Weight updates attempted.
    pub updates: u64,
    /// Updates lost to rounding.
    pub lost_updates: u64,
    /// Saturations per class name.
    pub saturations_by_class: &'a [(String, u64)],
}

/// What the fixed arm's counters say, and what to change.
pub fn advice(spec: &Spec, design: &Design, fixed: &RunCounts<'_>) -> Vec<String> {
    let mut out = constants(spec, design);
    if fixed.data_saturations > 0 {
        let f = design.fixed.format(Tag::act(0));
        out.push(format!(
            "{} input values fell outside the activations format {f} (range {} to {}) and were clamped: lower data.scale (now {}) or give the input's fixed.activations format more integer bits",
            fixed.data_saturations,
            f.min_value(),
            f.max_value(),
            spec.data.scale
        ));
    }
    let updates = fixed.updates.max(1) as f64;
    let lost = fixed.lost_updates as f64 / updates;
    if lost > 0.5 {
        let rounding = if spec.fixed.rounding == "stochastic" {
            String::new()
        } else {
            format!(
                ", use fixed.rounding = \"stochastic\" (now {:?})",
                spec.fixed.rounding
            )
        };
        out.push(format!(
            "{:.0}% of weight updates were lost to rounding: add fraction bits to the weight formats{rounding}, or raise rule.lr",
            100.0 * lost
        ));
    }
    for (name, n) in fixed.saturations_by_class {
        let share = *n as f64 / updates;
        if *n > 0 && share > 0.01 {
            out.push(format!(
                "{n} saturations in {name} ({:.1}% of non-zero updates): give that class more integer bits or lower rule.lr",
                100.0 * share
            ));
        }
    }
    out
}

/// Hyper-parameters that their fixed-point class cannot hold. The core encodes them once,
/// before training (and before the counters start), so a clamped or vanished constant shows in
/// no counter: the fixed arm would quietly train with another rate than the float arm.
fn constants(spec: &Spec, design: &Design) -> Vec<String> {
    let h = &design.hyper;
    let fmt = |c: Class| design.fixed.classes[c.index()].format;
    let feedback = design.rule.learns_feedback();
    let noise = feedback && h.feedback_steps > 0;
    // The feedback constants as the core holds them, from the spec's reals
    // (`spec::feedback_rates` unrounded): for the σ²-normalised losses, η / σ² and the
    // regulariser's step.
    let (lr, decay) = crate::spec::feedback_rates(
        design.rule,
        h.regulariser,
        spec.rule.feedback_lr(design.rule),
        spec.rule.sigma,
        spec.rule.decay,
        &|x| x,
    );
    let (fb_key, reg_key) = if design.rule.normalises_feedback_loss() {
        (
            "rule.feedback_lr / rule.sigma²",
            "rule.feedback_lr × rule.decay (over rule.sigma² for output noise)",
        )
    } else {
        ("rule.feedback_lr", "")
    };
    let (fb_given, reg_given) = (lr, lr * decay);
    // (key, value as given, value encoded, class, format key, used by this rule)
    let items = [
        (
            "rule.lr",
            spec.rule.lr,
            h.lr,
            Class::Rate,
            "fixed.rate",
            true,
        ),
        (
            fb_key,
            fb_given,
            h.lr_feedback,
            Class::Rate,
            "fixed.rate",
            feedback,
        ),
        (
            reg_key,
            reg_given,
            h.lr_feedback * h.decay,
            Class::Rate,
            "fixed.rate",
            design.rule.normalises_feedback_loss(),
        ),
        (
            "rule.beta",
            spec.rule.beta,
            h.beta,
            Class::Act,
            "fixed.activations",
            true,
        ),
        (
            "rule.sigma × √3",
            spec.rule.sigma * 3f32.sqrt(),
            h.sigma * 3f32.sqrt(),
            Class::Noise,
            "fixed.noise",
            noise,
        ),
    ];
    let mut out = Vec::new();
    for (key, given, v, class, fkey, used) in items {
        let f = fmt(class);
        let v = f64::from(v);
        if !used || v <= 0.0 {
            continue;
        }
        // A clamp by under 1% (β = 1 in Q0.15 becomes 1 - 2^-15) changes nothing that matters.
        if v > f.max_value() * 1.01 {
            let change = if class == Class::Rate && design.rate_shift {
                "set fixed.rate to a multiplier format with integer bits (e.g. Q4.11)".to_string()
            } else {
                format!("give {fkey} more integer bits (e.g. {})", wider(f, v))
            };
            out.push(format!(
                "{key} = {given} does not fit {fkey} {f} (largest {}): the fixed arm uses {} instead while the float arm uses {given}; lower {key} or {change}",
                f.max_value(),
                f.max_value(),
            ));
        } else if v < f.lsb() / 2.0 {
            out.push(format!(
                "{key} = {given} is below half the resolution of {fkey} {f} ({}): it rounds to 0 or to one step; raise {key} or give {fkey} more fraction bits",
                f.lsb()
            ));
        }
    }
    out
}

/// A format of the same word with enough integer bits for `v`, or a wider word when the
/// word cannot hold them.
fn wider(f: tidewise_core::format::Format, v: f64) -> String {
    let mut m = f.int_bits().max(0);
    while tidewise_core::format::pow2(m) <= v && m < 31 {
        m += 1;
    }
    let word = i32::from(f.word());
    let frac = if m < word - 1 {
        word - 1 - m
    } else {
        i32::from(f.frac())
    };
    match tidewise_core::format::Format::q(m, frac) {
        Ok(g) => g.to_string(),
        Err(_) => format!("Q{m}.{frac}"),
    }
}
