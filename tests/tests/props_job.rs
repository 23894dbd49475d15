//! Property tests of the board job codec, `tidewise_core::job::{encode, decode}`, on stable
//! Rust (the libFuzzer target `fuzz/fuzz_targets/job_decode.rs` covers the same entry points on
//! nightly).
//!
//! * `decode(encode(job))` gives back the header, every feature word and every label.
//! * Any single-byte change of a valid blob is refused. The checksum is FNV-1a 32 ("The FNV
//!   Non-Cryptographic Hash Algorithm", IETF Internet-Draft, 2019, year recalled from memory;
//!   docs/references.md [30]): each step
//!   `h = (h ^ b) · p` with an odd prime `p` is a bijection of the 32-bit state, so two inputs
//!   of one length that differ in one byte always hash differently.
//! * A blob cut short or extended is refused.
//! * Arbitrary bytes, and arbitrary bytes whose length field and checksum were made to match
//!   (so the header and layout checks speak), never panic.

use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, RngSeed};
use tidewise_core::activation::Activation;
use tidewise_core::backend::{container_bits, ClassSpec, FixedConfig, LayerFormats, Word};
use tidewise_core::class::CLASSES;
use tidewise_core::format::{Format, Overflow};
use tidewise_core::job::{
    decode, encode, encoded_len, fnv1a32, inspect, Header, JobError, CHECKSUM, MAGIC, VERSION,
};
use tidewise_core::network::Hyper;
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;
use tidewise_core::train::{Samples, Schedule};

fn config() -> Config {
    let cases = std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000);
    Config {
        cases,
        failure_persistence: None,
        rng_algorithm: RngAlgorithm::ChaCha,
        rng_seed: RngSeed::Fixed(0x5eed_b10b),
        ..Config::default()
    }
}

fn class_spec() -> impl Strategy<Value = ClassSpec> {
    (2u8..=32, 0u8..=40, any::<bool>(), 0usize..3).prop_map(|(w, f, wrap, r)| ClassSpec {
        format: Format::with_overflow(
            w,
            f,
            if wrap {
                Overflow::Wrap
            } else {
                Overflow::Saturate
            },
        )
        .unwrap_or_else(|e| panic!("{e}")),
        rounding: [Rounding::NearestEven, Rounding::Floor, Rounding::Stochastic][r],
    })
}

fn activation() -> impl Strategy<Value = Activation> {
    proptest::sample::select(
        Activation::NAMES
            .iter()
            .filter_map(|n| Activation::parse(n))
            .collect::<Vec<_>>(),
    )
}

fn header() -> impl Strategy<Value = Header> {
    (
        proptest::collection::vec(1usize..=6, 2..=4),
        proptest::sample::select(Rule::ALL.to_vec()),
        activation(),
        activation(),
        proptest::array::uniform8(class_spec()),
        (2u8..=64, any::<bool>()),
        proptest::array::uniform5(0f32..4.0),
        (0u8..=4, 0u16..=3, 1u16..=50, any::<u64>()),
        (0u32..=6, 0u32..=4),
        // Per-layer overrides: activations, forward weights, biases of layers 0..=3.
        proptest::collection::vec(proptest::option::of(class_spec()), 12),
    )
        .prop_map(
            |(
                sizes,
                rule,
                hidden,
                output,
                classes,
                (acc, wrap),
                h,
                (k, warm, ep, seed),
                (ntr, nte),
                overrides,
            )| {
                let shape = Shape::new(&sizes).unwrap_or_else(|e| panic!("{e}"));
                let top = shape.layers();
                let mut layers = LayerFormats::NONE;
                for (i, o) in overrides.iter().enumerate() {
                    let (class_slot, l) = (i / 4, i % 4);
                    let slots = match class_slot {
                        0 => &mut layers.activations,
                        1 => &mut layers.forward_weights,
                        _ => &mut layers.biases,
                    };
                    // Only layers the network has (weights and biases from layer 1).
                    if l <= top && (class_slot == 0 || l >= 1) {
                        slots[l] = o.map(|c| c.format);
                    }
                }
                let plan = Plan::new(shape, rule, hidden, output);
                let classes: [ClassSpec; CLASSES] = classes;
                let fixed = FixedConfig {
                    layers,
                    classes,
                    acc_bits: acc,
                    acc_overflow: if wrap {
                        Overflow::Wrap
                    } else {
                        Overflow::Saturate
                    },
                };
                Header {
                    sizes: Header::sizes_of(&plan),
                    rule,
                    hidden,
                    output,
                    hyper: Hyper {
                        lr: h[0],
                        lr_feedback: h[1],
                        beta: h[2],
                        sigma: h[3],
                        decay: h[4],
                        feedback_steps: k,
                        lr_fan_in: 0,
                        regulariser: Default::default(),
                    },
                    schedule: Schedule {
                        rule,
                        feedback_steps: k,
                    },
                    warmup_epochs: warm,
                    epochs: ep,
                    seed,
                    container_bits: container_bits(&fixed) as u8,
                    fixed,
                    train_samples: ntr,
                    test_samples: nte,
                    init_words: 0,
                }
            },
        )
}

