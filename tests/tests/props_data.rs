//! Property tests of the data loaders, `parse_csv` and `parse_idx`, on stable Rust (the
//! libFuzzer targets `fuzz/fuzz_targets/csv_parse.rs` and `idx_parse.rs` cover the same entry
//! points on nightly).
//!
//! * Arbitrary text and bytes never panic; an accepted data set is consistent (sizes, finite
//!   features, labels below the class count).
//! * `parse_csv(format_csv(ds))` gives back every feature bit for bit and every label.
//! * A table written with the quoting rules of RFC 4180 ("Common Format and MIME Type for
//!   Comma-Separated Values (CSV) Files", IETF, 2005, docs/references.md [34]: fields in double quotes, an inner quote
//!   doubled, commas and line breaks allowed inside quotes) parses to the same names and values.
//! * IDX files written by the layout of the IDX format (the description on the MNIST database
//!   page, "THE MNIST DATABASE of handwritten digits", 1998, docs/references.md [33]: two zero bytes, a type code, the
//!   dimension count, big-endian u32 sizes, big-endian elements) parse to exactly the values
//!   written, as `f32`.

use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, RngSeed};
use tidewise::data::{format_csv, parse_csv, parse_csv_table, parse_idx, Dataset};

fn config() -> Config {
    let cases = std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000);
    Config {
        cases,
        failure_persistence: None,
        rng_algorithm: RngAlgorithm::ChaCha,
        rng_seed: RngSeed::Fixed(0x5eed_da7a),
        ..Config::default()
    }
}

fn consistent(ds: &Dataset) -> Result<(), TestCaseError> {
    prop_assert!(ds.validate().is_ok(), "{:?}", ds.validate());
    prop_assert!(!ds.is_empty());
    prop_assert_eq!(ds.features.len(), ds.len() * ds.n_features);
    Ok(())
}

/// Finite `f32` of every kind: normal, subnormal, zero of both signs.
fn finite_f32() -> impl Strategy<Value = f32> {
    prop_oneof![
        4 => proptest::num::f32::NORMAL | proptest::num::f32::ZERO | proptest::num::f32::SUBNORMAL,
        1 => (-1000i32..1000).prop_map(|v| v as f32 / 8.0),
    ]
}

/// A data set of 1 to 5 features, 1 to 30 rows and labels below `k`.
fn dataset() -> impl Strategy<Value = Dataset> {
    (1usize..=5, 1usize..=30, 1u16..=12).prop_flat_map(|(nf, rows, k)| {
        (
            proptest::collection::vec(finite_f32(), nf * rows),
            proptest::collection::vec(0..k, rows),
        )
            .prop_map(move |(features, labels)| Dataset {
                n_features: nf,
                n_classes: usize::from(k),
                features,
                labels,
                source: "props".into(),
            })
    })
}

/// One field quoted the RFC 4180 way.
fn quoted(s: &str) -> String {
    format!("\"{}\"", s.replace('"', "\"\""))
}

/// A valid IDX array: type code, dimensions and the raw big-endian elements, plus each
/// element's value as the loader must give it.
#[derive(Debug, Clone)]
struct Idx {
    code: u8,
    dims: Vec<u32>,
    data: Vec<u8>,
    values: Vec<f32>,
}

fn idx_file(code: u8, dims: &[u32], data: &[u8]) -> Vec<u8> {
    let mut out = vec![0, 0, code, dims.len() as u8];
    for d in dims {
        out.extend_from_slice(&d.to_be_bytes());
    }
    out.extend_from_slice(data);
    out
}

