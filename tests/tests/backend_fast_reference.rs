//! The fast fixed back end (`Fixed`, the default) and the 32-bit kernels the Cortex-M boards
//! run (`FixedCore<W, Narrow>`) against their scalar reference (`FixedRef`, the
//! straightforward element-by-element form that defines the results): whole training
//! runs must give the same final parameters bit for bit, the same threshold counter and the
//! same event counters, over every rule, container width (8, 16, 32 bits), rounding mode and
//! overflow policy, with accumulators narrow enough to overflow and formats narrow enough to
//! saturate. The single kernels are compared on random formats and values in
//! `backend_kernels_props.rs`.
//!
//! The reference is the outside check here only in the sense that it is the earlier, plainly
//! scalar code the rest of the suite (the `f64` error-bound test `rules_fixed_reference.rs`,
//! the published rounding vectors) already holds against outside sources; this test keeps the
//! fast kernels to exactly those results.

use tidewise_core::activation::Activation;
use tidewise_core::backend::{
    Backend, ClassSpec, Fixed, FixedConfig, FixedCore, FixedRef, Narrow, Word,
};
use tidewise_core::class::{Class, Counters, CLASSES};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::network::{Hyper, Regulariser};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::Stream;
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;
use tidewise_core::train::{self, Samples, Schedule, Streams};

const HYPER: Hyper = Hyper {
    lr: 0.05,
    lr_feedback: 0.05,
    beta: 0.5,
    sigma: 0.1,
    decay: 0.02,
    feedback_steps: 2,
    lr_fan_in: 4,
    regulariser: Regulariser::Decay,
};

const SIZES: [usize; 4] = [9, 7, 6, 3];
const SAMPLES: usize = 12;
const EPOCHS: usize = 3;

/// What one run leaves behind: the parameter digest, the threshold counter, the counters.
#[derive(Debug, PartialEq)]
struct Outcome {
    digest: u64,
    draws: u64,
    counters: Counters,
}

/// A design of `word`-bit values: activations, biases and noise with `act_frac` fraction
/// bits, weights with `w_frac`, the rate and step registers with `rate_frac` (the step one
/// word wider when it fits), every class rounded by `mode` except the activations, rounded by
/// `act_mode`, all with overflow policy `ov`, and an accumulator of `acc` bits.
#[allow(clippy::too_many_arguments)]
fn design(
    word: u8,
    act_frac: u8,
    w_frac: u8,
    rate_frac: u8,
    mode: Rounding,
    act_mode: Rounding,
    ov: Overflow,
    acc: u8,
) -> FixedConfig {
    let f = |w: u8, n: u8| Format::with_overflow(w, n, ov).expect("format");
    let mut classes = [ClassSpec {
        format: f(word, act_frac),
        rounding: mode,
    }; CLASSES];
    classes[Class::Act.index()].rounding = act_mode;
    for c in [Class::Forward, Class::Feedback] {
        classes[c.index()].format = f(word, w_frac);
    }
    classes[Class::Rate.index()].format = f(word, rate_frac);
    let step_word = (word + 4).min(32);
    classes[Class::Step.index()].format = f(step_word, rate_frac + (step_word - word));
    FixedConfig::uniform(classes, acc, ov)
}

fn run<W: Word, B: Backend<S = W>>(
    mut be: B,
    rule: Rule,
    hidden: Activation,
    hyper: &Hyper,
    draws: impl Fn(&B) -> u64,
) -> Outcome {
    let shape = Shape::new(&SIZES).expect("shape");
    let plan = Plan::new(shape, rule, hidden, Activation::Identity);
    let mut arena = vec![W::default(); plan.counts().total()];
    let mut net = train::setup(plan, hyper, &mut arena, &mut be, 5).expect("network");
    // Invented data: seeded reals in [-1.5, 1.5), beyond some formats' range on purpose.
    let mut g = Stream::new(11, 0);
    let raw: Vec<f32> = (0..SAMPLES * SIZES[0])
        .map(|_| g.next_u32() as f32 / 1_431_655_765.0 - 1.5)
        .collect();
    let labels: Vec<u16> = (0..SAMPLES).map(|_| g.below(3) as u16).collect();
    let features: Vec<W> = raw
        .iter()
        .map(|&v| be.encode(tidewise_core::class::Tag::act(0), v))
        .collect();
    let data = Samples {
        features: &features,
        labels: &labels,
    };
    let schedule = Schedule {
        rule,
        feedback_steps: hyper.feedback_steps,
    };
    let mut order = vec![0u32; SAMPLES];
    let mut streams = Streams::new(5);
    for _ in 0..EPOCHS {
        // A fixed arm never faults; the statistics are part of the digest's inputs anyway.
        let _ = train::train_epoch(
            &mut net,
            &mut be,
            &schedule,
            data,
            &mut order,
            &mut streams,
            false,
        );
    }
    Outcome {
        digest: train::digest::<B>(&net),
        draws: draws(&be),
        counters: *be.counters(),
    }
}

