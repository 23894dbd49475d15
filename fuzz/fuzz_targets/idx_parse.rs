//! `tidewise::data::parse_idx` on two arbitrary buffers.
//!
//! The first two input bytes (little-endian) give the length of the image buffer, capped at
//! what is left; the rest is the label buffer. An accepted data set must be consistent.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tidewise::data::parse_idx;

fuzz_target!(|data: &[u8]| {
    let (split, rest) = match data {
        [a, b, rest @ ..] => (usize::from(u16::from_le_bytes([*a, *b])), rest),
        _ => return,
    };
    let (images, labels) = rest.split_at(split.min(rest.len()));
    match parse_idx(images, labels) {
        Ok(ds) => {
            ds.validate()
                .expect("parse_idx returned an inconsistent data set");
            assert!(!ds.is_empty());
            assert!(ds.labels.iter().all(|&l| l < 256));
        }
        Err(e) => assert!(!e.to_string().is_empty()),
    }
});
