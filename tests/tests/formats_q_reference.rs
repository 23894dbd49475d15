//! Published Q-format values and the fixed-point types of ISO/IEC TR 18037.
//!
//! Sources (numbered as in docs/references.md):
//! * [10] "TMS320C64x DSP Library Programmer's Reference", Texas Instruments, 2003 (document
//!   number and year recalled from memory), Appendix A.2 (Q.15 and Q3.12), and [11] the
//!   libq chapter of Microchip's "16-bit Language Tools Libraries Reference Manual" (title
//!   recalled from memory), §5.1.2: in Qm.n the sign is not counted in m;
//! * the saturating q15 multiply of [11]'s `Q15_MULTIPLY_SAT`: widen, multiply, arithmetic
//!   shift right by 15 (a floor), saturate;
//! * [9] ISO/IEC TR 18037:2008, "Programming languages - C - Extensions to support embedded
//!   processors", clause 7.18a.3 (minimum bit counts) and Annex A.3 (typical desktop layout);
//!   [13] "MPLAB XC32 C/C++ Compiler User's Guide", Microchip, "Data Types" (the common
//!   compiler layout); [12] "MPLAB XC16 C Compiler User's Guide", Microchip, §9.4 (16-bit
//!   Q15 `_Fract`). The Microchip manuals' years are not recorded.

use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig};
use tidewise_core::class::{Class, Tag};
use tidewise_core::format::{Format, FormatError, Overflow, TR18037_PRESETS};
use tidewise_core::rng::Stream;
use tidewise_core::round::{from_f32, requantize, Rounding};

fn q15() -> Format {
    Format::parse("Q15").unwrap_or_else(|e| panic!("{e}"))
}

fn q15_backend(rounding: Rounding) -> Fixed<i16> {
    let cfg = FixedConfig {
        layers: Default::default(),
        classes: [ClassSpec {
            format: q15(),
            rounding,
        }; 8],
        acc_bits: 32,
        acc_overflow: Overflow::Saturate,
    };
    Fixed::<i16>::new(cfg, 5).unwrap_or_else(|e| panic!("{e}"))
}

/// The saturating q15 multiply (Microchip's `Q15_MULTIPLY_SAT`, docs/references.md [11];
/// worked values derived and computed with the published formula).
#[test]
fn q15_saturating_multiply_table() {
    let table: [(i16, i16, i16); 7] = [
        (0x4000, 0x4000, 0x2000),
        (-16384, 16384, -8192),
        (i16::MIN, i16::MIN, 0x7FFF), // 32768 does not fit: saturates
        (32767, 32767, 32766),
        (20000, 20000, 12207),
        (1, 1, 0),
        (-1, 1, -1), // floor; truncation toward zero would give 0
    ];
    let mut be = q15_backend(Rounding::Floor);
    let mut rng = Stream::new(3, 0);
    for (a, b, want) in table {
        assert_eq!(
            be.mul(
                Tag::global(Class::Act),
                Tag::global(Class::Act),
                a,
                Tag::global(Class::Act),
                b
            ),
            want,
            "{a} * {b}"
        );
        let p = i128::from(a) * i128::from(b);
        let r = requantize(p, 30, q15(), Rounding::Floor, &mut rng);
        assert_eq!(r.raw, i64::from(want), "requantize {a} * {b}");
        assert_eq!(r.overflowed, a == i16::MIN && b == i16::MIN);
        // The `fixed` crate's I1F15::saturating_mul is the same operation (its documentation).
        let f = fixed::types::I1F15::from_bits(a).saturating_mul(fixed::types::I1F15::from_bits(b));
        assert_eq!(f.to_bits(), want);
    }
    // Only -1 x -1 saturated.
    assert_eq!(be.counters().class_saturations(Class::Act), 1);
}

/// The rounding-mode probe: with b = 0x4000 the exact product is a/2 LSB (values derived by
/// hand from the modes' definitions; a fact of the trade).
#[test]
fn rounding_mode_probe() {
    // (a, floor, ties-to-even); half-up and toward-zero are not modes of ours.
    let table = [
        (1, 0, 0),
        (3, 1, 2),
        (5, 2, 2),
        (-1, -1, 0),
        (-3, -2, -2),
        (-5, -3, -2),
    ];
    let mut floor = q15_backend(Rounding::Floor);
    let mut even = q15_backend(Rounding::NearestEven);
    let mut stoch = q15_backend(Rounding::Stochastic);
    for (a, f, e) in table {
        assert_eq!(
            floor.mul(
                Tag::global(Class::Act),
                Tag::global(Class::Act),
                a,
                Tag::global(Class::Act),
                0x4000
            ),
            f
        );
        assert_eq!(
            even.mul(
                Tag::global(Class::Act),
                Tag::global(Class::Act),
                a,
                Tag::global(Class::Act),
                0x4000
            ),
            e
        );
        // Stochastic rounding of an exact half lands on either neighbour, both of them seen.
        let mut seen = [false; 2];
        for _ in 0..200 {
            let s = stoch.mul(
                Tag::global(Class::Act),
                Tag::global(Class::Act),
                a,
                Tag::global(Class::Act),
                0x4000,
            );
            assert!(s == f || s == f + 1, "{a}/2 rounded to {s}");
            seen[usize::from(s == f + 1)] = true;
        }
        assert_eq!(seen, [true, true], "{a}/2");
    }
}