/// A valid job: header, data words (as sign-extended raw values) and labels.
#[derive(Debug, Clone)]
struct JobCase {
    header: Header,
    train_x: Vec<i64>,
    train_y: Vec<u16>,
    test_x: Vec<i64>,
    test_y: Vec<u16>,
}

fn job_case() -> impl Strategy<Value = JobCase> {
    header().prop_flat_map(|h| {
        let inputs = usize::from(h.sizes[0]);
        let outputs = h.sizes[h.sizes.len() - 1];
        let bits = u32::from(h.container_bits);
        let word = move || {
            any::<i64>().prop_map(move |v| {
                // Sign-extend the low `bits` bits: a value the container holds.
                let s = 64 - bits;
                (v << s) >> s
            })
        };
        let (ntr, nte) = (h.train_samples as usize, h.test_samples as usize);
        (
            Just(h),
            proptest::collection::vec(word(), ntr * inputs),
            proptest::collection::vec(0..outputs, ntr),
            proptest::collection::vec(word(), nte * inputs),
            proptest::collection::vec(0..outputs, nte),
        )
            .prop_map(|(header, train_x, train_y, test_x, test_y)| JobCase {
                header,
                train_x,
                train_y,
                test_x,
                test_y,
            })
    })
}

fn encode_as<W: Word>(c: &JobCase) -> Result<Vec<u8>, JobError> {
    let tx: Vec<W> = c.train_x.iter().map(|&v| W::put(v)).collect();
    let sx: Vec<W> = c.test_x.iter().map(|&v| W::put(v)).collect();
    let mut out = vec![0u8; encoded_len(&c.header)?];
    let n = encode(
        &c.header,
        Samples {
            features: &tx,
            labels: &c.train_y,
        },
        Samples {
            features: &sx,
            labels: &c.test_y,
        },
        &mut out,
    )?;
    out.truncate(n);
    Ok(out)
}

fn encode_case(c: &JobCase) -> Result<Vec<u8>, JobError> {
    match c.header.container_bits {
        8 => encode_as::<i8>(c),
        16 => encode_as::<i16>(c),
        _ => encode_as::<i32>(c),
    }
}

fn features_as<W: Word>(raw: &tidewise_core::job::RawSamples<'_>) -> Result<Vec<i64>, JobError> {
    let mut out = vec![W::default(); raw.samples * raw.inputs];
    raw.copy_features(&mut out)?;
    Ok(out.into_iter().map(Word::get).collect())
}

fn features(raw: &tidewise_core::job::RawSamples<'_>, bits: u8) -> Result<Vec<i64>, JobError> {
    match bits {
        8 => features_as::<i8>(raw),
        16 => features_as::<i16>(raw),
        _ => features_as::<i32>(raw),
    }
}

fn reseal(blob: &mut [u8]) {
    let n = blob.len();
    if n < 16 {
        return;
    }
    blob[8..12].copy_from_slice(&(n as u32).to_le_bytes());
    let sum = fnv1a32(&blob[..n - CHECKSUM]);
    blob[n - CHECKSUM..].copy_from_slice(&sum.to_le_bytes());
}