fn idx_images() -> impl Strategy<Value = Idx> {
    let codes = proptest::sample::select(vec![0x08u8, 0x09, 0x0B, 0x0C, 0x0D, 0x0E]);
    (codes, 1u32..=6, proptest::collection::vec(1u32..=4, 0..=2)).prop_flat_map(
        |(code, n, rest)| {
            let mut dims = vec![n];
            dims.extend(rest);
            let count: u32 = dims.iter().product();
            let elem: usize = match code {
                0x08 | 0x09 => 1,
                0x0B => 2,
                0x0C | 0x0D => 4,
                _ => 8,
            };
            let values = match code {
                // f32 and f64 elements drawn from finite f32 values, so every one is accepted.
                0x0D | 0x0E => {
                    proptest::collection::vec(finite_f32().prop_map(f64::from), count as usize)
                        .boxed()
                }
                _ => proptest::collection::vec(any::<i32>().prop_map(f64::from), count as usize)
                    .boxed(),
            };
            values.prop_map(move |vals| {
                let mut data = Vec::with_capacity(vals.len() * elem);
                let mut values = Vec::with_capacity(vals.len());
                for v in vals {
                    let exact = match code {
                        0x08 => {
                            let b = v as i64 as u8;
                            data.push(b);
                            f64::from(b)
                        }
                        0x09 => {
                            let b = v as i64 as i8;
                            data.extend_from_slice(&b.to_be_bytes());
                            f64::from(b)
                        }
                        0x0B => {
                            let b = v as i64 as i16;
                            data.extend_from_slice(&b.to_be_bytes());
                            f64::from(b)
                        }
                        0x0C => {
                            let b = v as i32;
                            data.extend_from_slice(&b.to_be_bytes());
                            f64::from(b)
                        }
                        0x0D => {
                            let b = v as f32;
                            data.extend_from_slice(&b.to_be_bytes());
                            f64::from(b)
                        }
                        _ => {
                            data.extend_from_slice(&v.to_be_bytes());
                            v
                        }
                    };
                    values.push(exact as f32);
                }
                Idx {
                    code,
                    dims: dims.clone(),
                    data,
                    values,
                }
            })
        },
    )
}

/// One mutation of a buffer: truncate, overwrite a byte, or append one.
#[derive(Debug, Clone)]
enum Mutation {
    Truncate(usize),
    Set(usize, u8),
    Append(u8),
    None,
}

fn mutation() -> impl Strategy<Value = Mutation> {
    prop_oneof![
        (0usize..200).prop_map(Mutation::Truncate),
        (0usize..200, any::<u8>()).prop_map(|(i, b)| Mutation::Set(i, b)),
        any::<u8>().prop_map(Mutation::Append),
        Just(Mutation::None),
    ]
}

