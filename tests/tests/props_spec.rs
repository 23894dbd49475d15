//! Property tests of the spec parser, `tidewise::spec::parse(text, sets)`, on stable Rust (the
//! libFuzzer target `fuzz/fuzz_targets/spec_parse.rs` covers the same entry point on nightly).
//!
//! * Arbitrary text and arbitrary `--with` strings never panic; every error has a message.
//! * Random overrides of real keys, drawn from values in and out of range, are either refused
//!   with a message that names the key, or accepted; an accepted spec satisfies the limits the
//!   validation promises and survives its own TOML form (same spec, design and hash).
//! * Unknown keys are refused with their name.
//!
//! The checks are against the spec's documented contract (a fact of this project's spec
//! format, no outside source): TOML syntax per the TOML v1.0.0 specification (toml.io, 2021;
//! docs/references.md [37]).

use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, RngSeed};
use tidewise::spec::{self, Design, Spec, SpecError};
use tidewise_core::class::Class;
use tidewise_core::format::{MAX_FRAC, MAX_WORD, MIN_WORD};

fn config() -> Config {
    let cases = std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000);
    Config {
        cases,
        failure_persistence: None,
        rng_algorithm: RngAlgorithm::ChaCha,
        rng_seed: RngSeed::Fixed(0x5eed_5bec),
        ..Config::default()
    }
}

const BASE: &str =
    "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [16]\n[run]\nepochs = 3\n";

/// Values for any key: numbers in and out of every range, strings the sections accept and
/// strings they do not, arrays, booleans, and raw text that is not TOML.
const VALUES: &[&str] = &[
    "0",
    "1",
    "2",
    "3",
    "-1",
    "7",
    "16",
    "64",
    "65",
    "255",
    "256",
    "4097",
    "10001",
    "1e40",
    "-0.0",
    "0.5",
    "0.02",
    "10",
    "10.5",
    "100",
    "101",
    "nan",
    "inf",
    "-inf",
    "18446744073709551615",
    "true",
    "[]",
    "[0]",
    "[8, 4]",
    "[1,2,3,4,5,6,7,8]",
    "[-1]",
    "[\"a\"]",
    "\"\"",
    "\"pump\"",
    "\"digits\"",
    "\"csv\"",
    "\"idx\"",
    "\"bogus\"",
    "dtp",
    "bp",
    "dtp-direct",
    "tanh",
    "identity",
    "leaky-relu",
    "Q3.12",
    "Q-3.10",
    "Q40.3",
    "Q0.7:wrap",
    "Q-1.40",
    "short_fract",
    "shift",
    "nearest",
    "stochastic",
    "up",
    "saturate",
    "wrap",
    "x.csv",
    "{ a = 1 }",
    "= =",
    "\"unterminated",
    "é",
];

fn key() -> impl Strategy<Value = String> {
    let keys = spec::known_keys();
    prop_oneof![
        8 => proptest::sample::select(keys.clone()),
        1 => (proptest::sample::select(keys), "[a-z_.]{0,3}").prop_map(|(k, s)| format!("{k}{s}")),
        1 => "[a-z_.]{0,12}",
    ]
}

fn set() -> impl Strategy<Value = String> {
    prop_oneof![
        9 => (key(), proptest::sample::select(VALUES)).prop_map(|(k, v)| format!("{k}={v}")),
        1 => any::<String>(),
    ]
}

