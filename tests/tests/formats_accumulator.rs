//! The multiply-accumulate register: 16-bit operands summed in a 24- or 32-bit accumulator
//! (and 32-bit operands in 40- to 64-bit ones), saturating or wrapping, against a plain
//! reference loop.
//!
//! The reference is a fact of the trade about accumulator registers (the saturating q15
//! multiply-accumulate of Microchip's libq, docs/references.md [11]; the Arm SMLAD
//! instruction, whose Q flag records an accumulation overflow: "Cortex-M4 Devices Generic
//! User Guide", Arm DUI 0553A, 2010, section 3.6, docs/references.md [17]): the register
//! starts with the bias,
//! takes each exact product in turn, and after every addition either clamps to its range or
//! keeps its low bits. An overflow anywhere in a dot product counts once against the
//! accumulator. The single final rounding into the output is checked with the `fixed`
//! crate's `round_ties_even` and saturating conversion.

use fixed::types::extra::{U12, U28};
use fixed::types::{I16F0, I32F0};
use fixed::FixedI128;
use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig, Word};
use tidewise_core::class::{Class, Tag};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::rng::Stream;
use tidewise_core::round::Rounding;

/// Dot products per accumulator configuration.
const CASES: usize = 3000;

/// The formats of one check: activations Q0.(w-1), forward weights Q3.(w-4), biases
/// Q5.(w-6); products carry `act + w` fraction bits, and the output (an activation)
/// drops `w - 4` of them.
#[derive(Clone, Copy)]
struct Setup {
    word: u8,
    /// The output rounding by the `fixed` crate: nearest-even from the products' fraction
    /// (the integer it gives) and that integer saturated into the word.
    round: fn(i128) -> (i128, i128),
}

impl Setup {
    fn act_frac(self) -> u8 {
        self.word - 1
    }
    fn w_frac(self) -> u8 {
        self.word - 4
    }
    fn bias_frac(self) -> u8 {
        self.word - 6
    }
    fn product_frac(self) -> u32 {
        u32::from(self.act_frac() + self.w_frac())
    }
}

const W16: Setup = Setup {
    word: 16,
    round: |acc| {
        let k = FixedI128::<U12>::from_bits(acc).round_ties_even();
        (
            k.to_num(),
            i128::from(I16F0::saturating_from_num(k).to_bits()),
        )
    },
};

const W32: Setup = Setup {
    word: 32,
    round: |acc| {
        let k = FixedI128::<U28>::from_bits(acc).round_ties_even();
        (
            k.to_num(),
            i128::from(I32F0::saturating_from_num(k).to_bits()),
        )
    },
};

fn spec(word: u8, frac: u8) -> ClassSpec {
    ClassSpec {
        format: Format::new(word, frac).unwrap_or_else(|e| panic!("{e}")),
        rounding: Rounding::NearestEven,
    }
}

fn backend<W: Word>(s: Setup, acc_bits: u8, acc_overflow: Overflow) -> Fixed<W> {
    let mut classes = [spec(s.word, s.act_frac()); 8];
    // The step register is not stored in the container: give it the products' fraction and
    // 32 bits, so a dot product written into it shows a register of up to 32 bits exactly.
    classes[Class::Step.index()] = spec(32, s.product_frac().min(40) as u8);
    classes[Class::Forward.index()] = spec(s.word, s.w_frac());
    classes[Class::Bias.index()] = spec(s.word, s.bias_frac());
    let cfg = FixedConfig {
        layers: Default::default(),
        classes,
        acc_bits,
        acc_overflow,
    };
    Fixed::<W>::new(cfg, 3).unwrap_or_else(|e| panic!("{e}"))
}

/// A register of `bits` bits after an addition: `(value, overflowed)`.
fn register(v: i128, bits: u8, policy: Overflow) -> (i128, bool) {
    let m = 1i128 << bits;
    let (lo, hi) = (-(m / 2), m / 2 - 1);
    if (lo..=hi).contains(&v) {
        return (v, false);
    }
    let out = match policy {
        Overflow::Saturate => v.clamp(lo, hi),
        Overflow::Wrap => (v - lo).rem_euclid(m) + lo,
    };
    (out, true)
}

struct Reference {
    /// The register after the last addition.
    register: i128,
    out: i128,
    acc_overflow: bool,
    out_overflow: bool,
    /// Some partial sum left the register's range while the exact total lies inside it.
    came_back: bool,
}

