//! Backpropagation's own update, seen by the measurement: it lies in the row space of `J_W` and
//! along the negative gradient.
//!
//! Fact of the trade (no single source): the BP gradient of a layer is `J_Wᵀ e`, which lies
//! in the row space of `J_W`, so its null-space share is 0 and its angle to the negative
//! gradient is 0. Derived: the output layer's update `(d_L ⊙ f') h_{L−1}ᵀ` of every rule
//! is parallel to the Gauss-Newton update `(J_a⁺ d_L) h_{L−1}ᵀ / ‖h_{L−1}‖²` when the
//! output activation is the identity (`J_a = I`).
//!
//! The fixed arm's intended update (`η δ hᵀ` from its own words, before the rounding into the
//! weights) beside its stored one: the intended BP update differs from the exact gradient
//! only by the rounding of the local errors `δ` (16-bit words here) and of the stored
//! operating point, so its null share must be small; the stored update adds each weight's
//! rounding (stochastic by default), which is not in the row space. With 32-bit words and 24
//! or more fraction bits the weight rounding is negligible and the two must agree.

use tidewise::align::{self, Measure, Options, Row, Update};
use tidewise::arms::{self, Arm};
use tidewise::spec;

fn measure(rule: &str, hidden: &str) -> Vec<Row> {
    measure_with(rule, hidden, &[])
}

/// [`measure`] with `--with` overrides.
fn measure_with(rule: &str, hidden: &str, sets: &[&str]) -> Vec<Row> {
    let text = format!(
        "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = {hidden}\n[rule]\nname = \"{rule}\"\n[run]\nepochs = 4\n"
    );
    let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
    let (spec, design) = spec::parse(&text, &sets).expect("valid spec");
    let prepared = arms::prepare(&spec).expect("pump data");
    let options = Options {
        every: 2,
        samples: 10,
        measures: Vec::new(),
    };
    align::run(&spec, &design, &prepared, &options, &mut |_, _, _| {})
        .expect("alignment runs")
        .rows
}

fn values(rows: &[Row], arm: Arm, m: Measure) -> Vec<&Row> {
    rows.iter()
        .filter(|r| r.arm == arm && r.update == Update::Stored && r.measure == m)
        .collect()
}

#[test]
fn bp_updates_lie_in_the_row_space_and_along_the_gradient() {
    for hidden in ["[16]", "[12, 8]"] {
        let rows = measure("bp", hidden);
        let layers = if hidden == "[16]" { 2 } else { 3 };
        let shares = values(&rows, Arm::Float, Measure::NullShare);
        let angles = values(&rows, Arm::Float, Measure::AngleBp);
        // Checkpoints 0, 2, 4, every layer.
        assert_eq!(shares.len(), 3 * layers, "{hidden}");
        assert_eq!(angles.len(), 3 * layers, "{hidden}");
        for r in shares {
            assert!(r.value.abs() < 1e-6, "{hidden}: null share {r:?}");
        }
        for r in angles {
            // f32 arithmetic of the float arm against the f64 gradient: ~1e-7 rad.
            assert!(r.value.abs() < 1e-4, "{hidden}: angle to BP {r:?} degrees");
        }
        // bp has no learned feedback: the measure is left out.
        assert!(values(&rows, Arm::Float, Measure::FeedbackAlign).is_empty());
    }
}

#[test]
fn output_layer_updates_are_gauss_newton_for_every_rule() {
    for rule in ["fa", "dtp", "dtp-direct"] {
        let rows = measure(rule, "[12, 8]");
        let top: Vec<&Row> = values(&rows, Arm::Float, Measure::AngleGn)
            .into_iter()
            .filter(|r| r.layer == 3)
            .collect();
        assert_eq!(top.len(), 3);
        for r in top {
            assert!(r.value < 1e-4, "{rule}: output layer angle to GN {r:?}");
        }
        // Hidden layers of these rules are not BP: a clearly non-zero angle.
        let hidden = values(&rows, Arm::Float, Measure::AngleBp)
            .into_iter()
            .filter(|r| r.layer == 1)
            .map(|r| r.value)
            .fold(0f64, f64::max);
        assert!(hidden > 1.0, "{rule}: hidden angle to BP only {hidden}");
    }
}

/// The mean over checkpoints of the fixed arm's hidden-layer null share, per update.
fn hidden_share(rows: &[Row], update: Update) -> f64 {
    let v: Vec<f64> = rows
        .iter()
        .filter(|r| {
            r.arm == Arm::Fixed
                && r.update == update
                && r.layer == 1
                && r.measure == Measure::NullShare
        })
        .map(|r| r.value)
        .collect();
    assert_eq!(v.len(), 3, "checkpoints 0, 2, 4: {rows:?}");
    v.iter().sum::<f64>() / v.len() as f64
}

#[test]
fn intended_bp_updates_lie_in_the_row_space_and_rounding_shows_in_the_stored_ones() {
    let rows = measure("bp", "[16]");
    let (intended, stored) = (
        hidden_share(&rows, Update::Intended),
        hidden_share(&rows, Update::Stored),
    );
    eprintln!("16-bit: intended {intended:.4}, stored {stored:.4}");
    assert!(intended < 0.05, "intended null share {intended}");
    assert!(
        stored > 2.0 * intended,
        "stored {stored} should show the weights' rounding against intended {intended}"
    );
    // Only the update measures are taken on the intended update, and only in the fixed arm.
    for r in rows.iter().filter(|r| r.update == Update::Intended) {
        assert_eq!(r.arm, Arm::Fixed);
        assert!(r.measure.of_update(), "{r:?}");
        assert_eq!(r.label(), "fixed-intended");
    }
}

#[test]
fn with_wide_words_stored_and_intended_agree() {
    let rows = measure_with(
        "bp",
        "[16]",
        &[
            "fixed.forward_weights=Q3.28",
            "fixed.biases=Q3.28",
            "fixed.activations=Q3.28",
            "fixed.step=Q3.28",
            "fixed.accumulator=64",
            "fixed.rounding=nearest",
        ],
    );
    let (intended, stored) = (
        hidden_share(&rows, Update::Intended),
        hidden_share(&rows, Update::Stored),
    );
    eprintln!("32-bit: intended {intended:.6}, stored {stored:.6}");
    assert!(intended < 1e-3, "intended null share {intended}");
    assert!(
        (stored - intended).abs() < 1e-3,
        "stored {stored}, intended {intended}"
    );
}
