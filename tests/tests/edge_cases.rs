//! Numeric edge cases through `tidewise::arms::run`: data that carries no information, a
//! learning rate so large that updates saturate, an activation format too narrow for the data,
//! and a float arm driven to infinity. Each run must finish (or stop with a typed error that
//! names where), report finite losses and accuracies, show the events in its counters, and say
//! in `Comparison::warnings` what happened and what to change.
//!
//! Facts used (of the trade, no outside source needed beyond these): Q notation `Qm.n` has
//! m + n + 1 bits with the sign not counted in m ("TMS320C64x DSP Library Programmer's
//! Reference", Texas Instruments, 2003, Appendix A.2; document number and year recalled from
//! memory; docs/references.md [10]), so `Q-3.10` is an 8-bit word with range
//! [-1/8, 1/8 - 2^-10]; an IEEE 754 binary32 operation whose exact result exceeds about
//! 3.4e38 gives infinity ("IEEE Standard for Floating-Point Arithmetic", IEEE Std 754-2019,
//! clause 7.4; docs/references.md [15]).

use std::path::PathBuf;

use tidewise::arms::{self, ArmResult, Comparison, NoObserver, RunError};
use tidewise::spec;

/// A CSV of `rows` rows, three features and three classes (an invented pump-like demo: three
/// sensor readings per sample), written under the test's temporary folder.
fn csv(name: &str, rows: usize, feature: impl Fn(usize, usize) -> f32) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("edge_cases");
    std::fs::create_dir_all(&dir).unwrap_or_else(|e| panic!("{e}"));
    let path = dir.join(format!("{name}.csv"));
    let mut text = String::from("a,b,c,y\n");
    for i in 0..rows {
        for j in 0..3 {
            text.push_str(&format!("{},", feature(i, j)));
        }
        text.push_str(&format!("{}\n", i % 3));
    }
    std::fs::write(&path, text).unwrap_or_else(|e| panic!("{e}"));
    path
}

/// Features that tell the classes apart: class c has feature c high.
fn informative(i: usize, j: usize) -> f32 {
    let c = i % 3;
    let noise = ((i * 7 + j * 13) % 10) as f32 / 10.0;
    if j == c {
        4.0 + noise
    } else {
        noise
    }
}

fn spec_text(path: &std::path::Path, extra: &str) -> String {
    format!(
        "[data]\nsource = \"csv\"\npath = {:?}\nlabel = \"y\"\n[net]\nhidden = [8]\n[rule]\nwarmup_epochs = 1\n[run]\nepochs = 4\n{extra}",
        path.display().to_string()
    )
}

fn run(text: &str, sets: &[&str]) -> Result<Comparison, RunError> {
    let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
    let (spec, design) = spec::parse(text, &sets).unwrap_or_else(|e| panic!("spec refused: {e}"));
    let prepared = arms::prepare(&spec)?;
    arms::run(
        &spec,
        &design,
        &prepared,
        &mut NoObserver,
        &mut |_, _, _| {},
    )
}

fn finite(arm: &ArmResult) {
    assert!(arm.train_loss.is_finite() && arm.test_accuracy.is_finite());
    for r in &arm.epochs {
        assert!(
            r.train_loss.is_finite(),
            "epoch {}: loss {}",
            r.epoch,
            r.train_loss
        );
        assert!((0.0..=1.0).contains(&r.test_accuracy), "epoch {}", r.epoch);
    }
}

fn warning<'a>(cmp: &'a Comparison, needle: &str) -> &'a str {
    cmp.warnings
        .iter()
        .find(|w| w.contains(needle))
        .unwrap_or_else(|| panic!("no warning with {needle:?}: {:#?}", cmp.warnings))
}

#[test]
fn all_zero_features_run_and_warn() {
    let path = csv("zeros", 60, |_, _| 0.0);
    let cmp = run(&spec_text(&path, ""), &[]).unwrap_or_else(|e| panic!("{e}"));
    finite(&cmp.fixed);
    finite(&cmp.float);
    assert_eq!(cmp.fixed.epochs.len(), 4);
    assert_eq!(cmp.fixed.data_saturations, 0);
    let w = warning(&cmp, "every feature is constant");
    assert!(w.contains("3 features") && w.contains("class prior"), "{w}");
    // The same input for every sample: the network gives one answer, so the accuracy is the
    // share of one class, 1/3 of each split here (up to the split's rounding).
    for arm in [&cmp.fixed, &cmp.float] {
        assert!(arm.test_accuracy <= 0.5, "{}", arm.test_accuracy);
    }
}

#[test]
fn a_constant_feature_is_named() {
    let path = csv(
        "constant",
        60,
        |i, j| if j == 1 { 2.5 } else { informative(i, j) },
    );
    let cmp = run(&spec_text(&path, ""), &[]).unwrap_or_else(|e| panic!("{e}"));
    finite(&cmp.fixed);
    finite(&cmp.float);
    let w = warning(&cmp, "features are constant");
    assert!(
        w.starts_with("1 of 3 features") && w.contains("feature 1"),
        "{w}"
    );
}

