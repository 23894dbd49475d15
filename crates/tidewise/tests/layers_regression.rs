//! Regression (not an outside reference): the final parameter digests of both arms, for all
//! seven rules and four designs, recorded on this code before formats became per layer.
//! A uniform configuration must keep giving exactly these digests, so per-layer formats
//! change nothing for a design that does not use them.
//!
//! The data are the invented pump generator (`data.source = "pump"`, made up, nothing
//! measured), 240 samples, a 16-16-8-4 network, two epochs (one of feedback warm-up for the
//! rules that learn their feedback).
//!
//! The stochastic-rounding digests (the first design) will legitimately change when the
//! rounding generator changes; the nearest and floor designs draw no rounding bits and must
//! not change. The first design's digests were re-recorded when stochastic rounding moved
//! to counter-based thresholds (`rng::threshold`), after checking that the other three
//! designs' digests and every float digest stayed the same. Every float digest was
//! re-recorded when the float back end's contiguous dot product moved to 32 partial sums
//! combined in a fixed order (`backend/float.rs`), after checking that every fixed digest
//! stayed the same.

use tidewise::arms::{self, NoObserver};
use tidewise::spec;
use tidewise_core::rules::Rule;

const BASE: &str = "[data]\nsource = \"pump\"\nsamples = 240\n\
                    [net]\nhidden = [16, 8]\n[rule]\nlr = 0.05\nfeedback_lr = 0.02\nwarmup_epochs = 1\n\
                    [run]\nepochs = 2\nseed = 3\n";

/// `(name, --with overrides)`.
const DESIGNS: [(&str, &[&str]); 4] = [
    ("16-bit stochastic", &[]),
    (
        "8-bit nearest",
        &[
            "fixed.forward_weights=Q1.6",
            "fixed.biases=Q2.5",
            "fixed.feedback_weights=Q1.6",
            "fixed.activations=Q2.5",
            "fixed.noise=Q2.5",
            "fixed.rate=Q0.7",
            "fixed.step=Q3.12",
            "fixed.accumulator=24",
            "fixed.rounding=nearest",
        ],
    ),
    (
        "32-bit container, floor",
        &[
            "fixed.forward_weights=Q2.29",
            "fixed.activations=Q3.20",
            "fixed.rounding=floor",
            "fixed.accumulator=64",
        ],
    ),
    (
        "wrap overflow, nearest",
        &[
            "fixed.overflow=wrap",
            "fixed.accumulator=20",
            "fixed.accumulator_overflow=wrap",
            "fixed.rounding=nearest",
        ],
    ),
];

/// Final digests `(fixed, float)` per design (in [`DESIGNS`] order) and rule (in
/// [`Rule::ALL`] order), recorded before the change.
const EXPECTED: [[(&str, &str); 7]; 4] = [
    // 16-bit stochastic: bp, fa, dfa, tp, dtp, dtp-drl, dtp-direct
    [
        ("471627b27e066456", "6aa39d0d388519c7"),
        ("b463cd525503b2e3", "b54dd39b6099d997"),
        ("ed8cede8b6ebd258", "579e2f2922b3df13"),
        ("079cc73bbb57e8f7", "644cfb8ddc86c916"),
        ("af6237007db3a5d0", "bff05737031070aa"),
        ("95d7a68c375edb6f", "5d5c046422242796"),
        ("c9c78ccdb31f1b81", "4705b412ae846f71"),
    ],
    // 8-bit nearest: bp, fa, dfa, tp, dtp, dtp-drl, dtp-direct
    [
        ("cad51d4a2afcba00", "6aa39d0d388519c7"),
        ("a3e11aa8f83857e3", "b54dd39b6099d997"),
        ("aee90a8f295c8de0", "579e2f2922b3df13"),
        ("ba82529790d6e557", "644cfb8ddc86c916"),
        ("453bea5a6f0ccf97", "bff05737031070aa"),
        ("15eaf93d3cd758e1", "5d5c046422242796"),
        ("6fc6157b5d93dcac", "4705b412ae846f71"),
    ],
    // 32-bit container, floor: bp, fa, dfa, tp, dtp, dtp-drl, dtp-direct
    [
        ("23c84f163f10cfce", "6aa39d0d388519c7"),
        ("034caf864af45cbe", "b54dd39b6099d997"),
        ("cb699ed0133a95db", "579e2f2922b3df13"),
        ("a20e0f7eda936a2c", "644cfb8ddc86c916"),
        ("0aa27d8c816322fb", "bff05737031070aa"),
        ("21c37c2204963016", "5d5c046422242796"),
        ("fb337c84adf3aea5", "4705b412ae846f71"),
    ],
    // wrap overflow, nearest: bp, fa, dfa, tp, dtp, dtp-drl, dtp-direct
    [
        ("2baacb6e2b84df8e", "6aa39d0d388519c7"),
        ("4aad8388146ce046", "b54dd39b6099d997"),
        ("936f142145b52d08", "579e2f2922b3df13"),
        ("0c9044ec5e1b370c", "644cfb8ddc86c916"),
        ("d24eb4c0d65f324e", "bff05737031070aa"),
        ("a727eb10306bb4e9", "5d5c046422242796"),
        ("ca2af222348af0f7", "4705b412ae846f71"),
    ],
];