fn apply(buf: &mut Vec<u8>, m: &Mutation) {
    match *m {
        Mutation::Truncate(n) => buf.truncate(n % (buf.len() + 1)),
        Mutation::Set(i, b) if !buf.is_empty() => {
            let at = i % buf.len();
            buf[at] = b;
        }
        Mutation::Append(b) => buf.push(b),
        _ => {}
    }
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn csv_arbitrary_text_never_panics(text in any::<String>(), label in "(y|label|)") {
        match parse_csv(&text, &label, "props") {
            Ok(ds) => consistent(&ds)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }

    #[test]
    fn csv_like_text_never_panics(
        text in "(a|b|y|\"y\"|,|\n|\r\n|\r| |0|1|7|-2|0.5|1e40|nan|inf|\"|\"\"|\"1,2\"|cat|\u{feff}){0,40}"
    ) {
        match parse_csv(&text, "y", "props") {
            Ok(ds) => consistent(&ds)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }

    #[test]
    fn csv_round_trips_bit_for_bit(ds in dataset()) {
        let names: Vec<String> = (0..ds.n_features).map(|j| format!("f{j}")).collect();
        let refs: Vec<&str> = names.iter().map(String::as_str).collect();
        let text = format_csv(&ds, &refs, "y", None).map_err(|e| TestCaseError::fail(e.to_string()))?;
        let back = parse_csv(&text, "y", "props").map_err(|e| TestCaseError::fail(format!("{e}\n{text}")))?;
        consistent(&back)?;
        prop_assert_eq!(back.n_features, ds.n_features);
        prop_assert_eq!(&back.labels, &ds.labels);
        let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        prop_assert_eq!(bits(&back.features), bits(&ds.features));
        // Numeric labels are the class indices: the count is the largest plus one.
        let top = ds.labels.iter().copied().max().map_or(0, usize::from);
        prop_assert_eq!(back.n_classes, top + 1);
    }

    #[test]
    fn csv_class_names_map_back(ds in dataset()) {
        let names: Vec<String> = (0..ds.n_features).map(|j| format!("f{j}")).collect();
        let refs: Vec<&str> = names.iter().map(String::as_str).collect();
        let classes: Vec<String> = (0..ds.n_classes).map(|c| format!("c{c}")).collect();
        let crefs: Vec<&str> = classes.iter().map(String::as_str).collect();
        let text = format_csv(&ds, &refs, "y", Some(&crefs)).map_err(|e| TestCaseError::fail(e.to_string()))?;
        let back = parse_csv_table(&text, "y", "props").map_err(|e| TestCaseError::fail(e.to_string()))?;
        for (got, want) in back.dataset.labels.iter().zip(&ds.labels) {
            prop_assert_eq!(&back.class_names[usize::from(*got)], &classes[usize::from(*want)]);
        }
        // Names sorted by byte order, one index each.
        let mut sorted = back.class_names.clone();
        sorted.sort();
        prop_assert_eq!(&sorted, &back.class_names);
    }

    #[test]
    fn csv_rfc4180_quoting_is_understood(
        ds in dataset(),
        header in proptest::collection::vec("[a-z ,\"\n]{1,6}", 5),
        crlf in any::<bool>(),
    ) {
        // Header names with commas, quotes and line breaks, every field quoted; the label
        // column name is plain. Names are trimmed by the loader, so trim what is expected too.
        let names: Vec<String> = header.iter().take(ds.n_features).enumerate()
            .map(|(j, h)| format!("{j}{}", h.trim())).collect();
        let eol = if crlf { "\r\n" } else { "\n" };
        let mut text = String::new();
        for n in &names {
            text.push_str(&quoted(n));
            text.push(',');
        }
        text.push_str("label");
        text.push_str(eol);
        for i in 0..ds.len() {
            for v in ds.row(i) {
                text.push_str(&quoted(&v.to_string()));
                text.push(',');
            }
            text.push_str(&quoted(&ds.labels[i].to_string()));
            text.push_str(eol);
        }
        let back = parse_csv_table(&text, "label", "props").map_err(|e| TestCaseError::fail(format!("{e}\n{text:?}")))?;
        prop_assert_eq!(&back.feature_names, &names);
        prop_assert_eq!(&back.dataset.labels, &ds.labels);
        prop_assert_eq!(&back.dataset.features, &ds.features);
    }

    #[test]
    fn idx_arbitrary_bytes_never_panic(
        images in proptest::collection::vec(any::<u8>(), 0..80),
        labels in proptest::collection::vec(any::<u8>(), 0..24),
        plausible in any::<bool>(),
    ) {
        let mut images = images;
        if plausible && images.len() >= 4 {
            // A valid start, so the size checks are reached.
            images[0] = 0;
            images[1] = 0;
            images[2] = [0x08, 0x09, 0x0B, 0x0C, 0x0D, 0x0E][usize::from(images[2]) % 6];
            images[3] %= 4;
        }
        match parse_idx(&images, &labels) {
            Ok(ds) => consistent(&ds)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }

    #[test]
    fn idx_values_are_read_exactly(img in idx_images(), lab in proptest::collection::vec(any::<u8>(), 6)) {
        let n = img.dims[0] as usize;
        let images = idx_file(img.code, &img.dims, &img.data);
        let labels = idx_file(0x08, &[n as u32], &lab[..n]);
        let ds = parse_idx(&images, &labels).map_err(|e| TestCaseError::fail(e.to_string()))?;
        consistent(&ds)?;
        prop_assert_eq!(ds.len(), n);
        prop_assert_eq!(ds.n_features, img.values.len() / n);
        let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        prop_assert_eq!(bits(&ds.features), bits(&img.values));
        let want: Vec<u16> = lab[..n].iter().map(|&b| u16::from(b)).collect();
        prop_assert_eq!(&ds.labels, &want);
    }

    #[test]
    fn idx_mutated_files_never_panic(
        img in idx_images(),
        lab in proptest::collection::vec(any::<u8>(), 6),
        mi in mutation(),
        ml in mutation(),
    ) {
        let n = img.dims[0] as usize;
        let mut images = idx_file(img.code, &img.dims, &img.data);
        let mut labels = idx_file(0x08, &[n as u32], &lab[..n]);
        apply(&mut images, &mi);
        apply(&mut labels, &ml);
        match parse_idx(&images, &labels) {
            Ok(ds) => consistent(&ds)?,
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }
}
