//! The design's constants for hardware and firmware: a SystemVerilog package (IEEE 1800
//! `localparam`s, `docs/references.md` \[38\]) and a C header with the same names and values.

use tidewise_core::backend::FixedConfig;
use tidewise_core::class::{Class, Tag};
use tidewise_core::plan::Plan;

use super::trace::{overflow_code, rounding_code};

/// Name of the SystemVerilog package.
pub const PACKAGE: &str = "tw_design_pkg";
/// File name of the C header.
pub const HEADER: &str = "tw_design.h";
/// Prefix of the C header's macros.
pub const C_PREFIX: &str = "TW_";

/// The raw words of the run's constants, in their classes' formats.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
pub struct RawConsts {
    /// Forward learning rate η (rate class).
    pub lr: i64,
    /// Feedback learning rate (rate class).
    pub lr_feedback: i64,
    /// Weight-decay factor of the feedback weights (rate class).
    pub decay: i64,
    /// Output-target gain β (activation class, global format).
    pub beta: i64,
    /// Noise amplitude σ·√3 (noise class).
    pub noise_amp: i64,
}

/// What the constants are made from.
pub struct Params<'a> {
    /// The fixed-point design.
    pub cfg: &'a FixedConfig,
    /// Layer sizes and rule.
    pub plan: &'a Plan,
    /// The rule's name.
    pub rule: &'a str,
    /// Rates applied as shifts.
    pub rate_shift: bool,
    /// The constants' raw words.
    pub consts: RawConsts,
    /// Feedback-training steps per sample.
    pub feedback_steps: u8,
    /// Exported steps.
    pub steps: usize,
    /// Run seed.
    pub seed: u64,
}

/// One constant: name (without prefix), value, comment.
type Constant = (String, i64, String);

/// Upper-case name of a class as in the constants.
pub fn class_name(c: Class) -> String {
    c.name().to_ascii_uppercase()
}

/// The right shift an η of `raw` words (a power of two) stands for, when it is one.
fn shift_of(raw: i64, frac: u8) -> Option<i64> {
    (raw > 0 && raw.count_ones() == 1)
        .then(|| i64::from(frac) - i64::from(raw.trailing_zeros() as u8))
}

fn constants(p: &Params<'_>) -> Vec<Constant> {
    let mut v: Vec<Constant> = Vec::new();
    let mut add = |n: String, x: i64, c: String| v.push((n, x, c));
    add(
        "ROUND_FLOOR".into(),
        0,
        "rounding code: floor (arithmetic shift)".into(),
    );
    add(
        "ROUND_NEAREST_EVEN".into(),
        1,
        "rounding code: to nearest, ties to even".into(),
    );
    add(
        "ROUND_STOCHASTIC".into(),
        2,
        "rounding code: stochastic".into(),
    );
    add(
        "OVERFLOW_SATURATE".into(),
        0,
        "overflow code: saturate".into(),
    );
    add(
        "OVERFLOW_WRAP".into(),
        1,
        "overflow code: wrap (keep the low bits)".into(),
    );
    let cfg = p.cfg;
    for c in Class::ALL {
        if c == Class::Acc {
            continue;
        }
        let s = cfg.classes[c.index()];
        let n = class_name(c);
        add(
            format!("{n}_WORD"),
            i64::from(s.format.word()),
            format!("{} word bits ({})", c.name(), s.format),
        );
        add(
            format!("{n}_FRAC"),
            i64::from(s.format.frac()),
            format!("{} fraction bits", c.name()),
        );
        add(
            format!("{n}_ROUNDING"),
            rounding_code(s.rounding),
            format!("{} rounding ({})", c.name(), s.rounding.name()),
        );
        add(
            format!("{n}_OVERFLOW"),
            overflow_code(s.format.overflow()),
            format!("{} overflow policy", c.name()),
        );
    }
    add(
        "ACC_WORD".into(),
        i64::from(cfg.acc_bits),
        "accumulator bits (its fraction is the products')".into(),
    );
    add(
        "ACC_OVERFLOW".into(),
        overflow_code(cfg.acc_overflow),
        "accumulator overflow policy".into(),
    );
    let layers = p.plan.layers();
    add(
        "LAYERS".into(),
        layers as i64,
        format!("weight layers (rule {})", p.rule),
    );
    for l in 0..=layers {
        add(
            format!("N{l}"),
            p.plan.n(l) as i64,
            format!("units of layer {l} (0: input)"),
        );
    }
    // Per-layer formats: every layer, so a datapath parameterised per layer needs no special case.
    for (c, first, tag) in [
        (Class::Forward, 1, Tag::weights as fn(usize) -> Tag),
        (Class::Bias, 1, Tag::bias),
        (Class::Act, 0, Tag::act),
    ] {
        for l in first..=layers {
            let f = cfg.format(tag(l));
            let n = class_name(c);
            add(
                format!("{n}_L{l}_WORD"),
                i64::from(f.word()),
                format!("{} of layer {l}: {f}", c.name()),
            );
            add(format!("{n}_L{l}_FRAC"), i64::from(f.frac()), String::new());
        }
    }
    let k = p.consts;
    let rate_frac = cfg.classes[Class::Rate.index()].format.frac();
    add(
        "RATE_IS_SHIFT".into(),
        i64::from(p.rate_shift),
        "1: rates are powers of two applied as shifts".into(),
    );
    add(
        "LR_RAW".into(),
        k.lr,
        "forward learning rate, rate-class word".into(),
    );
    add(
        "LR_FEEDBACK_RAW".into(),
        k.lr_feedback,
        "feedback learning rate, rate-class word".into(),
    );
    add(
        "DECAY_RAW".into(),
        k.decay,
        "feedback weight decay factor, rate-class word".into(),
    );
    if p.rate_shift {
        if let Some(s) = shift_of(k.lr, rate_frac) {
            add("LR_SHIFT".into(), s, "eta = 2^-LR_SHIFT".into());
        }
        if let Some(s) = shift_of(k.lr_feedback, rate_frac) {
            add(
                "LR_FEEDBACK_SHIFT".into(),
                s,
                "feedback eta = 2^-LR_FEEDBACK_SHIFT".into(),
            );
        }
    }
    add(
        "BETA_RAW".into(),
        k.beta,
        "output target gain, activation-class (global) word".into(),
    );
    add(
        "NOISE_AMP_RAW".into(),
        k.noise_amp,
        "noise amplitude sigma*sqrt(3), noise-class word".into(),
    );
    add(
        "FEEDBACK_STEPS".into(),
        i64::from(p.feedback_steps),
        "feedback-training steps per sample".into(),
    );
    add(
        "STEPS".into(),
        p.steps as i64,
        "training steps in the golden vectors".into(),
    );
    v
}