/// What an accepted spec promises (the limits `Spec::design` enforces).
fn check_accepted(spec: &Spec, design: &Design) -> Result<(), TestCaseError> {
    let h = design.hyper;
    prop_assert!(h.lr > 0.0 && h.lr <= 10.0, "lr {}", h.lr);
    for v in [h.lr_feedback, h.beta, h.sigma, h.decay] {
        prop_assert!(v.is_finite() && v >= 0.0, "{v}");
    }
    prop_assert!((2..=64).contains(&design.fixed.acc_bits));
    for c in Class::ALL {
        let f = design.fixed.classes[c.index()].format;
        prop_assert!((MIN_WORD..=MAX_WORD).contains(&f.word()) && f.frac() <= MAX_FRAC);
    }
    prop_assert!(spec.run.epochs >= 1 && spec.run.epochs <= 10_000);
    prop_assert!(spec.rule.warmup_epochs < spec.run.epochs);
    prop_assert!(spec.data.test_fraction > 0.0 && spec.data.test_fraction < 1.0);
    prop_assert!(spec.data.scale > 0.0 && spec.data.scale.is_finite());
    prop_assert!(spec.net.hidden.iter().all(|&n| (1..=4096).contains(&n)));
    let hash = spec.hash();
    prop_assert!(hash.len() == 16 && hash.bytes().all(|b| b.is_ascii_hexdigit()));
    // The spec's own TOML form gives it back.
    let (again, design2) = spec::parse(&spec.to_toml(), &[])
        .map_err(|e| TestCaseError::fail(format!("own TOML refused: {e}\n{}", spec.to_toml())))?;
    prop_assert_eq!(&again, spec);
    prop_assert_eq!(&design2, design);
    prop_assert_eq!(again.hash(), hash);
    Ok(())
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn arbitrary_text_never_panics(text in any::<String>(), sets in proptest::collection::vec(any::<String>(), 0..3)) {
        match spec::parse(&text, &sets) {
            Ok((s, d)) => check_accepted(&s, &d)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }

    #[test]
    fn toml_like_text_never_panics(
        text in "(\\[(data|net|rule|fixed|run|x)\\]\n|[a-z_]{1,14} = (\"[a-z0-9.:-]{0,8}\"|-?[0-9]{1,5}(\\.[0-9]{1,3})?|\\[[0-9, ]{0,8}\\]|true)\n|[ =\\[\\]\"#.\n]){0,24}"
    ) {
        match spec::parse(&text, &[]) {
            Ok((s, d)) => check_accepted(&s, &d)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }

    #[test]
    fn overrides_are_accepted_within_limits_or_refused_by_name(sets in proptest::collection::vec(set(), 1..5)) {
        match spec::parse(BASE, &sets) {
            Ok((s, d)) => check_accepted(&s, &d)?,
            Err(e) => {
                let msg = e.to_string();
                prop_assert!(!msg.is_empty());
                match &e {
                    SpecError::UnknownKey { key, .. } => {
                        prop_assert!(msg.contains(key.as_str()), "{msg}");
                        prop_assert!(!spec::known_keys().contains(key), "{key} is known");
                    }
                    SpecError::Invalid { key, .. } => prop_assert!(msg.contains(key.as_str()), "{msg}"),
                    SpecError::WithSyntax(s) => prop_assert!(!s.contains('='), "{s}"),
                    _ => {}
                }
            }
        }
    }

    #[test]
    fn unknown_keys_in_the_text_are_named(section in "(data|net|rule|fixed|run)", name in "[a-z]{1,10}_x") {
        let header = format!("[{section}]\n");
        let line = format!("{name} = 1\n");
        let text = if BASE.contains(&header) {
            BASE.replacen(&header, &format!("{header}{line}"), 1)
        } else {
            format!("{BASE}{header}{line}")
        };
        match spec::parse(&text, &[]) {
            Err(e @ SpecError::UnknownKey { .. }) => {
                let msg = e.to_string();
                prop_assert!(msg.contains(&format!("`{section}.{name}`")), "{msg}");
            }
            other => prop_assert!(false, "{other:?}"),
        }
    }
}

#[test]
fn base_spec_is_accepted() {
    let (s, d) = spec::parse(BASE, &[]).unwrap_or_else(|e| panic!("{e}"));
    check_accepted(&s, &d).unwrap_or_else(|e| panic!("{e}"));
}
