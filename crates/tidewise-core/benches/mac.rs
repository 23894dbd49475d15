//! Multiply-accumulate throughput of `Backend::dot` over 1024-element dot products:
//! fixed point in 8-, 16- and 32-bit words (i8/i16/i32 containers) into a 32-bit and a
//! 40-bit saturating accumulator, against the `f32` back end in the same run.
//!
//! Run with `cargo bench -p tidewise-core --bench mac`. Each row times the fixed and the
//! `f32` loop in alternation, `ROUNDS` times, and keeps the best of each (a shared machine
//! only ever slows a round down), then prints MAC/s and the ratio fixed/f32.
//!
//! Inputs are seeded reals, uniform over [-1, 1) ("full scale") or [-1/16, 1/16) ("small"),
//! encoded into each format. Full-scale 16-bit products overflow a 32-bit register within a
//! few dozen terms, so that row measures the order-exact saturating path; 32-bit products
//! (up to 62 bits) do not fit a 32- or 40-bit register at all, which takes the general path.

use std::hint::black_box;
use std::time::Instant;

use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig, Float, Word};
use tidewise_core::class::{Class, Tag};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::rng::Stream;
use tidewise_core::round::Rounding;

/// Terms per dot product.
const N: usize = 1024;
/// Weight rows cycled through (16 to 64 KiB of weights: cache-resident).
const ROWS: usize = 16;
/// Dot products per timed round.
const DOTS: usize = 512;
/// Timed rounds per row; the best is kept.
const ROUNDS: usize = 25;

/// Seeded reals uniform in [-scale, scale).
fn reals(seed: u64, len: usize, scale: f32) -> Vec<f32> {
    let mut g = Stream::new(seed, 0);
    (0..len)
        .map(|_| (g.next_u32() as f32 / 4_294_967_296.0 * 2.0 - 1.0) * scale)
        .collect()
}

/// Seconds for `DOTS` dot products of `a` with the rows of `w`.
fn round<B: Backend>(be: &mut B, a: &[B::S], w: &[B::S]) -> f64 {
    let t = Instant::now();
    for i in 0..DOTS {
        let row = &w[(i % ROWS) * N..][..N];
        let y = be.dot(
            Tag::global(Class::Act),
            Tag::global(Class::Act),
            black_box(a),
            1,
            Tag::global(Class::Forward),
            black_box(row),
            None,
        );
        black_box(y);
    }
    t.elapsed().as_secs_f64()
}

/// A fixed back end with every class in `Q0.(word-1)`, nearest rounding, and a saturating
/// accumulator of `acc_bits`.
fn fixed<W: Word>(word: u8, acc_bits: u8) -> Result<Fixed<W>, String> {
    let format = Format::new(word, word - 1).map_err(|e| e.to_string())?;
    let cfg = FixedConfig {
        layers: Default::default(),
        classes: [ClassSpec {
            format,
            rounding: Rounding::NearestEven,
        }; 8],
        acc_bits,
        acc_overflow: Overflow::Saturate,
    };
    Fixed::<W>::new(cfg, 1).map_err(|e| e.to_string())
}

/// Best MAC/s of the fixed and the `f32` loop, timed in alternation.
fn row<W: Word>(word: u8, acc_bits: u8, a: &[f32], w: &[f32]) -> Result<(f64, f64), String> {
    let mut be = fixed::<W>(word, acc_bits)?;
    let ax: Vec<W> = a
        .iter()
        .map(|&x| be.encode(Tag::global(Class::Act), x))
        .collect();
    let wx: Vec<W> = w
        .iter()
        .map(|&x| be.encode(Tag::global(Class::Forward), x))
        .collect();
    let mut float = Float::new();
    let (mut best_x, mut best_f) = (f64::INFINITY, f64::INFINITY);
    for _ in 0..ROUNDS {
        best_x = best_x.min(round(&mut be, &ax, &wx));
        best_f = best_f.min(round(&mut float, a, w));
    }
    let macs = (DOTS * N) as f64;
    Ok((macs / best_x, macs / best_f))
}

fn main() {
    println!("MAC/s of Backend::dot, {N}-term dot products, best of {ROUNDS} rounds of {DOTS}");
    println!(
        "{:<12} {:<20} {:<16} {:>12} {:>12} {:>9}",
        "inputs", "fixed format", "accumulator", "fixed MMAC/s", "f32 MMAC/s", "fixed/f32"
    );
    for (data, scale) in [("full scale", 0.999f32), ("small", 1.0 / 16.0)] {
        let a = reals(1, N, scale);
        let w = reals(2, N * ROWS, scale);
        let configs: [(&str, u8, u8); 7] = [
            ("8-bit Q0.7 (i8)", 8, 32),
            ("16-bit Q0.15 (i16)", 16, 32),
            ("32-bit Q0.31 (i32)", 32, 32),
            ("8-bit Q0.7 (i8)", 8, 40),
            ("16-bit Q0.15 (i16)", 16, 40),
            ("32-bit Q0.31 (i32)", 32, 40),
            ("32-bit Q0.31 (i32)", 32, 64),
        ];
        for (name, word, acc) in configs {
            let rates = match word {
                8 => row::<i8>(word, acc, &a, &w),
                16 => row::<i16>(word, acc, &a, &w),
                _ => row::<i32>(word, acc, &a, &w),
            };
            match rates {
                Ok((x, f)) => println!(
                    "{:<12} {:<20} {:<16} {:>12.1} {:>12.1} {:>9.2}",
                    data,
                    name,
                    format!("{acc}-bit sat"),
                    x / 1e6,
                    f / 1e6,
                    x / f
                ),
                Err(e) => eprintln!("{name}, {acc}-bit accumulator: {e}"),
            }
        }
    }
}