/// The SystemVerilog package.
pub fn package(p: &Params<'_>) -> String {
    let mut s = format!(
        "// The constants of one fixed-point design, written by `tidewise export` (rule {}).\n\
         // Words are two's complement; a value is its word times 2^-FRAC.\n\
         package {PACKAGE};\n",
        p.rule
    );
    for (n, x, c) in constants(p) {
        let comment = if c.is_empty() {
            String::new()
        } else {
            format!("  // {c}")
        };
        s.push_str(&format!("  localparam int {n} = {x};{comment}\n"));
    }
    s.push_str(&format!(
        "  localparam logic [63:0] SEED = 64'd{};  // run seed\nendpackage\n",
        p.seed
    ));
    s
}

/// The C header.
pub fn header(p: &Params<'_>) -> String {
    let guard = "TW_DESIGN_H";
    let mut s = format!(
        "/* The constants of one fixed-point design, written by `tidewise export` (rule {}).\n   \
         Words are two's complement; a value is its word times 2^-FRAC. */\n\
         #ifndef {guard}\n#define {guard}\n\n#include <stdint.h>\n\n",
        p.rule
    );
    for (n, x, c) in constants(p) {
        let comment = if c.is_empty() {
            String::new()
        } else {
            format!(" /* {c} */")
        };
        s.push_str(&format!("#define {C_PREFIX}{n} ({x}){comment}\n"));
    }
    s.push_str(&format!(
        "#define {C_PREFIX}SEED UINT64_C({}) /* run seed */\n\n",
        p.seed
    ));
    s.push_str("/* Storage containers of the stored classes (the widest word of each class). */\n");
    for c in [
        Class::Forward,
        Class::Bias,
        Class::Feedback,
        Class::Act,
        Class::Rate,
        Class::Noise,
        Class::Step,
    ] {
        let bits = match p.cfg.widest_word(c) {
            0..=8 => 8,
            9..=16 => 16,
            _ => 32,
        };
        s.push_str(&format!("typedef int{bits}_t tw_{}_t;\n", c.name()));
    }
    let acc = if p.cfg.acc_bits <= 32 { 32 } else { 64 };
    s.push_str(&format!(
        "typedef int{acc}_t tw_accumulator_t;\n\n#endif /* {guard} */\n"
    ));
    s
}
