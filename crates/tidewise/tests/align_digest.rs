//! The measurement observes without changing training: a probed run ends with the same weights
//! (digests), curves and event counts as the same run without the measurement.
//!
//! A project design requirement (no outside source): the measurement hooks into the arms at
//! checkpoints and never changes training. The digest is the core's FNV-1a over the raw
//! parameters.

use tidewise::align::{self, Options};
use tidewise::arms::{self, NoObserver};
use tidewise::spec;

#[test]
fn probed_runs_match_plain_runs_bit_for_bit() {
    for (rule, hidden, rounding) in [
        ("dtp-direct", "[16]", "stochastic"),
        ("dtp-drl", "[12, 8]", "stochastic"),
        ("bp", "[16]", "nearest"),
    ] {
        let text = format!(
            "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = {hidden}\n[rule]\nname = \"{rule}\"\nwarmup_epochs = 1\n[fixed]\nrounding = \"{rounding}\"\n[run]\nepochs = 3\n"
        );
        let (spec, design) = spec::parse(&text, &[]).expect("valid spec");
        let prepared = arms::prepare(&spec).expect("pump data");
        let plain = arms::run(
            &spec,
            &design,
            &prepared,
            &mut NoObserver,
            &mut |_, _, _| {},
        )
        .expect("plain run");
        let options = Options {
            every: 1,
            samples: 20,
            measures: Vec::new(),
        };
        let probed = align::run(&spec, &design, &prepared, &options, &mut |_, _, _| {})
            .expect("alignment runs");
        let p = &probed.comparison;
        assert!(
            !probed.rows.is_empty(),
            "{rule}: the measurement measured nothing"
        );
        for (a, b, arm) in [
            (&plain.fixed, &p.fixed, "fixed"),
            (&plain.float, &p.float, "float"),
        ] {
            assert_eq!(
                a.digest, b.digest,
                "{rule} {arm}: digest changed by the measurement"
            );
            assert_eq!(a.lost_updates, b.lost_updates, "{rule} {arm}");
            assert_eq!(a.saturations, b.saturations, "{rule} {arm}");
            let curve = |r: &arms::ArmResult| -> Vec<(u64, u64)> {
                r.epochs
                    .iter()
                    .map(|e| (e.train_loss.to_bits(), e.test_accuracy.to_bits()))
                    .collect()
            };
            assert_eq!(
                curve(a),
                curve(b),
                "{rule} {arm}: curves changed by the measurement"
            );
        }
    }
}
