//! Difference-reconstruction-loss feedback gives updates closer to Gauss-Newton and less in
//! the null space than plain DTP.
//!
//! Source: "A Theoretical Framework for Target Propagation", NeurIPS 2020 (docs/references.md
//! [5]): with
//! non-invertible layers DTP does not propagate Gauss-Newton targets and its updates lie
//! largely (about three quarters on average) in the null space of the output's weight
//! Jacobian; feedback trained by the difference reconstruction loss (`dtp-drl`, and direct
//! feedback from the output, `dtp-direct`) approximates Gauss-Newton targets.
//!
//! Setting: the invented pump data, two hidden layers (32, 16) so that the product of
//! layer-wise inverses differs from the inverse of the product, trained in float. The
//! feedback rate is raised tenfold (`dtp`: 0.1; the DRL rules: 10⁻³ of the σ²-normalised
//! loss, the same step): at the defaults 20 epochs of 160 samples leave every feedback
//! nearly untrained (its angle to the ideal stays above 50°); with the default rate the same
//! ordering appears after about 200 epochs (measured while writing this test).
//!
//! Second setting, at the shipped defaults: the UCI optical handwritten digits ("Optical
//! Recognition of Handwritten Digits", UCI Machine Learning Repository, 1998;
//! docs/references.md [32]), hidden layers [64, 64], 40 epochs, both arms. The DRL rules must
//! have at most half of `dtp`'s null-space share and a smaller angle to Gauss-Newton on
//! every hidden layer, in the float arm and on the fixed arm's intended update, and the
//! fixed arm's stored update must still leave less in the null space than `dtp`'s (the
//! paper reports about three quarters for plain DTP; measured here 0.78 / 0.64 in float).

use tidewise::align::{self, Measure, Options, Row, Update};
use tidewise::arms::{self, Arm};
use tidewise::spec;

const EPOCHS: u16 = 20;

fn measure(rule: &str) -> Vec<Row> {
    // Feedback rate 0.1 for `dtp`'s layer-wise loss, and the same step for the DRL rules,
    // whose rate is of the loss divided by σ² (0.1 σ² at the default σ = 0.1).
    let lr = if rule == "dtp" { 0.1 } else { 0.001 };
    let text = format!(
        "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [32, 16]\n[rule]\nname = \"{rule}\"\nfeedback_lr = {lr}\n[run]\nepochs = {EPOCHS}\n"
    );
    let (spec, design) = spec::parse(&text, &[]).expect("valid spec");
    let prepared = arms::prepare(&spec).expect("pump data");
    let options = Options {
        every: EPOCHS,
        samples: 20,
        measures: vec!["null_share,angle_gn".into()],
    };
    align::run(&spec, &design, &prepared, &options, &mut |_, _, _| {})
        .expect("alignment runs")
        .rows
}

fn at_end(rows: &[Row], m: Measure, layer: usize) -> f64 {
    rows.iter()
        .find(|r| r.epoch == EPOCHS && r.arm == Arm::Float && r.measure == m && r.layer == layer)
        .map(|r| r.value)
        .expect("a probed value")
}

#[test]
fn drl_rules_leave_less_in_the_null_space_and_are_closer_to_gauss_newton() {
    let dtp = measure("dtp");
    for layer in [1, 2] {
        let share = at_end(&dtp, Measure::NullShare, layer);
        assert!(
            share > 0.5,
            "dtp layer {layer}: null share {share}, expected most of the update"
        );
    }
    for rule in ["dtp-drl", "dtp-direct"] {
        let rows = measure(rule);
        for layer in [1, 2] {
            for m in [Measure::NullShare, Measure::AngleGn] {
                let (ours, plain) = (at_end(&rows, m, layer), at_end(&dtp, m, layer));
                assert!(
                    ours < plain,
                    "{rule} layer {layer}: {} {ours} not below dtp's {plain}",
                    m.name()
                );
            }
        }
    }
}

/// The digits at the shipped defaults, hidden [64, 64], 40 epochs: the rows at the last epoch.
fn digits(rule: &str) -> Vec<Row> {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/digits.toml");
    let sets = [
        format!("rule.name={rule}"),
        "net.hidden=[64, 64]".into(),
        "run.epochs=40".into(),
    ];
    let (spec, design) = spec::load(&path, &sets).expect("the digits spec");
    let prepared = arms::prepare(&spec).expect("digits data");
    let options = Options {
        every: 40,
        samples: 50,
        measures: vec!["null_share,angle_gn".into()],
    };
    let rows = align::run(&spec, &design, &prepared, &options, &mut |_, _, _| {})
        .expect("alignment runs")
        .rows;
    rows.into_iter().filter(|r| r.epoch == 40).collect()
}

fn value(rows: &[Row], arm: Arm, update: Update, m: Measure, layer: usize) -> f64 {
    rows.iter()
        .find(|r| r.arm == arm && r.update == update && r.measure == m && r.layer == layer)
        .map(|r| r.value)
        .expect("a measured value")
}

#[test]
fn at_the_shipped_defaults_drl_rules_halve_dtps_null_share_on_two_hidden_layers() {
    let dtp = digits("dtp");
    let views = [
        (Arm::Float, Update::Stored, "float"),
        (Arm::Fixed, Update::Intended, "fixed intended"),
    ];
    for rule in ["dtp-drl", "dtp-direct"] {
        let rows = digits(rule);
        for layer in [1, 2] {
            for (arm, update, what) in views {
                let at = |r: &[Row], m| value(r, arm, update, m, layer);
                let (ours, plain) = (at(&rows, Measure::NullShare), at(&dtp, Measure::NullShare));
                eprintln!("{rule} layer {layer} {what}: null share {ours:.3}, dtp {plain:.3}");
                assert!(
                    ours <= 0.5 * plain,
                    "{rule} layer {layer} {what}: null share {ours} above half of dtp's {plain}"
                );
                let (ours, plain) = (at(&rows, Measure::AngleGn), at(&dtp, Measure::AngleGn));
                assert!(
                    ours < plain,
                    "{rule} layer {layer} {what}: angle to GN {ours} not below dtp's {plain}"
                );
            }
            let stored =
                |r: &[Row]| value(r, Arm::Fixed, Update::Stored, Measure::NullShare, layer);
            assert!(
                stored(&rows) < stored(&dtp),
                "{rule} layer {layer}: stored null share {} not below dtp's {}",
                stored(&rows),
                stored(&dtp)
            );
        }
    }
}