#[test]
fn a_rate_too_large_for_its_format_saturates_and_says_so() {
    // rule.lr = 10 is the largest rate the spec allows; the rate format Q0.15 holds at most
    // 1 - 2^-15, so the constant itself is clamped (before any counter runs), and the huge
    // steps drive the activations into saturation. A hard-tanh output keeps the float arm
    // finite (with an identity output it overflows, see the last test).
    let path = csv("rate", 60, informative);
    let cmp = run(
        &spec_text(&path, ""),
        &["rule.lr=10", "net.output=hard-tanh"],
    )
    .unwrap_or_else(|e| panic!("{e}"));
    finite(&cmp.fixed);
    finite(&cmp.float);
    assert!(cmp.fixed.saturations > 0);
    assert_eq!(cmp.float.saturations, 0);
    let w = warning(&cmp, "rule.lr = 10 does not fit fixed.rate Q0.15");
    assert!(w.contains("largest 0.999969482421875"), "{w}");
    assert!(
        w.contains("lower rule.lr or give fixed.rate more integer bits (e.g. Q4.11)"),
        "{w}"
    );
    let w = warning(&cmp, "saturations in activations");
    assert!(w.contains("more integer bits or lower rule.lr"), "{w}");
    // With a rate format that holds 10 the constant warning goes; the saturations stay.
    let cmp = run(
        &spec_text(&path, ""),
        &["rule.lr=10", "net.output=hard-tanh", "fixed.rate=Q4.11"],
    )
    .unwrap_or_else(|e| panic!("{e}"));
    finite(&cmp.fixed);
    assert!(
        cmp.warnings.iter().all(|w| !w.contains("does not fit")),
        "{:?}",
        cmp.warnings
    );
    assert!(cmp.fixed.saturations > 0);
    warning(&cmp, "saturations in activations");
}

#[test]
fn a_rate_below_its_resolution_is_reported() {
    // 1e-6 is below half of Q0.15's step 2^-15 = 3.05e-5: the stored rate is 0 or one step.
    let path = csv("tiny", 60, informative);
    let cmp = run(&spec_text(&path, ""), &["rule.lr=1e-6"]).unwrap_or_else(|e| panic!("{e}"));
    finite(&cmp.fixed);
    finite(&cmp.float);
    let w = warning(
        &cmp,
        "rule.lr = 0.000001 is below half the resolution of fixed.rate Q0.15",
    );
    assert!(w.contains("more fraction bits"), "{w}");
}

#[test]
fn data_outside_the_activation_format_is_clamped_and_reported() {
    // range [-1/8, 1/8 - 2^-10]; data scaled to [0, 1] mostly lies above it.
    let path = csv("narrow", 60, informative);
    let cmp =
        run(&spec_text(&path, ""), &["fixed.activations=Q-3.10"]).unwrap_or_else(|e| panic!("{e}"));
    finite(&cmp.fixed);
    finite(&cmp.float);
    assert!(cmp.fixed.data_saturations > 0);
    assert_eq!(cmp.float.data_saturations, 0);
    let w = warning(&cmp, "input values fell outside the activations format");
    assert!(
        w.contains("Q-3.10") && w.contains("-0.125 to 0.1240234375"),
        "{w}"
    );
    assert!(
        w.contains("lower data.scale") && w.contains("fixed.activations"),
        "{w}"
    );
    // The output-target step β = 1 is formed in the activation format too, and is clamped.
    let w = warning(&cmp, "rule.beta = 1 does not fit fixed.activations Q-3.10");
    assert!(w.contains("(e.g. Q1.6)"), "{w}");
    warning(&cmp, "saturations in activations");
}

#[test]
fn a_float_arm_driven_to_infinity_stops_with_where() {
    // Identity activations, the largest rate and target step the spec allows and data scaled
    // to [0, 1e30]: the first update's products exceed the binary32 range.
    let path = csv("infinite", 60, informative);
    let sets = [
        "rule.lr=10",
        "rule.beta=100",
        "net.activation=identity",
        "net.output=identity",
        "data.scale=1e30",
    ];
    let err = run(&spec_text(&path, ""), &sets)
        .err()
        .unwrap_or_else(|| panic!("the run finished"));
    let RunError::NonFinite {
        epoch,
        layer,
        tensor,
        ..
    } = err
    else {
        panic!("another error: {err}");
    };
    assert!(
        (1..=4).contains(&epoch) && (1..=2).contains(&layer),
        "{err}"
    );
    let msg = err.to_string();
    assert!(msg.contains(&format!("epoch {epoch}")), "{msg}");
    assert!(msg.contains(&format!("layer {layer}")), "{msg}");
    assert!(msg.contains(&format!("tensor {tensor}")), "{msg}");
    assert!(
        msg.contains("lower rule.lr or rule.beta, or scale the data down"),
        "{msg}"
    );
}
