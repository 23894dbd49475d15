//! Property tests of single kernels: the fast fixed back end (`Fixed`) and the 32-bit
//! kernels the Cortex-M boards run (`FixedCore<W, Narrow>`) against their scalar
//! reference (`FixedRef`) on random designs (every class's word, fraction, rounding mode and
//! overflow policy drawn, an accumulator of 2 to 64 bits) and random values, for each
//! container width. Every result, the threshold counter and every event counter must agree
//! bit for bit after a random sequence of `dot` (with strides and biases), `dot_columns`
//! (the transposed product of a backward pass), `update`,
//! `decay`, `mul`, `add`, `sub`, `shift` and `convert`. The whole-run comparison is
//! `backend_fast_reference.rs`.
//!
//! Cases and seed are fixed so CI is repeatable; `PROPTEST_CASES` raises the count locally.

use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, RngSeed};
use tidewise_core::backend::{
    Backend, ClassSpec, Fixed, FixedConfig, FixedCore, FixedRef, Narrow, Word,
};
use tidewise_core::class::{Class, Tag, CLASSES};
use tidewise_core::format::{Format, Overflow, MAX_FRAC};
use tidewise_core::round::Rounding;

fn config() -> Config {
    let cases = std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(400);
    Config {
        cases,
        failure_persistence: None,
        rng_algorithm: RngAlgorithm::ChaCha,
        rng_seed: RngSeed::Fixed(0x0f17_ed5e),
        ..Config::default()
    }
}

const MODES: [Rounding; 3] = [Rounding::Floor, Rounding::NearestEven, Rounding::Stochastic];

/// A class spec with a word of 2 to `max_word` bits.
fn spec(max_word: u8) -> impl Strategy<Value = ClassSpec> {
    (2..=max_word, 0..=MAX_FRAC, 0..3usize, any::<bool>()).prop_map(|(w, f, m, wrap)| {
        let ov = if wrap {
            Overflow::Wrap
        } else {
            Overflow::Saturate
        };
        ClassSpec {
            format: Format::with_overflow(w, f.min(w + 8), ov).expect("format"),
            rounding: MODES[m],
        }
    })
}

/// A design whose stored classes fit a container of `bits`; the step register up to 32 bits.
fn design(bits: u8) -> impl Strategy<Value = FixedConfig> {
    (
        proptest::collection::vec(spec(bits), CLASSES),
        spec(32),
        2..=64u8,
        any::<bool>(),
    )
        .prop_map(|(specs, step, acc, wrap)| {
            let mut classes = [specs[0]; CLASSES];
            classes.copy_from_slice(&specs);
            classes[Class::Step.index()] = step;
            let ov = if wrap {
                Overflow::Wrap
            } else {
                Overflow::Saturate
            };
            FixedConfig::uniform(classes, acc, ov)
        })
}

/// One kernel call: an operation code and raw material for its operands.
type Op = (u8, Vec<i64>, Vec<i64>, i64, i64, usize);

fn ops() -> impl Strategy<Value = Vec<Op>> {
    proptest::collection::vec(
        (
            0..9u8,
            proptest::collection::vec(any::<i64>(), 0..80),
            proptest::collection::vec(any::<i64>(), 0..80),
            any::<i64>(),
            any::<i64>(),
            1..4usize,
        ),
        1..12,
    )
}

/// `v` reduced into the range of the format of `t`, or (when `wide`) the container's.
fn word<W: Word>(cfg: &FixedConfig, t: Tag, v: i64, wide: bool) -> W {
    let f = cfg.format(t);
    let (lo, hi) = if wide {
        (-(1i64 << (W::BITS - 1)), (1i64 << (W::BITS - 1)) - 1)
    } else {
        (f.raw_min(), f.raw_max())
    };
    W::put(lo + v.rem_euclid(hi - lo + 1))
}

