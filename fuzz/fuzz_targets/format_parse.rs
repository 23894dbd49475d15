//! `tidewise_core::format::Format::parse` on arbitrary text.
//!
//! An accepted format must lie in the allowed ranges, and its Q-notation display and the
//! Q form built from its word and fraction counts (with the overflow suffix) must parse back.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tidewise_core::format::{Format, Overflow, MAX_FRAC, MAX_WORD, MIN_WORD};

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match Format::parse(text) {
        Ok(f) => {
            assert!((MIN_WORD..=MAX_WORD).contains(&f.word()));
            assert!(f.frac() <= MAX_FRAC);
            assert!(f.min_value() < 0.0 && f.max_value() > 0.0);
            assert_eq!(Format::parse(&f.to_string()), Ok(f));
            let suffix = match f.overflow() {
                Overflow::Saturate => ":sat",
                Overflow::Wrap => ":wrap",
            };
            let q = format!("Q{}.{}{suffix}", f.int_bits(), f.frac());
            assert_eq!(Format::parse(&q), Ok(f));
        }
        Err(e) => assert!(!e.to_string().is_empty()),
    }
});