/// Runs every rule under `cfg` in both back ends; returns the events seen, to show the
/// comparison is not vacuous.
fn check<W: Word>(cfg: FixedConfig, label: &str) -> (u64, u64) {
    let (mut sat, mut lost) = (0, 0);
    for rule in Rule::ALL {
        // dtp-drl under both of its feedback regularisers; the others have one.
        let regularisers: &[Regulariser] = if rule == Rule::DtpDrl {
            &Regulariser::ALL
        } else {
            &[Regulariser::Decay]
        };
        for &regulariser in regularisers {
            let hyper = Hyper {
                regulariser,
                ..HYPER
            };
            for hidden in [Activation::LeakyRelu, Activation::Tanh] {
                let fast = run::<W, _>(
                    Fixed::<W>::new(cfg, 3).expect("fast"),
                    rule,
                    hidden,
                    &hyper,
                    Fixed::draws,
                );
                let reference = run::<W, _>(
                    FixedRef::<W>::new(cfg, 3).expect("reference"),
                    rule,
                    hidden,
                    &hyper,
                    FixedRef::draws,
                );
                assert_eq!(
                    fast, reference,
                    "{label}, {rule:?}, {regulariser:?}, {hidden:?}"
                );
                let narrow = run::<W, _>(
                    FixedCore::<W, Narrow>::new(cfg, 3).expect("narrow"),
                    rule,
                    hidden,
                    &hyper,
                    FixedCore::<W, Narrow>::draws,
                );
                assert_eq!(
                    narrow, reference,
                    "narrow: {label}, {rule:?}, {regulariser:?}, {hidden:?}"
                );
                sat += fast.counters.total_saturations();
                lost += fast.counters.total_lost();
            }
        }
    }
    (sat, lost)
}

const MODES: [Rounding; 3] = [Rounding::Floor, Rounding::NearestEven, Rounding::Stochastic];
const POLICIES: [Overflow; 2] = [Overflow::Saturate, Overflow::Wrap];

/// Every rounding mode of weights (and of activations) and both overflow policies, for one
/// container width with its accumulators.
fn sweep<W: Word>(word: u8, fracs: (u8, u8, u8), accs: &[u8]) {
    let (mut sat, mut lost) = (0, 0);
    for mode in MODES {
        for act_mode in [Rounding::NearestEven, mode] {
            for ov in POLICIES {
                for &acc in accs {
                    let cfg = design(word, fracs.0, fracs.1, fracs.2, mode, act_mode, ov, acc);
                    let (s, l) = check::<W>(
                        cfg,
                        &format!("{word}-bit {mode:?}/{act_mode:?} {ov:?} acc {acc}"),
                    );
                    sat += s;
                    lost += l;
                }
            }
        }
    }
    // The designs are narrow enough that both events happen: the counters were compared on
    // something.
    assert!(sat > 0 && lost > 0, "saturations {sat}, lost {lost}");
}

#[test]
fn eight_bit_runs_are_identical() {
    sweep::<i8>(8, (5, 6, 7), &[12, 16, 24]);
}

#[test]
fn sixteen_bit_runs_are_identical() {
    sweep::<i16>(16, (12, 13, 15), &[24, 32, 40, 64]);
}

#[test]
fn thirty_two_bit_runs_are_identical() {
    sweep::<i32>(32, (24, 26, 30), &[40, 62, 64]);
}

/// Mixed containers: 8- and 12-bit words in a 16-bit container, per-class rounding.
#[test]
fn narrow_words_in_wide_containers_are_identical() {
    for ov in POLICIES {
        let mut cfg = design(12, 8, 9, 11, Rounding::Stochastic, Rounding::Floor, ov, 20);
        cfg.classes[Class::Bias.index()].rounding = Rounding::NearestEven;
        cfg.classes[Class::Noise.index()].format = Format::with_overflow(8, 6, ov).expect("f");
        check::<i16>(cfg, &format!("12-bit in i16, {ov:?}"));
        check::<i32>(cfg, &format!("12-bit in i32, {ov:?}"));
    }
}