/// Float to Q15: 0.5 -> 0x4000, -1.0 -> 0x8000, +1.0 saturates to 0x7FFF, 0.1 -> 3277
/// (derived by hand from Q15's scale 2^15, docs/references.md [10]).
#[test]
fn float_to_q15() {
    let mut rng = Stream::new(4, 0);
    let cases = [
        (0.5f32, 0x4000, false),
        (-1.0, -32768, false),
        (1.0, 0x7FFF, true),
        (0.1, 3277, false),
    ];
    for (x, want, over) in cases {
        let r = from_f32(x, q15(), Rounding::NearestEven, &mut rng);
        assert_eq!((r.raw, r.overflowed), (want, over), "{x}");
    }
    let mut be = q15_backend(Rounding::NearestEven);
    assert_eq!(be.encode(Tag::global(Class::Act), 1.0), 0x7FFF);
    assert_eq!(be.counters().class_saturations(Class::Act), 1);
}

/// Ranges and resolutions of Q7, Q15 and Q31 (m excludes the sign: docs/references.md [10], [11]).
#[test]
fn q7_q15_q31_ranges() {
    let rows: [(&str, u8, f64, f64, f64, i64, i64); 3] = [
        ("Q7", 8, -1.0, 0.9921875, 0.0078125, -128, 127),
        (
            "Q15",
            16,
            -1.0,
            0.999969482421875,
            3.0517578125e-5,
            -32768,
            32767,
        ),
        (
            "Q31",
            32,
            -1.0,
            0.9999999995343387,
            4.656612873077393e-10,
            -(1 << 31),
            (1 << 31) - 1,
        ),
    ];
    for (name, bits, min, max, lsb, raw_min, raw_max) in rows {
        let f = Format::parse(name).unwrap_or_else(|e| panic!("{name}: {e}"));
        assert_eq!(f.word(), bits, "{name}");
        assert_eq!(f.int_bits(), 0, "{name}");
        assert_eq!((f.raw_min(), f.raw_max()), (raw_min, raw_max), "{name}");
        assert_eq!(f.min_value(), min, "{name}");
        // The table prints 16 significant digits; the format's values are exact.
        assert!(
            (f.max_value() - max).abs() <= 1e-16,
            "{name} max {}",
            f.max_value()
        );
        assert!(
            (f.lsb() - lsb).abs() <= lsb * 1e-15,
            "{name} lsb {}",
            f.lsb()
        );
        assert_eq!(Format::q(0, i32::from(bits) - 1), Ok(f));
    }
    // TI DSPLIB A.2 (docs/references.md [10]): Q.15 resolution 3.05e-5.
    assert!((q15().lsb() - 3.05e-5).abs() < 5e-8);
}

/// TI's Q3.12: a 16-bit word, range about (-8, 8), resolution 2.441e-4 (TI DSPLIB A.2).
#[test]
fn ti_q3_12() {
    let f = Format::parse("Q3.12").unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((f.word(), f.frac(), f.int_bits()), (16, 12, 3));
    assert_eq!(f.min_value(), -8.0);
    assert_eq!(f.max_value(), 8.0 - f.lsb());
    assert!((f.lsb() - 2.441e-4).abs() < 5e-8, "lsb {}", f.lsb());
    assert_eq!(Format::parse("Q3.12:sat"), Ok(f));
}

/// Minimum fraction bits per size for `_Fract` and `_Accum`, TR 18037 clause 7.18a.3
/// (docs/references.md [9]).
fn min_fbit(name: &str) -> u8 {
    if name.starts_with("short_") {
        7
    } else if name.starts_with("long_") {
        23
    } else {
        15
    }
}

/// Every preset meets the clause 7.18a.3 minimums: FBIT >= 7/15/23 (short/plain/long),
/// `_Fract` has no integer bits (range [-1, 1)), `_Accum` has IBIT >= 4.
#[test]
fn tr18037_presets_meet_the_minimums() {
    assert_eq!(TR18037_PRESETS.len(), 6);
    for (name, word, frac) in TR18037_PRESETS {
        let f = Format::preset(name).unwrap_or_else(|| panic!("preset {name}"));
        assert_eq!((f.word(), f.frac()), (word, frac), "{name}");
        assert_eq!(Format::parse(name), Ok(f), "{name} parses");
        assert_eq!(f.overflow(), Overflow::Saturate, "{name}");
        assert!(f.frac() >= min_fbit(name), "{name}: FBIT {}", f.frac());
        if name.ends_with("fract") {
            assert_eq!(f.int_bits(), 0, "{name}: a _Fract lies in [-1, 1)");
        } else {
            assert!(name.ends_with("accum"), "{name}");
            assert!(f.int_bits() >= 4, "{name}: IBIT {} < 4", f.int_bits());
        }
    }
}

