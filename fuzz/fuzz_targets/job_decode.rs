//! `tidewise_core::job::decode` and `inspect` on board job blobs.
//!
//! The first input byte picks a mode:
//! * 0: the rest is a blob, decoded for 8-, 16- and 32-bit firmware and inspected;
//! * 1: the rest is a blob whose length field and checksum are first made to match, so the
//!   header, layout, padding and label checks are reached (a random blob almost never
//!   carries its own FNV-1a checksum);
//! * 2: the rest drives the making of a valid job, which must decode to what was encoded;
//!   then one byte of it is changed, which must be refused, and the changed blob is
//!   re-sealed and decoded again (any outcome but a panic).
#![no_main]

use libfuzzer_sys::arbitrary::{Result, Unstructured};
use libfuzzer_sys::fuzz_target;
use tidewise_core::activation::Activation;
use tidewise_core::backend::{container_bits, ClassSpec, FixedConfig, Word};
use tidewise_core::class::CLASSES;
use tidewise_core::format::{Format, Overflow};
use tidewise_core::job::{decode, encode, encoded_len, fnv1a32, inspect, Header, CHECKSUM};
use tidewise_core::network::{Hyper, Regulariser};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;
use tidewise_core::train::{Samples, Schedule};

fn decode_all(blob: &[u8]) {
    for bits in [8, 16, 32] {
        if let Ok(job) = decode(blob, bits) {
            check(&job);
        }
    }
    if let Ok(job) = inspect(blob) {
        check(&job);
    }
}

/// What an accepted job promises: labels below the outputs, arrays of the stated sizes.
fn check(job: &tidewise_core::job::Job<'_>) {
    let outputs = job.plan.shape.outputs();
    for s in [&job.train, &job.test] {
        assert_eq!(s.labels.len(), 2 * s.samples);
        assert_eq!(s.features.len(), s.samples * s.inputs * s.word_bytes);
        for i in 0..s.samples {
            assert!(usize::from(s.label(i)) < outputs);
        }
        let mut labels = vec![0u16; s.samples];
        s.copy_labels(&mut labels).unwrap();
    }
    let _ = job.check_capacity(job.plan.counts().total(), job.train.samples);
}

/// Makes the stated length the blob's and the checksum its contents'.
fn reseal(blob: &mut [u8]) {
    let n = blob.len();
    if n < 16 {
        return;
    }
    blob[8..12].copy_from_slice(&(n as u32).to_le_bytes());
    let sum = fnv1a32(&blob[..n - CHECKSUM]);
    blob[n - CHECKSUM..].copy_from_slice(&sum.to_le_bytes());
}

fn pick<T: Copy>(u: &mut Unstructured<'_>, from: &[T]) -> Result<T> {
    Ok(*u.choose(from)?)
}

fn header(u: &mut Unstructured<'_>) -> Result<Header> {
    let layers = u.int_in_range(2..=4usize)?;
    let sizes: Vec<usize> = (0..layers)
        .map(|_| u.int_in_range(1..=6usize))
        .collect::<Result<_>>()?;
    let shape = Shape::new(&sizes).expect("sizes of 1 to 6");
    let acts: Vec<Activation> = Activation::NAMES
        .iter()
        .filter_map(|n| Activation::parse(n))
        .collect();
    let plan = Plan::new(
        shape,
        pick(u, &Rule::ALL)?,
        pick(u, &acts)?,
        pick(u, &acts)?,
    );
    let roundings: Vec<Rounding> = Rounding::NAMES
        .iter()
        .filter_map(|n| Rounding::parse(n))
        .collect();
    let overflows = [Overflow::Saturate, Overflow::Wrap];
    let mut classes = [ClassSpec {
        format: Format::new(16, 12).expect("a valid format"),
        rounding: Rounding::NearestEven,
    }; CLASSES];
    for c in &mut classes {
        let word = u.int_in_range(2..=32u8)?;
        let frac = u.int_in_range(0..=40u8)?;
        c.format = Format::with_overflow(word, frac, pick(u, &overflows)?).expect("in range");
        c.rounding = pick(u, &roundings)?;
    }
    // Per-layer overrides on some of the network's layers (weights and biases from layer 1).
    let mut layers = tidewise_core::backend::LayerFormats::NONE;
    let top = plan.layers();
    for (first, slots) in [
        (0, &mut layers.activations),
        (1, &mut layers.forward_weights),
        (1, &mut layers.biases),
    ] {
        for slot in slots.iter_mut().take(top + 1).skip(first) {
            if u.arbitrary::<bool>()? {
                let word = u.int_in_range(2..=32u8)?;
                let frac = u.int_in_range(0..=40u8)?;
                *slot = Some(
                    Format::with_overflow(word, frac, pick(u, &overflows)?).expect("in range"),
                );
            }
        }
    }
    let fixed = FixedConfig {
        layers,
        classes,
        acc_bits: u.int_in_range(2..=64u8)?,
        acc_overflow: pick(u, &overflows)?,
    };
    let small =
        |u: &mut Unstructured<'_>| -> Result<f32> { Ok(f32::from(u.arbitrary::<u8>()?) / 64.0) };
    let feedback_steps = u.int_in_range(0..=4u8)?;
    Ok(Header {
        sizes: Header::sizes_of(&plan),
        rule: plan.rule,
        hidden: plan.hidden,
        output: plan.output,
        hyper: Hyper {
            lr: small(u)?,
            lr_feedback: small(u)?,
            beta: small(u)?,
            sigma: small(u)?,
            decay: small(u)?,
            feedback_steps,
            lr_fan_in: u.int_in_range(0..=128u16)?,
            regulariser: pick(u, &Regulariser::ALL)?,
        },
        schedule: Schedule {
            rule: plan.rule,
            feedback_steps,
        },
        warmup_epochs: u.int_in_range(0..=3u16)?,
        epochs: u.int_in_range(1..=50u16)?,
        seed: u.arbitrary()?,
        container_bits: container_bits(&fixed) as u8,
        fixed,
        train_samples: u.int_in_range(0..=6u32)?,
        test_samples: u.int_in_range(0..=4u32)?,
        init_words: 0,
    })
}