/// Decodes for every firmware width; whatever is accepted must be self-consistent.
fn decode_any(blob: &[u8]) -> Result<(), TestCaseError> {
    for bits in [8, 16, 32] {
        match decode(blob, bits) {
            Ok(job) => {
                let outputs = job.plan.shape.outputs();
                for s in [&job.train, &job.test] {
                    prop_assert_eq!(s.features.len(), s.samples * s.inputs * s.word_bytes);
                    prop_assert!((0..s.samples).all(|i| usize::from(s.label(i)) < outputs));
                }
            }
            Err(e) => prop_assert!(!e.to_string().is_empty()),
        }
    }
    let _ = inspect(blob);
    Ok(())
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn decode_of_encode_round_trips(c in job_case()) {
        let blob = encode_case(&c).map_err(|e| TestCaseError::fail(e.to_string()))?;
        prop_assert_eq!(&blob[..4], &MAGIC);
        prop_assert_eq!(u16::from_le_bytes([blob[4], blob[5]]), VERSION);
        let bits = c.header.container_bits;
        let job = decode(&blob, u32::from(bits)).map_err(|e| TestCaseError::fail(e.to_string()))?;
        prop_assert_eq!(&job.header, &c.header);
        prop_assert_eq!(features(&job.train, bits).map_err(|e| TestCaseError::fail(e.to_string()))?, c.train_x.clone());
        prop_assert_eq!(features(&job.test, bits).map_err(|e| TestCaseError::fail(e.to_string()))?, c.test_x.clone());
        let mut y = vec![0u16; c.train_y.len()];
        job.train.copy_labels(&mut y).map_err(|e| TestCaseError::fail(e.to_string()))?;
        prop_assert_eq!(&y, &c.train_y);
        let ty: Vec<u16> = (0..c.test_y.len()).map(|i| job.test.label(i)).collect();
        prop_assert_eq!(&ty, &c.test_y);
        // Another firmware width is refused by name.
        for other in [8u32, 16, 32].into_iter().filter(|&b| b != u32::from(bits)) {
            let refused = matches!(
                decode(&blob, other),
                Err(JobError::Container { job, firmware }) if job == bits && firmware == other
            );
            prop_assert!(refused);
        }
    }

    #[test]
    fn any_single_byte_change_is_refused(c in job_case(), at in any::<prop::sample::Index>(), flip in 1u8..=255) {
        let mut blob = encode_case(&c).map_err(|e| TestCaseError::fail(e.to_string()))?;
        let i = at.index(blob.len());
        blob[i] ^= flip;
        prop_assert!(decode(&blob, u32::from(c.header.container_bits)).is_err(), "byte {} ^ {:#x} accepted", i, flip);
        prop_assert!(inspect(&blob).is_err());
        // Re-sealed, the change reaches the header and layout checks: no panic.
        reseal(&mut blob);
        decode_any(&blob)?;
    }

    #[test]
    fn cut_or_extended_blobs_are_refused(c in job_case(), cut in any::<prop::sample::Index>(), extra in 1usize..8) {
        let blob = encode_case(&c).map_err(|e| TestCaseError::fail(e.to_string()))?;
        let n = cut.index(blob.len());
        prop_assert!(inspect(&blob[..n]).is_err());
        let mut longer = blob.clone();
        longer.extend(std::iter::repeat_n(0u8, extra));
        prop_assert!(inspect(&longer).is_err());
    }

    #[test]
    fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..300), with_magic in any::<bool>()) {
        let mut bytes = bytes;
        if with_magic && bytes.len() >= 6 {
            bytes[..4].copy_from_slice(&MAGIC);
            bytes[4..6].copy_from_slice(&VERSION.to_le_bytes());
        }
        decode_any(&bytes)?;
        reseal(&mut bytes);
        decode_any(&bytes)?;
    }

    #[test]
    fn resealed_header_garbage_never_panics(c in job_case(), edits in proptest::collection::vec((0usize..120, any::<u8>()), 1..6)) {
        // Garbage written over the preamble and header, then the checksum fixed: the header
        // decoder and the layout checks must refuse it or accept a consistent job.
        let mut blob = encode_case(&c).map_err(|e| TestCaseError::fail(e.to_string()))?;
        let n = blob.len();
        for (at, b) in edits {
            let i = 4 + at % (n - CHECKSUM - 4);
            blob[i] = b;
        }
        reseal(&mut blob);
        decode_any(&blob)?;
    }
}