/// Applies `ops` to `be`, returning every result and the final rows.
fn apply<W: Word, B: Backend<S = W>>(cfg: &FixedConfig, be: &mut B, ops: &[Op]) -> Vec<i64> {
    let (w, a, e) = (Tag::weights(1), Tag::act(0), Tag::act(1));
    let (rate, bias) = (Tag::global(Class::Rate), Tag::bias(1));
    let mut out = Vec::new();
    for (i, (code, p, q, u, v, stride)) in ops.iter().enumerate() {
        // Values outside their tag's format (but inside the container) for the row kernels
        // and the single operations; a dot product's bound takes its operands' words from
        // their formats, which the back end keeps every stored value inside.
        let wide = i % 3 == 2 && (2..8).contains(code);
        be.set_layer(i % 2);
        let pw: Vec<W> = p.iter().map(|&x| word(cfg, w, x, wide)).collect();
        let qa: Vec<W> = q.iter().map(|&x| word(cfg, a, x, wide)).collect();
        let (uu, vv) = (word::<W>(cfg, e, *u, wide), word::<W>(cfg, rate, *v, wide));
        match code {
            0 | 1 => {
                let n = if pw.is_empty() {
                    0
                } else {
                    ((pw.len() - 1) / stride + 1).min(qa.len())
                };
                let b = (*code == 1).then(|| (bias, word::<W>(cfg, bias, *u, wide)));
                out.push(be.dot(e, w, &pw, *stride, a, &qa[..n], b).get());
            }
            2 => {
                let mut row = pw.clone();
                be.update(w, &mut row, vv, e, uu, a, &qa);
                out.extend(row.iter().map(|x| x.get()));
            }
            3 => {
                let mut row = pw.clone();
                be.decay(w, &mut row, vv);
                out.extend(row.iter().map(|x| x.get()));
            }
            4 => out.push(be.mul(e, w, word(cfg, w, *v, wide), a, uu).get()),
            5 => out.push(be.add(e, a, uu, w, word(cfg, w, *v, wide)).get()),
            6 => out.push(be.sub(w, e, uu, rate, vv).get()),
            8 => {
                // A row-major matrix of `rows` rows and `cols` columns (up to 70, past the
                // fast kernel's blocks of 32), its values spread from `p`, the transposed
                // product with `q`, into `outs` of the columns (all, or some of them).
                let (rows, cols) = (qa.len(), 1 + (u.unsigned_abs() % 70) as usize);
                let m: Vec<W> = (0..rows * cols)
                    .map(|k| {
                        let raw = p.get(k % p.len().max(1)).copied().unwrap_or(0);
                        word(cfg, w, raw ^ (k as i64).wrapping_mul(0x9e37_79b9), false)
                    })
                    .collect();
                let outs = cols - (v.unsigned_abs() % 3) as usize % cols;
                let mut o = vec![W::default(); outs];
                be.dot_columns(e, w, &m, cols, a, &qa, &mut o);
                out.extend(o.iter().map(|x| x.get()));
            }
            _ => {
                out.push(be.shift(e, uu, (*v % 40) as i32).get());
                out.push(be.convert(w, e, uu).get());
            }
        }
    }
    out
}

fn same<W: Word>(cfg: FixedConfig, ops: Vec<Op>, seed: u64) -> Result<(), TestCaseError> {
    let mut fast = Fixed::<W>::new(cfg, seed).expect("fast");
    let mut reference = FixedRef::<W>::new(cfg, seed).expect("reference");
    let got = apply(&cfg, &mut fast, &ops);
    let want = apply(&cfg, &mut reference, &ops);
    prop_assert_eq!(&got, &want);
    prop_assert_eq!(fast.draws(), reference.draws());
    prop_assert_eq!(fast.counters(), reference.counters());
    let mut narrow = FixedCore::<W, Narrow>::new(cfg, seed).expect("narrow");
    prop_assert_eq!(apply(&cfg, &mut narrow, &ops), want);
    prop_assert_eq!(narrow.draws(), reference.draws());
    prop_assert_eq!(narrow.counters(), reference.counters());
    Ok(())
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn kernels_agree_in_8_bit_containers(cfg in design(8), ops in ops(), seed in any::<u64>()) {
        same::<i8>(cfg, ops, seed)?;
    }

    #[test]
    fn kernels_agree_in_16_bit_containers(cfg in design(16), ops in ops(), seed in any::<u64>()) {
        same::<i16>(cfg, ops, seed)?;
    }

    /// The boards' register: the 32-bit accumulator the narrow dot watches on its high word
    /// (rare among the drawn widths otherwise), saturating or wrapping.
    #[test]
    fn kernels_agree_with_a_32_bit_accumulator(
        cfg in design(16), wrap in any::<bool>(), ops in ops(), seed in any::<u64>()
    ) {
        let ov = if wrap { Overflow::Wrap } else { Overflow::Saturate };
        same::<i16>(FixedConfig::uniform(cfg.classes, 32, ov), ops.clone(), seed)?;
        // The same design in 8-bit words (the step register keeps its width).
        let mut narrow = cfg.classes;
        for (i, c) in narrow.iter_mut().enumerate() {
            if i != Class::Step.index() {
                let f = c.format;
                c.format = Format::with_overflow(f.word().min(8), f.frac(), f.overflow())
                    .expect("format");
            }
        }
        same::<i8>(FixedConfig::uniform(narrow, 32, ov), ops, seed)?;
    }

    #[test]
    fn kernels_agree_in_32_bit_containers(cfg in design(32), ops in ops(), seed in any::<u64>()) {
        same::<i32>(cfg, ops, seed)?;
    }
}

