//! Bit-exact agreement of the fixed-point arithmetic with the `fixed` crate (crates.io, a
//! general-purpose fixed-point library; v1.31 behaviour as its documentation states it).
//!
//! What the `fixed` crate does, and which of our modes each operation therefore checks:
//! * `from_num(f32)` rounds to nearest, ties to even: our `from_f32` with `NearestEven`
//!   (`saturating_from_num` for `Saturate`, `wrapping_from_num` for `Wrap`);
//! * fixed-to-fixed narrowing drops the extra bits, which rounds toward minus infinity: our
//!   `requantize` and `from_f32` with `Floor`;
//! * `*` forms the exact double-width product and shifts arithmetically, so it floors:
//!   our `Backend::mul` with `Floor` (`saturating_mul` / `wrapping_mul`);
//! * `round_ties_even` rounds to an integer, ties to even: applied to the exact product or
//!   the wide value read in units of the destination's LSB, it is our `NearestEven`;
//! * `saturating_add` / `wrapping_add` / `_sub`, and `to_num::<f32>()` (round to nearest).
//!
//! Stochastic rounding has no counterpart in the crate; `formats_stochastic.rs` checks it.
//! Every case comes from a seeded generator, and a failure prints the operands, so it
//! reproduces.

use fixed::types::extra::{U100, U12, U64};
use fixed::{FixedI128, FixedI64};
use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig, Word};
use tidewise_core::class::{Class, Tag};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::rng::Stream;
use tidewise_core::round::{from_f32, requantize, to_f32, Rounding};

/// Random cases per operation and format.
const CASES: usize = 4000;

/// Seeded inputs (the project's xorshift stream; any uniform source would do).
struct Gen(Stream);

impl Gen {
    fn new(seed: u64) -> Gen {
        Gen(Stream::new(seed, 0x7e57))
    }
    /// Uniform in `lo..=hi`.
    fn int(&mut self, lo: i64, hi: i64) -> i64 {
        let span = (hi - lo) as u64 + 1;
        lo + (self.0.next_u64() % span) as i64
    }
    /// A raw word: mostly in range, sometimes the extremes.
    fn raw(&mut self, f: Format) -> i64 {
        match self.0.below(16) {
            0 => f.raw_min(),
            1 => f.raw_max(),
            2 => self.int(-2, 2),
            _ => self.int(f.raw_min(), f.raw_max()),
        }
    }
    /// A real for conversion into `f`: in range, beyond it (up to 4x), exact ties,
    /// tiny values and arbitrary finite bit patterns.
    fn real(&mut self, f: Format) -> f32 {
        let lsb = f.lsb();
        match self.0.below(10) {
            0 => {
                // An exact tie between two neighbours (exact while 2k+1 < 2^24).
                let k = self.int(f.raw_min().max(-(1 << 22)), f.raw_max().min(1 << 22));
                ((k as f64 + 0.5) * lsb) as f32
            }
            1 => loop {
                let x = f32::from_bits(self.0.next_u32());
                if x.is_finite() {
                    break x;
                }
            },
            2 => (self.int(-1000, 1000) as f64 * lsb * 1e-3) as f32,
            3 | 4 => {
                let k = self.int(4 * f.raw_min(), 4 * f.raw_max());
                let sub = self.int(0, 1 << 20) as f64 / f64::from(1u32 << 20);
                ((k as f64 + sub) * lsb) as f32
            }
            _ => {
                let k = self.int(f.raw_min(), f.raw_max());
                let sub = self.int(0, 1 << 20) as f64 / f64::from(1u32 << 20);
                ((k as f64 + sub) * lsb) as f32
            }
        }
    }
}

fn spec(format: Format, rounding: Rounding) -> ClassSpec {
    ClassSpec { format, rounding }
}

/// A fixed back end whose every class has `format` and `rounding`.
fn backend<W: Word>(format: Format, rounding: Rounding) -> Fixed<W> {
    let cfg = FixedConfig {
        layers: Default::default(),
        classes: [spec(format, rounding); 8],
        acc_bits: 64,
        acc_overflow: Overflow::Saturate,
    };
    match Fixed::<W>::new(cfg, 1) {
        Ok(be) => be,
        Err(e) => panic!("config for {format}: {e}"),
    }
}

