//! The fixed arm's intended update (`η δ hᵀ` from its own words, before the rounding into the
//! weights) beside its stored one, so rounding noise can be told from the rule's geometry.
//!
//! Fact of the trade (no single source): the BP gradient of a layer is `J_Wᵀ e`, in the row
//! space of `J_W`, so its null-space share is 0 and its angle to the negative gradient 0.
//! The fixed arm's intended BP update differs from the exact gradient only by the rounding of
//! the local errors `δ` (16-bit words here) and of the stored operating point, so its share
//! must be small; its stored update adds each weight's rounding (stochastic rounding, the
//! spec's default for weights), which is not in the row space. With 32-bit words and 24 or
//! more fraction bits the weight rounding is negligible and stored and intended must agree.

use tidewise::align::{self, Measure, Options, Row, Update};
use tidewise::arms::{self, Arm};
use tidewise::spec;

fn measure(sets: &[&str]) -> Vec<Row> {
    let text = "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [16]\n[rule]\nname = \"bp\"\n[run]\nepochs = 4\n";
    let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
    let (spec, design) = spec::parse(text, &sets).expect("valid spec");
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
    let rows = measure(&[]);
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
    let rows = measure(&[
        "fixed.forward_weights=Q3.28",
        "fixed.biases=Q3.28",
        "fixed.activations=Q3.28",
        "fixed.step=Q3.28",
        "fixed.accumulator=64",
        "fixed.rounding=nearest",
    ]);
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