fn split<W: Word>(
    u: &mut Unstructured<'_>,
    samples: u32,
    inputs: usize,
    outputs: usize,
) -> Result<(Vec<W>, Vec<u16>)> {
    let n = samples as usize;
    let features = (0..n * inputs)
        .map(|_| u.arbitrary::<i64>().map(W::put))
        .collect::<Result<_>>()?;
    let labels = (0..n)
        .map(|_| u.int_in_range(0..=outputs as u16 - 1))
        .collect::<Result<_>>()?;
    Ok((features, labels))
}

fn round_trip<W: Word>(u: &mut Unstructured<'_>, h: &Header) -> Result<()> {
    let inputs = usize::from(h.sizes[0]);
    let outputs = usize::from(h.sizes[h.sizes.len() - 1]);
    let (tx, ty) = split::<W>(u, h.train_samples, inputs, outputs)?;
    let (sx, sy) = split::<W>(u, h.test_samples, inputs, outputs)?;
    let len = encoded_len(h).expect("a small header encodes");
    let mut blob = vec![0u8; len];
    let train = Samples {
        features: &tx,
        labels: &ty,
    };
    let test = Samples {
        features: &sx,
        labels: &sy,
    };
    assert_eq!(encode(h, train, test, &mut blob), Ok(len));
    let job = decode(&blob, W::BITS).expect("a freshly encoded job is refused");
    assert_eq!(&job.header, h);
    check(&job);
    for (raw, x, y) in [(&job.train, &tx, &ty), (&job.test, &sx, &sy)] {
        let mut got = vec![W::default(); x.len()];
        raw.copy_features(&mut got).unwrap();
        assert_eq!(&got, x);
        let mut labels = vec![0u16; y.len()];
        raw.copy_labels(&mut labels).unwrap();
        assert_eq!(&labels, y);
    }
    // One changed byte: FNV-1a's steps are bijections, so the checksum always disagrees.
    let at = u.choose_index(len)?;
    let flip = u.int_in_range(1..=255u8)?;
    blob[at] ^= flip;
    assert!(
        decode(&blob, W::BITS).is_err(),
        "byte {at} ^ {flip:#x} of {len} accepted"
    );
    reseal(&mut blob);
    decode_all(&blob);
    Ok(())
}

fn structured(data: &[u8]) -> Result<()> {
    let mut u = Unstructured::new(data);
    let h = header(&mut u)?;
    match h.container_bits {
        8 => round_trip::<i8>(&mut u, &h),
        16 => round_trip::<i16>(&mut u, &h),
        _ => round_trip::<i32>(&mut u, &h),
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((&mode, rest)) = data.split_first() else {
        return;
    };
    match mode % 3 {
        0 => decode_all(rest),
        1 => {
            let mut blob = rest.to_vec();
            reseal(&mut blob);
            decode_all(&blob);
        }
        _ => {
            let _ = structured(rest);
        }
    }
});