/// The common compiler layout (GCC avr, Microchip XC32 "Data Types": docs/references.md [13],
/// [14]; Annex A.3 agrees for short _Fract s.7, from LLVM libc's stdfix macros): s0.7, s0.15, s0.31, s8.7, s16.15.
/// long _Accum s32.31 needs 64 bits, beyond the 32-bit word limit, so it is not compared.
#[test]
fn tr18037_presets_follow_the_common_layout() {
    let layout = [
        ("short_fract", 0, 7),
        ("fract", 0, 15),
        ("long_fract", 0, 31),
        ("short_accum", 8, 7),
        ("accum", 16, 15),
    ];
    for (name, ibit, fbit) in layout {
        let f = Format::preset(name).unwrap_or_else(|| panic!("preset {name}"));
        assert_eq!((f.int_bits(), i32::from(f.frac())), (ibit, fbit), "{name}");
    }
    // Ranges derived from the layout (two's complement, a fact of the trade): s0.15 is [-1, 1-2^-15]; s16.15 is [-65536, 65536-2^-15].
    let fract = Format::preset("fract").unwrap_or_else(|| panic!("fract"));
    assert_eq!(
        (fract.min_value(), fract.max_value()),
        (-1.0, 1.0 - 2f64.powi(-15))
    );
    let accum = Format::preset("accum").unwrap_or_else(|| panic!("accum"));
    assert_eq!(
        (accum.min_value(), accum.max_value()),
        (-65536.0, 65536.0 - 2f64.powi(-15))
    );
    // XC16 User's Guide §9.4 (docs/references.md [12]): a 16-bit Q15 _Fract, range [-1, 1-2^-15].
    assert_eq!(fract, q15());
    // Annex A.3 short _Fract epsilon 2^-7.
    let sf = Format::preset("short_fract").unwrap_or_else(|| panic!("short_fract"));
    assert_eq!(sf.lsb(), 2f64.powi(-7));
    assert_eq!(Format::preset("long long fract"), None);
}

fn message(e: FormatError) -> String {
    e.to_string()
}

/// Bad notation is an error that names the offending count and the allowed range.
#[test]
fn bad_notation() {
    // Q40.3 asks for 40 + 3 + 1 = 44 bits.
    let e = Format::parse("Q40.3");
    assert_eq!(e, Err(FormatError::Word(44)));
    let m = message(FormatError::Word(44));
    assert!(
        m.contains("44") && m.contains("2") && m.contains("32"),
        "{m}"
    );

    let e = Format::parse("Q3.-1");
    assert_eq!(e, Err(FormatError::Frac(-1)));
    let m = message(FormatError::Frac(-1));
    assert!(m.contains("-1") && m.contains("40"), "{m}");

    // A 1-bit word (the sign alone).
    for text in ["Q0.0", "Q-1.1", "Q-5.5"] {
        assert_eq!(Format::parse(text), Err(FormatError::Word(1)), "{text}");
    }
    assert!(message(FormatError::Word(1)).contains("word length 1 bits"));
    assert_eq!(Format::new(1, 0), Err(FormatError::Word(1)));
    assert_eq!(Format::new(33, 0), Err(FormatError::Word(33)));
    assert_eq!(Format::new(16, 41), Err(FormatError::Frac(41)));
    assert_eq!(Format::parse("Q-25.41"), Err(FormatError::Frac(41)));

    // Garbage: a syntax error that says what is allowed.
    for text in [
        "", "hello", "Q", "Q3.", "Q.5", "Q3.1x", "s16", "16f8", "s16f12", "Q3..12", "Q+3.12",
    ] {
        assert_eq!(Format::parse(text), Err(FormatError::Syntax), "{text:?}");
    }
    let m = message(FormatError::Syntax);
    assert!(
        m.contains("Q3.12") && m.contains("short_fract") && m.contains("wrap"),
        "{m}"
    );
    assert!(!m.contains("s16f12"), "{m}");
    assert_eq!(Format::parse("Q3.12:clip"), Err(FormatError::Overflow));
    assert!(message(FormatError::Overflow).contains("wrap"));
    assert_eq!(
        Format::parse("Q3.12:wrap").map(|f| f.overflow()),
        Ok(Overflow::Wrap)
    );
}