/// The boards' dot product sums two terms at a time and watches only the sums after each
/// pair (against [−2^30, 2^30)); the register must still see every partial sum that leaves
/// 32 bits, after an odd term too. Worked cases in 16-bit words with a 32-bit accumulator
/// (a fact of the trade: a w-bit two's-complement register holds −2^(w−1) to 2^(w−1) − 1),
/// each against the scalar reference, results and event counters both.
#[test]
fn a_32_bit_register_sees_every_partial_sum_of_a_paired_dot() {
    const MIN: i16 = i16::MIN; // −2^15: MIN · MIN = 2^30
    let cases: [(&[i16], &[i16]); 7] = [
        // 2^30 + 2^30 = 2^31 leaves the register at the second term (the pair sum wraps).
        (&[MIN, MIN], &[MIN, MIN]),
        // Out after the third term (an odd one), back in after the fourth.
        (&[MIN, MIN, MIN, MIN], &[MIN, 16384, MIN, MIN]),
        // Up to 3 · 2^29, inside the register but past the pairs' watch, then down again.
        (
            &[MIN, MIN, MIN, MIN, MIN, MIN],
            &[MIN, 16384, MIN, 16384, 32767, 32767],
        ),
        // Below −2^31 from the third term (an odd one) on.
        (
            &[MIN, MIN, MIN, MIN, MIN, MIN],
            &[32767, 32767, 32767, 16384, 32767, MIN],
        ),
        // Odd length, the last term taking the sum out.
        (&[MIN, MIN, MIN], &[MIN, 32767, MIN]),
        // Odd length, inside throughout.
        (&[MIN, 1000, -7], &[5, MIN, 3]),
        // Long, small terms: inside.
        (&[12345; 64], &[-321; 64]),
    ];
    for wrap in [false, true] {
        let ov = if wrap {
            Overflow::Wrap
        } else {
            Overflow::Saturate
        };
        let q15 = ClassSpec {
            format: Format::with_overflow(16, 15, ov).expect("format"),
            rounding: Rounding::NearestEven,
        };
        let cfg = FixedConfig::uniform([q15; CLASSES], 32, ov);
        for (i, (a, b)) in cases.iter().enumerate() {
            let mut narrow = FixedCore::<i16, Narrow>::new(cfg, 1).expect("narrow");
            let mut reference = FixedRef::<i16>::new(cfg, 1).expect("reference");
            let (o, w, x) = (Tag::act(1), Tag::weights(1), Tag::act(0));
            for stride in [1, 2] {
                let spread: Vec<i16> = a.iter().flat_map(|&v| [v, 0]).collect();
                let m: &[i16] = if stride == 1 { a } else { &spread };
                let got = narrow.dot(o, w, m, stride, x, b, None);
                let want = reference.dot(o, w, m, stride, x, b, None);
                assert_eq!(got, want, "case {i}, stride {stride}, wrap {wrap}");
            }
            assert_eq!(
                narrow.counters(),
                reference.counters(),
                "case {i}, wrap {wrap}"
            );
        }
    }
}