/// One module of checks per `fixed` type: `$T` with raw `$R`, and `$Frac` its fraction.
macro_rules! agree {
    ($name:ident, $T:ty, $R:ty, $word:expr, $frac:expr, $Frac:ty) => {
        mod $name {
            use super::*;

            type T = $T;
            type Frac = $Frac;

            fn fmt(o: Overflow) -> Format {
                match Format::new($word, $frac) {
                    Ok(f) => f.overflowing(o),
                    Err(e) => panic!("{e}"),
                }
            }

            fn seed() -> u64 {
                (($word as u64) << 8) | $frac as u64
            }

            #[test]
            fn layout_matches() {
                let f = fmt(Overflow::Saturate);
                assert_eq!(f.raw_min(), i64::from(T::MIN.to_bits()));
                assert_eq!(f.raw_max(), i64::from(T::MAX.to_bits()));
                assert_eq!(f.lsb(), T::DELTA.to_num::<f64>());
                assert_eq!(f.min_value(), T::MIN.to_num::<f64>());
                assert_eq!(f.max_value(), T::MAX.to_num::<f64>());
            }

            /// `from_num(f32)`: nearest, ties to even, saturating or wrapping.
            #[test]
            fn from_f32_nearest_even() {
                let mut g = Gen::new(seed());
                let mut rng = Stream::new(0, 0);
                let (sat, wrap) = (fmt(Overflow::Saturate), fmt(Overflow::Wrap));
                for _ in 0..CASES {
                    let x = g.real(sat);
                    let ours = from_f32(x, sat, Rounding::NearestEven, &mut rng);
                    let (w, over) = T::overflowing_from_num(x);
                    assert_eq!(
                        ours.raw,
                        i64::from(T::saturating_from_num(x).to_bits()),
                        "sat {x:e}"
                    );
                    assert_eq!(ours.overflowed, over, "overflow flag {x:e}");
                    let ours = from_f32(x, wrap, Rounding::NearestEven, &mut rng);
                    assert_eq!(ours.raw, i64::from(w.to_bits()), "wrap {x:e}");
                    assert_eq!(ours.raw, i64::from(T::wrapping_from_num(x).to_bits()));
                    assert_eq!(ours.overflowed, over, "overflow flag {x:e}");
                }
            }

            /// Floor from `f32`: widen exactly to I28F100, then narrow with `fixed` (drops bits).
            #[test]
            fn from_f32_floor() {
                let mut g = Gen::new(seed() + 1);
                let mut rng = Stream::new(0, 0);
                let (sat, wrap) = (fmt(Overflow::Saturate), fmt(Overflow::Wrap));
                let mut n = 0;
                while n < CASES {
                    let x = g.real(sat);
                    // The exact widening needs |x| < 2^27 and no bits below 2^-100.
                    if !(x.abs() < 1.0e8 && (x == 0.0 || x.abs() > 1.0e-23)) {
                        continue;
                    }
                    n += 1;
                    let wide = FixedI128::<U100>::from_num(x);
                    assert_eq!(wide.to_num::<f32>(), x, "widening of {x:e} is exact");
                    let ours = from_f32(x, sat, Rounding::Floor, &mut rng);
                    assert_eq!(
                        ours.raw,
                        i64::from(T::saturating_from_num(wide).to_bits()),
                        "sat {x:e}"
                    );
                    let ours = from_f32(x, wrap, Rounding::Floor, &mut rng);
                    assert_eq!(
                        ours.raw,
                        i64::from(T::wrapping_from_num(wide).to_bits()),
                        "wrap {x:e}"
                    );
                }
            }

            /// The encode edge of the back end is the same conversion (and counts overflow).
            #[test]
            fn backend_encode() {
                let mut g = Gen::new(seed() + 2);
                for o in [Overflow::Saturate, Overflow::Wrap] {
                    let mut be = backend::<$R>(fmt(o), Rounding::NearestEven);
                    let mut overflows = 0;
                    for _ in 0..CASES {
                        let x = g.real(fmt(o));
                        let (w, over) = T::overflowing_from_num(x);
                        let want = match o {
                            Overflow::Saturate => T::saturating_from_num(x),
                            Overflow::Wrap => w,
                        };
                        overflows += u64::from(over);
                        assert_eq!(
                            be.encode(Tag::global(Class::Act), x),
                            want.to_bits(),
                            "{o:?} {x:e}"
                        );
                    }
                    assert_eq!(be.counters().class_saturations(Class::Act), overflows);
                    assert!(overflows > 0, "the cases include overflowing ones");
                }
            }

            /// `to_num::<f32>()`: the nearest `f32` to the raw word's value.
            #[test]
            fn to_f32_nearest() {
                let mut g = Gen::new(seed() + 3);
                let f = fmt(Overflow::Saturate);
                for _ in 0..CASES {
                    let r = g.raw(f);
                    let want = T::from_bits(r as $R).to_num::<f32>();
                    assert_eq!(to_f32(r, f).to_bits(), want.to_bits(), "raw {r}");
                }
            }

            /// `*` floors the exact product: `saturating_mul`, `wrapping_mul`, `overflowing_mul`.
            #[test]
            fn mul_floor() {
                let mut g = Gen::new(seed() + 4);
                for o in [Overflow::Saturate, Overflow::Wrap] {
                    let mut be = backend::<$R>(fmt(o), Rounding::Floor);
                    let mut overflows = 0;
                    for _ in 0..CASES {
                        let (a, b) = (g.raw(fmt(o)) as $R, g.raw(fmt(o)) as $R);
                        let (x, y) = (T::from_bits(a), T::from_bits(b));
                        let (w, over) = x.overflowing_mul(y);
                        let want = match o {
                            Overflow::Saturate => x.saturating_mul(y),
                            Overflow::Wrap => x.wrapping_mul(y),
                        };
                        assert_eq!(w, x.wrapping_mul(y));
                        overflows += u64::from(over);
                        let got = be.mul(
                            Tag::global(Class::Act),
                            Tag::global(Class::Act),
                            a,
                            Tag::global(Class::Act),
                            b,
                        );
                        assert_eq!(got, want.to_bits(), "{o:?} {a} * {b}");
                    }
                    assert_eq!(be.counters().class_saturations(Class::Act), overflows);
                }
            }

            /// Nearest-even products: `round_ties_even` of the exact product in LSB units.
            #[test]
            fn mul_nearest_even() {
                let mut g = Gen::new(seed() + 5);
                for o in [Overflow::Saturate, Overflow::Wrap] {
                    let mut be = backend::<$R>(fmt(o), Rounding::NearestEven);
                    for _ in 0..CASES {
                        let (a, b) = (g.raw(fmt(o)) as $R, g.raw(fmt(o)) as $R);
                        // The exact product has 2·frac fraction bits; read with `frac` of them,
                        // its value is the product in units of the destination's LSB.
                        let p = i128::from(a) * i128::from(b);
                        let k = FixedI128::<Frac>::from_bits(p).round_ties_even();
                        let k = FixedI128::<Frac>::from_bits(k.to_num::<i128>());
                        let want = match o {
                            Overflow::Saturate => T::saturating_from_num(k),
                            Overflow::Wrap => T::wrapping_from_num(k),
                        };
                        let got = be.mul(
                            Tag::global(Class::Act),
                            Tag::global(Class::Act),
                            a,
                            Tag::global(Class::Act),
                            b,
                        );
                        assert_eq!(got, want.to_bits(), "{o:?} {a} * {b}");
                    }
                }
            }

            /// Addition and subtraction, saturating and wrapping, with the overflow counter.
            #[test]
            fn add_sub() {
                let mut g = Gen::new(seed() + 6);
                for o in [Overflow::Saturate, Overflow::Wrap] {
                    for rounding in [Rounding::NearestEven, Rounding::Floor, Rounding::Stochastic] {
                        let mut be = backend::<$R>(fmt(o), rounding);
                        let mut overflows = 0;
                        for _ in 0..CASES {
                            let (a, b) = (g.raw(fmt(o)) as $R, g.raw(fmt(o)) as $R);
                            let (x, y) = (T::from_bits(a), T::from_bits(b));
                            let (sum, diff) = match o {
                                Overflow::Saturate => (x.saturating_add(y), x.saturating_sub(y)),
                                Overflow::Wrap => (x.wrapping_add(y), x.wrapping_sub(y)),
                            };
                            overflows += u64::from(x.overflowing_add(y).1);
                            overflows += u64::from(x.overflowing_sub(y).1);
                            let got = be.add(
                                Tag::global(Class::Act),
                                Tag::global(Class::Act),
                                a,
                                Tag::global(Class::Act),
                                b,
                            );
                            assert_eq!(got, sum.to_bits(), "{o:?} {a} + {b}");
                            let got = be.sub(
                                Tag::global(Class::Act),
                                Tag::global(Class::Act),
                                a,
                                Tag::global(Class::Act),
                                b,
                            );
                            assert_eq!(got, diff.to_bits(), "{o:?} {a} - {b}");
                        }
                        assert_eq!(be.counters().class_saturations(Class::Act), overflows);
                    }
                }
            }

            /// Narrowing from 12 more fraction bits: floor (`fixed`'s narrowing drops bits) and
            /// nearest-even (`round_ties_even` in units of the destination's LSB).
            #[test]
            fn narrowing() {
                let mut g = Gen::new(seed() + 7);
                let mut rng = Stream::new(0, 0);
                let src_frac = $frac + 12;
                for o in [Overflow::Saturate, Overflow::Wrap] {
                    let f = fmt(o);
                    for _ in 0..CASES {
                        let r = g.int(4 * f.raw_min() << 12, 4 * f.raw_max() << 12);
                        // The same value with 64 fraction bits (`fixed` needs the count in the type).
                        let wide = FixedI128::<U64>::from_bits(i128::from(r) << (52 - $frac));
                        let (floor, even) = match o {
                            Overflow::Saturate => (T::saturating_from_num(wide), {
                                let k = FixedI64::<U12>::from_bits(r).round_ties_even();
                                T::saturating_from_num(FixedI128::<Frac>::from_bits(
                                    k.to_num::<i128>(),
                                ))
                            }),
                            Overflow::Wrap => (T::wrapping_from_num(wide), {
                                let k = FixedI64::<U12>::from_bits(r).round_ties_even();
                                T::wrapping_from_num(FixedI128::<Frac>::from_bits(
                                    k.to_num::<i128>(),
                                ))
                            }),
                        };
                        let got = requantize(i128::from(r), src_frac, f, Rounding::Floor, &mut rng);
                        assert_eq!(got.raw, i64::from(floor.to_bits()), "floor {o:?} {r}");
                        let got =
                            requantize(i128::from(r), src_frac, f, Rounding::NearestEven, &mut rng);
                        assert_eq!(got.raw, i64::from(even.to_bits()), "nearest {o:?} {r}");
                    }
                }
            }
        }
    };
}