fn reference(
    s: Setup,
    a: &[i64],
    stride: usize,
    b: &[i64],
    bias: Option<i64>,
    bits: u8,
    policy: Overflow,
) -> Reference {
    let start = bias.map_or(0, |v| {
        i128::from(v) << (s.product_frac() - u32::from(s.bias_frac()))
    });
    let (mut acc, mut over) = register(start, bits, policy);
    let mut exact = start;
    for (i, &y) in b.iter().enumerate() {
        let p = i128::from(a[i * stride]) * i128::from(y);
        exact += p;
        let (v, o) = register(acc + p, bits, policy);
        acc = v;
        over |= o;
    }
    // One rounding into the output: nearest, ties to even, then saturation.
    let (rounded, out) = (s.round)(acc);
    Reference {
        register: acc,
        out,
        acc_overflow: over,
        out_overflow: rounded != out,
        came_back: over && register(exact, bits, policy).0 == exact,
    }
}

fn int(g: &mut Stream, lo: i64, hi: i64) -> i64 {
    lo + (g.next_u64() % ((hi - lo) as u64 + 1)) as i64
}

/// A value of magnitude below 2^bits (and inside a `word`-bit word), of the given sign
/// (0: either).
fn value(g: &mut Stream, word: u8, bits: u32, sign: i64) -> i64 {
    let m = int(g, 0, (1i64 << bits) - 1).min((1i64 << (word - 1)) - 1);
    let s = match sign {
        0 => {
            if g.next_u32() & 1 == 0 {
                1
            } else {
                -1
            }
        }
        s => s,
    };
    s * m
}

/// Runs `CASES` random dot products; returns (overflowing, overflowing on the way only).
fn check<W: Word>(s: Setup, bits: u8, policy: Overflow, seed: u64) -> (u64, u64) {
    let mut be = backend::<W>(s, bits, policy);
    // A twin in 32-bit containers writes the register itself (Class::Step) when it fits.
    let exact_register = s.word == 16 && bits <= 32;
    let mut twin = backend::<i32>(s, bits, policy);
    let mut g = Stream::new(seed, 1);
    let (mut acc_over, mut out_over, mut came_back) = (0u64, 0u64, 0u64);
    let top = u32::from(s.word) - 1;
    for case in 0..CASES {
        let n = int(&mut g, 1, 256) as usize;
        let stride = int(&mut g, 1, 3) as usize;
        let (ka, kb) = (
            int(&mut g, 2, i64::from(top)) as u32,
            int(&mut g, 2, i64::from(top)) as u32,
        );
        // Pattern: 0 random signs; 1 all products positive; 2 positive then negative
        // (partial sums rise and fall back); 3 negative then positive.
        let pattern = g.below(4);
        let a: Vec<i64> = (0..(n - 1) * stride + 1)
            .map(|_| value(&mut g, s.word, ka, if pattern == 0 { 0 } else { 1 }))
            .collect();
        let b: Vec<i64> = (0..n)
            .map(|i| {
                let first_half = i < n / 2;
                let sign = match (pattern, first_half) {
                    (0, _) => 0,
                    (1, _) | (2, true) | (3, false) => 1,
                    _ => -1,
                };
                value(&mut g, s.word, kb, sign)
            })
            .collect();
        let bias = match g.below(3) {
            0 => None,
            1 => Some(value(&mut g, s.word, 6, 0)),
            _ => Some(value(&mut g, s.word, top, 0)),
        };
        let want = reference(s, &a, stride, &b, bias, bits, policy);
        let (aw, bw): (Vec<W>, Vec<W>) = (
            a.iter().map(|&v| W::put(v)).collect(),
            b.iter().map(|&v| W::put(v)).collect(),
        );
        let before = be.counters().class_saturations(Class::Acc);
        let got = be.dot(
            Tag::global(Class::Act),
            Tag::global(Class::Act),
            &aw,
            stride,
            Tag::global(Class::Forward),
            &bw,
            bias.map(|v| (Tag::global(Class::Bias), W::put(v))),
        );
        let counted = be.counters().class_saturations(Class::Acc) - before;
        let tag = format!("{}-bit words, {bits}-bit {policy:?}, case {case}", s.word);
        assert_eq!(
            i128::from(got.get()),
            want.out,
            "{tag}: n {n}, stride {stride}, bias {bias:?}"
        );
        assert_eq!(
            counted,
            u64::from(want.acc_overflow),
            "{tag}: accumulator overflow events"
        );
        if exact_register {
            let (a32, b32): (Vec<i32>, Vec<i32>) = (
                a.iter().map(|&v| v as i32).collect(),
                b.iter().map(|&v| v as i32).collect(),
            );
            let before = twin.counters().class_saturations(Class::Acc);
            let reg = twin.dot(
                Tag::global(Class::Step),
                Tag::global(Class::Act),
                &a32,
                stride,
                Tag::global(Class::Forward),
                &b32,
                bias.map(|v| (Tag::global(Class::Bias), v as i32)),
            );
            assert_eq!(i128::from(reg), want.register, "{tag}: the register");
            let counted = twin.counters().class_saturations(Class::Acc) - before;
            assert_eq!(
                counted,
                u64::from(want.acc_overflow),
                "{tag}: twin's events"
            );
        }
        acc_over += u64::from(want.acc_overflow);
        out_over += u64::from(want.out_overflow);
        came_back += u64::from(want.came_back);
    }
    assert_eq!(be.counters().class_saturations(Class::Acc), acc_over);
    assert_eq!(be.counters().class_saturations(Class::Act), out_over);
    // The cases cover quiet sums as well as overflowing ones.
    assert!(
        acc_over > 100 && acc_over < CASES as u64 - 100,
        "{acc_over} overflowing"
    );
    (acc_over, came_back)
}

