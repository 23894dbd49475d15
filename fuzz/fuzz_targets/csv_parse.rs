//! `tidewise::data::parse_csv` on arbitrary text.
//!
//! The first input byte picks the label column's name, the rest is the CSV text. An accepted
//! data set must be consistent (sizes, finite features, labels below the class count) and must
//! come back unchanged through `format_csv` and `parse_csv`.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tidewise::data::{format_csv, parse_csv};

const LABELS: [&str; 4] = ["y", "label", "a", "state"];

fuzz_target!(|data: &[u8]| {
    let Some((&pick, rest)) = data.split_first() else {
        return;
    };
    let label = LABELS[usize::from(pick) % LABELS.len()];
    let text = String::from_utf8_lossy(rest);
    let ds = match parse_csv(&text, label, "fuzz") {
        Ok(ds) => ds,
        Err(e) => {
            assert!(!e.to_string().is_empty());
            return;
        }
    };
    ds.validate()
        .expect("parse_csv returned an inconsistent data set");
    // Plain names so the writer needs no quoting; labels written as class indices.
    let names: Vec<String> = (0..ds.n_features).map(|j| format!("f{j}")).collect();
    let refs: Vec<&str> = names.iter().map(String::as_str).collect();
    let out = format_csv(&ds, &refs, "y", None).expect("format_csv refused a parsed data set");
    let back = parse_csv(&out, "y", "fuzz").expect("parse_csv refused format_csv's output");
    assert_eq!(back.n_features, ds.n_features);
    assert_eq!(back.labels, ds.labels);
    assert_eq!(back.features, ds.features);
    assert_eq!(back.n_classes, ds.n_classes);
});