use fixed::types::extra::{U15, U16, U24, U31, U4, U7, U8};
agree!(i8f8, fixed::types::I8F8, i16, 16, 8, U8);
agree!(i4f12, fixed::types::I4F12, i16, 16, 12, U12);
agree!(i1f15, fixed::types::I1F15, i16, 16, 15, U15);
agree!(i16f16, fixed::types::I16F16, i32, 32, 16, U16);
agree!(i0f16, fixed::types::I0F16, i16, 16, 16, U16);
agree!(i4f4, fixed::types::I4F4, i8, 8, 4, U4);
agree!(i1f7, fixed::types::I1F7, i8, 8, 7, U7);
agree!(i8f24, fixed::types::I8F24, i32, 32, 24, U24);
agree!(i1f31, fixed::types::I1F31, i32, 32, 31, U31);

/// The crate's own documented probes (its documentation, confirmed by running v1.31 locally).
#[test]
fn documented_probes() {
    use fixed::types::{I16F0, I16F16, I1F15, I8F8};
    let mut rng = Stream::new(0, 0);
    let word16 = Format::new(16, 0).unwrap_or_else(|e| panic!("{e}"));
    for (x, want) in [
        (0.5f32, 0),
        (1.5, 2),
        (2.5, 2),
        (-0.5, 0),
        (-1.5, -2),
        (-2.5, -2),
    ] {
        assert_eq!(i64::from(I16F0::from_num(x).to_bits()), want);
        assert_eq!(
            from_f32(x, word16, Rounding::NearestEven, &mut rng).raw,
            want,
            "{x}"
        );
    }
    let i8f8 = Format::new(16, 8).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(I8F8::wrapping_from_num(300.0f32).to_num::<f32>(), 44.0);
    let w = from_f32(
        300.0,
        i8f8.overflowing(Overflow::Wrap),
        Rounding::NearestEven,
        &mut rng,
    );
    assert_eq!(to_f32(w.raw, i8f8), 44.0);
    let s = from_f32(300.0, i8f8, Rounding::NearestEven, &mut rng);
    assert_eq!(to_f32(s.raw, i8f8), 32767.0 / 256.0); // 127.99609375
    let i16f16 = Format::new(32, 16).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(I16F16::from_num(0.1f32).to_bits(), 6554);
    assert_eq!(
        from_f32(0.1, i16f16, Rounding::NearestEven, &mut rng).raw,
        6554
    );
    // I1F15 MIN x MIN: saturating 0.999969482421875, wrapping -1.
    let q15 = Format::new(16, 15).unwrap_or_else(|e| panic!("{e}"));
    let mut be = backend::<i16>(q15, Rounding::Floor);
    assert_eq!(I1F15::MIN.saturating_mul(I1F15::MIN), I1F15::MAX);
    assert_eq!(
        be.mul(
            Tag::global(Class::Act),
            Tag::global(Class::Act),
            i16::MIN,
            Tag::global(Class::Act),
            i16::MIN
        ),
        i16::MAX
    );
    let mut be = backend::<i16>(q15.overflowing(Overflow::Wrap), Rounding::Floor);
    assert_eq!(I1F15::MIN.wrapping_mul(I1F15::MIN), I1F15::MIN);
    assert_eq!(
        be.mul(
            Tag::global(Class::Act),
            Tag::global(Class::Act),
            i16::MIN,
            Tag::global(Class::Act),
            i16::MIN
        ),
        i16::MIN
    );
}