#[test]
fn acc24_saturating() {
    let (_, came_back) = check::<i16>(W16, 24, Overflow::Saturate, 24);
    assert!(
        came_back > 10,
        "{came_back} sums overflowed on the way only"
    );
}

#[test]
fn acc24_wrapping() {
    let (_, came_back) = check::<i16>(W16, 24, Overflow::Wrap, 25);
    assert!(
        came_back > 10,
        "{came_back} sums overflowed on the way only"
    );
}

#[test]
fn acc32_saturating() {
    let (_, came_back) = check::<i16>(W16, 32, Overflow::Saturate, 32);
    assert!(
        came_back > 10,
        "{came_back} sums overflowed on the way only"
    );
}

#[test]
fn acc32_wrapping() {
    let (_, came_back) = check::<i16>(W16, 32, Overflow::Wrap, 33);
    assert!(
        came_back > 10,
        "{came_back} sums overflowed on the way only"
    );
}

/// 32-bit operands: products of up to 62 bits, into registers narrower than a product
/// (40, 48 bits), as wide as one (63 bits) and of a full 64 bits.
#[test]
fn wide_operands() {
    for (bits, seed) in [(40u8, 40u64), (48, 48), (63, 63), (64, 64)] {
        for policy in [Overflow::Saturate, Overflow::Wrap] {
            check::<i32>(
                W32,
                bits,
                policy,
                seed + 100 * u64::from(policy == Overflow::Wrap),
            );
        }
    }
}

/// Sums that cannot overflow a 40-bit register match the exact sum, whatever the order:
/// 256 products of Q0.15 x Q3.12 words stay below 2^38.
#[test]
fn acc40_never_overflows_for_256_terms() {
    let mut be = backend::<i16>(W16, 40, Overflow::Saturate);
    let mut g = Stream::new(40, 1);
    for _ in 0..500 {
        let a: Vec<i64> = (0..256).map(|_| value(&mut g, 16, 15, 0)).collect();
        let b: Vec<i64> = (0..256).map(|_| value(&mut g, 16, 15, 0)).collect();
        let want = reference(W16, &a, 1, &b, None, 40, Overflow::Saturate);
        assert!(!want.acc_overflow);
        let (aw, bw): (Vec<i16>, Vec<i16>) = (
            a.iter().map(|&v| v as i16).collect(),
            b.iter().map(|&v| v as i16).collect(),
        );
        let got = be.dot(
            Tag::global(Class::Act),
            Tag::global(Class::Act),
            &aw,
            1,
            Tag::global(Class::Forward),
            &bw,
            None,
        );
        assert_eq!(i128::from(got), want.out);
    }
    assert_eq!(be.counters().class_saturations(Class::Acc), 0);
}
