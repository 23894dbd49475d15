//! Property tests of the format notation parser, `Format::parse`, on stable Rust (the
//! libFuzzer target `fuzz/fuzz_targets/format_parse.rs` covers the same entry point on nightly).
//!
//! * Arbitrary text never panics, and an error always has a message.
//! * An accepted format lies in the allowed ranges and parses back from its display and from
//!   the Q name built from its word and fraction counts.
//! * Q notation `Qm.n` means a word of m + n + 1 bits: the sign is not counted in m
//!   ("TMS320C64x DSP Library Programmer's Reference", Texas Instruments, 2003, Appendix
//!   A.2; document number and year recalled from memory; docs/references.md [10]), and the
//!   range of a two's-complement word of w bits with n fraction bits is
//!   [-2^(w-1-n), 2^(w-1-n) - 2^-n] (a fact of the trade: two's-complement arithmetic).
//!
//! Cases and seed are fixed so CI is repeatable; `PROPTEST_CASES` raises the count locally.

use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, RngSeed};
use tidewise_core::format::{Format, FormatError, Overflow, MAX_FRAC, MAX_WORD, MIN_WORD};

fn config() -> Config {
    let cases = std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000);
    Config {
        cases,
        failure_persistence: None,
        rng_algorithm: RngAlgorithm::ChaCha,
        rng_seed: RngSeed::Fixed(0x5eed_f0a7),
        ..Config::default()
    }
}

/// Text near the grammar: a prefix, signed numbers of up to six digits, a separator and an
/// optional overflow suffix, with stray spaces.
fn near_grammar() -> impl Strategy<Value = String> {
    "[ ]?[QqSsx]?-?[0-9]{0,6}([.fF]-?[0-9]{0,6})?[ ]?(:[ ]?(sat|saturate|wrap|clip|))?[ ]?"
}

fn any_format() -> impl Strategy<Value = Format> {
    (MIN_WORD..=MAX_WORD, 0..=MAX_FRAC, any::<bool>()).prop_map(|(w, n, wrap)| {
        let ov = if wrap {
            Overflow::Wrap
        } else {
            Overflow::Saturate
        };
        Format::with_overflow(w, n, ov).unwrap_or_else(|e| panic!("{w} {n}: {e}"))
    })
}

fn check_accepted(f: Format) -> Result<(), TestCaseError> {
    prop_assert!((MIN_WORD..=MAX_WORD).contains(&f.word()));
    prop_assert!(f.frac() <= MAX_FRAC);
    let (w, n) = (i32::from(f.word()), i32::from(f.frac()));
    prop_assert_eq!(f.int_bits(), w - 1 - n);
    prop_assert_eq!(f.min_value(), -(2f64.powi(w - 1 - n)));
    prop_assert_eq!(f.max_value(), 2f64.powi(w - 1 - n) - 2f64.powi(-n));
    prop_assert_eq!(Format::parse(&f.to_string()), Ok(f));
    let suffix = match f.overflow() {
        Overflow::Saturate => ":sat",
        Overflow::Wrap => ":wrap",
    };
    let q = format!("Q{}.{}{suffix}", f.int_bits(), f.frac());
    prop_assert_eq!(Format::parse(&q), Ok(f));
    Ok(())
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn arbitrary_text_never_panics(text in any::<String>()) {
        match Format::parse(&text) {
            Ok(f) => check_accepted(f)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }

    #[test]
    fn text_near_the_grammar_is_parsed_or_refused_cleanly(text in near_grammar()) {
        match Format::parse(&text) {
            Ok(f) => check_accepted(f)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }

    #[test]
    fn every_valid_format_round_trips(f in any_format()) {
        check_accepted(f)?;
    }

    #[test]
    fn q_notation_counts_the_sign_outside_m(m in -60i32..60, n in -5i32..60) {
        let got = Format::parse(&format!("Q{m}.{n}"));
        let word = m + n + 1;
        if !(0..=i32::from(MAX_FRAC)).contains(&n) {
            prop_assert_eq!(got, Err(FormatError::Frac(n)));
        } else if !(i32::from(MIN_WORD)..=i32::from(MAX_WORD)).contains(&word) {
            prop_assert_eq!(got, Err(FormatError::Word(word)));
        } else {
            let f = got.map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert_eq!((i32::from(f.word()), i32::from(f.frac()), f.int_bits()), (word, n, m));
            prop_assert_eq!(f.overflow(), Overflow::Saturate);
        }
    }

    #[test]
    fn word_fraction_strings_are_not_formats(w in -3i32..80, n in -3i32..80) {
        // The notation is Q names and presets only; an `s<word>f<frac>` string is refused
        // as syntax, with the allowed forms in the message (project decision, no source).
        let got = Format::parse(&format!("s{w}f{n}"));
        prop_assert_eq!(got, Err(FormatError::Syntax));
        prop_assert!(FormatError::Syntax.to_string().contains("Q3.12"));
    }
}
