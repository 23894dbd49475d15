//! `tidewise::spec::parse` on arbitrary text and `--with` strings.
//!
//! The input is split at NUL bytes: the first part is the spec text, up to eight more are
//! `--with` strings. Any outcome but a panic is fine; an accepted spec must survive its own
//! TOML form (`to_toml` then `parse` gives the same spec, design and hash).
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let mut parts = text.split('\0');
    let spec_text = parts.next().unwrap_or_default();
    let sets: Vec<String> = parts.take(8).map(str::to_string).collect();
    match tidewise::spec::parse(spec_text, &sets) {
        Ok((spec, design)) => {
            let again = tidewise::spec::parse(&spec.to_toml(), &[])
                .expect("an accepted spec's own TOML is refused");
            assert_eq!(again.0, spec);
            assert_eq!(again.1, design);
            assert_eq!(again.0.hash(), spec.hash());
        }
        Err(e) => assert!(!e.to_string().is_empty()),
    }
});