fn digests(sets: &[&str], rule: Rule) -> (String, String) {
    let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
    digests_of(sets, rule)
}

/// The overrides that give the σ²-normalised difference reconstruction loss (`dtp-drl`,
/// `dtp-direct`) the core rates these digests were recorded with: `feedback_lr = 0.02`
/// then multiplied the unnormalised loss, so the normalised rate is `0.02 σ²` at σ = 0.1;
/// weight decay's damping was `λ/σ² = 0.01 / 0.01 = 1`, the new default `rule.decay`.
fn normalised(sets: &mut Vec<String>, rule: Rule) {
    if rule.normalises_feedback_loss() {
        sets.push("rule.feedback_lr=0.0002".to_string());
    }
}

fn digests_of(mut sets: Vec<String>, rule: Rule) -> (String, String) {
    normalised(&mut sets, rule);
    sets.push(format!("rule.name={}", rule.name()));
    let (spec, design) = spec::parse(BASE, &sets).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let cmp = arms::run(
        &spec,
        &design,
        &prepared,
        &mut NoObserver,
        &mut |_, _, _| {},
    )
    .unwrap();
    (cmp.fixed.digest, cmp.float.digest)
}

/// `dtp-drl` with the output-noise regulariser (the default, weight decay, is in
/// [`EXPECTED`], unchanged by its addition), per design in [`DESIGNS`] order:
/// recorded when the regulariser was added (a regression pin, not a reference).
const DRL_OUTPUT_NOISE: [(&str, &str); 4] = [
    ("f70512ebb0a6b773", "369bc36cb5636835"),
    ("6c5b5700c2264ea4", "369bc36cb5636835"),
    ("7ff8610a9c33f864", "369bc36cb5636835"),
    ("bfe36ff1812b1666", "369bc36cb5636835"),
];

#[test]
fn drl_output_noise_digests() {
    let mut got = Vec::new();
    for (name, sets) in DESIGNS.iter() {
        let mut sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
        sets.push("rule.name=dtp-drl".to_string());
        sets.push("rule.feedback_regulariser=output-noise".to_string());
        // Output noise's term is of order σ² too, so its old weight 0.01 is the new λ.
        normalised(&mut sets, Rule::DtpDrl);
        sets.push("rule.decay=0.01".to_string());
        let (spec, design) = spec::parse(BASE, &sets).unwrap();
        let prepared = arms::prepare(&spec).unwrap();
        let cmp = arms::run(
            &spec,
            &design,
            &prepared,
            &mut NoObserver,
            &mut |_, _, _| {},
        )
        .unwrap();
        eprintln!(
            "{name}: (\"{}\", \"{}\")",
            cmp.fixed.digest, cmp.float.digest
        );
        got.push((cmp.fixed.digest, cmp.float.digest));
    }
    for (((name, _), (f, l)), (ef, el)) in DESIGNS.iter().zip(&got).zip(DRL_OUTPUT_NOISE) {
        assert_eq!((f.as_str(), l.as_str()), (ef, el), "{name}");
    }
}

#[test]
fn uniform_designs_keep_their_digests() {
    for (d, (name, sets)) in DESIGNS.iter().enumerate() {
        for (r, rule) in Rule::ALL.iter().enumerate() {
            let (fixed, float) = digests(sets, *rule);
            let (ef, el) = EXPECTED[d][r];
            assert_eq!(
                (fixed.as_str(), float.as_str()),
                (ef, el),
                "{name} / {}",
                rule.name()
            );
        }
    }
}

/// The per-layer keys of a design's `--with` list, each rewritten as an array that repeats
/// its format once per layer (3 weight layers, 4 activation layers; defaults for the keys
/// the design leaves alone).
fn repeated_per_layer(sets: &[&str]) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for (key, default, n) in [
        ("fixed.forward_weights", "Q2.13", 3),
        ("fixed.biases", "Q3.12", 3),
        ("fixed.activations", "Q3.12", 4),
    ] {
        let given = sets
            .iter()
            .find_map(|s| s.strip_prefix(&format!("{key}=")))
            .unwrap_or(default);
        let list = vec![format!("{given:?}"); n].join(", ");
        out.push(format!("{key}=[{list}]"));
    }
    let key = |s: &str| s.split('=').next().unwrap_or_default().to_string();
    let replaced: Vec<String> = out.iter().map(|o| key(o)).collect();
    out.extend(
        sets.iter()
            .filter(|s| !replaced.contains(&key(s)))
            .map(|s| s.to_string()),
    );
    out
}

#[test]
fn per_layer_entries_equal_to_the_class_format_change_nothing() {
    for (d, (name, sets)) in DESIGNS.iter().enumerate() {
        let per_layer = repeated_per_layer(sets);
        let (_, design) = spec::parse(BASE, &per_layer).unwrap();
        // The overrides are really there (every layer), not folded into the class format.
        assert_eq!(design.fixed.layers.entries().count(), 3 + 3 + 4, "{name}");
        for (r, rule) in Rule::ALL.iter().enumerate() {
            let got = digests_of(per_layer.clone(), *rule);
            let (ef, el) = EXPECTED[d][r];
            assert_eq!(
                (got.0.as_str(), got.1.as_str()),
                (ef, el),
                "{name} / {} with {per_layer:?}",
                rule.name()
            );
        }
    }
}
