//! Stochastic rounding: unbiased, reproducible from its seed, and free of stagnation.
//!
//! Sources: "Stochastic rounding: implementation, error analysis and applications", Royal
//! Society Open Science 9(3):211631, 2022 (SR picks one of the two neighbours with
//! probability one minus its relative distance, so E[SR(x)] = x, and tiny repeated updates
//! are not lost, while round-to-nearest stagnates); "Deep Learning with Limited Numerical
//! Precision", ICML 2015 (PMLR 37) (the same rounding for 16-bit fixed-point training);
//! docs/references.md [8], [7].
//!
//! The statistical bound is a fact of the trade: each rounding is a Bernoulli step of one
//! LSB with probability p, so the mean of N roundings has standard error
//! sqrt(p(1-p)/N) <= LSB / (2 sqrt(N)). Every check allows five of those standard errors;
//! the inputs and the rounding bits are seeded, so each check passes or fails the same way
//! on every run.

use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig};
use tidewise_core::class::{Class, Tag};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::rng::Stream;
use tidewise_core::round::{from_f32, requantize, shift_round, Rounding};

/// Allowed deviation, in standard errors.
const SIGMAS: f64 = 5.0;

fn format(word: u8, frac: u8) -> Format {
    Format::new(word, frac).unwrap_or_else(|e| panic!("{e}"))
}

/// Uniform in `lo..=hi` from a seeded stream.
fn int(g: &mut Stream, lo: i64, hi: i64) -> i64 {
    lo + (g.next_u64() % ((hi - lo) as u64 + 1)) as i64
}

/// The worst-case standard error of the mean of `n` one-LSB Bernoulli steps, in LSB.
fn std_err(n: usize) -> f64 {
    0.5 / (n as f64).sqrt()
}

/// 200 seeded exact values with 1 to 110 bits below the destination's LSB: the mean of 2000
/// stochastic roundings is the exact value, and every rounding is one of its two neighbours.
#[test]
fn requantize_is_unbiased() {
    const N: usize = 2000;
    let dst = format(16, 8);
    let mut g = Stream::new(11, 1);
    let mut rng = Stream::new(11, 2);
    for case in 0..200 {
        // Extra bits: mostly the common short shifts, some past 64 bits (the wide path).
        let extra: i32 = if case % 4 == 3 {
            int(&mut g, 63, 110) as i32
        } else {
            int(&mut g, 1, 40) as i32
        };
        let k = int(&mut g, dst.raw_min(), dst.raw_max() - 1);
        // A fraction offset of up to 62 random bits, aligned to the top of the extra bits.
        let bits = extra.min(62);
        let off = int(&mut g, 0, (1i64 << bits) - 1);
        let v = (i128::from(k) << extra) + (i128::from(off) << (extra - bits));
        let exact = k as f64 + off as f64 / (1u64 << bits) as f64;
        let mut sum = 0i64;
        for _ in 0..N {
            let r = requantize(
                v,
                i32::from(dst.frac()) + extra,
                dst,
                Rounding::Stochastic,
                &mut rng,
            );
            assert!(
                r.raw == k || r.raw == k + 1,
                "case {case}: {exact} rounded to {}",
                r.raw
            );
            sum += r.raw;
        }
        let mean = sum as f64 / N as f64;
        assert!(
            (mean - exact).abs() <= SIGMAS * std_err(N),
            "case {case}: mean {mean} of roundings of {exact} ({extra} extra bits)"
        );
    }
}

/// The same for conversions from `f32` (the edge where data and initial weights enter).
#[test]
fn from_f32_is_unbiased() {
    const N: usize = 2000;
    let dst = format(16, 12);
    let mut g = Stream::new(12, 1);
    let mut rng = Stream::new(12, 2);
    for case in 0..100 {
        let x = (int(&mut g, -(1 << 22), 1 << 22) as f64 * 2f64.powi(-22) * 7.0) as f32;
        let exact = f64::from(x) / dst.lsb();
        let mut sum = 0i64;
        for _ in 0..N {
            sum += from_f32(x, dst, Rounding::Stochastic, &mut rng).raw;
        }
        let mean = sum as f64 / N as f64;
        assert!(
            (mean - exact).abs() <= SIGMAS * std_err(N),
            "case {case}: mean {mean} of roundings of {exact} LSB"
        );
    }
}

/// Values far below one LSB round to 0 almost surely, whatever their sign: the tiny
/// negative value must not land on -1 LSB (its exact mean is about 0).
#[test]
fn tiny_values_round_to_zero() {
    let mut rng = Stream::new(13, 0);
    let int8 = format(8, 0);
    for x in [
        1.0e-40f32,
        -1.0e-40,
        1.0e-30,
        -1.0e-30,
        -1.0e-20,
        f32::from_bits(1),
        -f32::from_bits(1),
    ] {
        let mut sum = 0i64;
        for _ in 0..1000 {
            sum += from_f32(x, int8, Rounding::Stochastic, &mut rng).raw;
        }
        assert_eq!(sum, 0, "{x:e}");
    }
    for shift in [64, 100, 126, 127, 128, 200] {
        for v in [-1i128, 1, -(1 << 60), 1 << 60] {
            assert_eq!(
                shift_round(v, shift, Rounding::Stochastic, &mut rng),
                0,
                "{v} >> {shift}"
            );
        }
    }
}

fn spec(word: u8, frac: u8, rounding: Rounding) -> ClassSpec {
    ClassSpec {
        format: format(word, frac),
        rounding,
    }
}

/// Weights, activations and rates in Q0.15; the step register Q1.30 holds η·δ exactly, so
/// the only rounding of an update is the weight's own.
fn update_backend(rounding: Rounding, seed: u64) -> Fixed<i16> {
    let q15 = spec(16, 15, rounding);
    let mut classes = [q15; 8];
    classes[Class::Step.index()] = spec(32, 30, Rounding::NearestEven);
    let cfg = FixedConfig {
        layers: Default::default(),
        classes,
        acc_bits: 32,
        acc_overflow: Overflow::Saturate,
    };
    Fixed::<i16>::new(cfg, seed).unwrap_or_else(|e| panic!("{e}"))
}

/// η·δ = 4 · 4915 = 19660 in units of 2^-30.
const ETA: i16 = 4;
const DELTA: i16 = 4915;

/// Increments of a row in weight LSB: 19660 · x / 2^30 (0.29999 LSB for x = 0.5).
fn increments(x: &[i16]) -> Vec<f64> {
    let s = f64::from(ETA) * f64::from(DELTA);
    x.iter()
        .map(|&v| s * f64::from(v) / 2f64.powi(30))
        .collect()
}

/// A row of 64 weights and an input whose every increment is below half an LSB:
/// half of them exactly ±0.3 LSB (x = ±0.5), the rest random.
fn row_and_input() -> (Vec<i16>, Vec<i16>) {
    let mut g = Stream::new(21, 1);
    let row = (0..64).map(|_| int(&mut g, -16384, 16384) as i16).collect();
    let x = (0..64)
        .map(|j| {
            let sign = if g.next_u32() & 1 == 0 { 1 } else { -1 };
            let mag = if j % 2 == 0 {
                16384
            } else {
                int(&mut g, 2048, 26000)
            };
            (sign * mag) as i16
        })
        .collect();
    (row, x)
}

/// Round-to-nearest stagnates: every update of 0.3 LSB (or any step below half an LSB) is
/// lost, and the lost-update counter says so, update for update.
#[test]
fn nearest_stagnates() {
    const REPS: u32 = 1000;
    let (mut row, x) = row_and_input();
    assert!(increments(&x).iter().all(|d| d.abs() < 0.5 && *d != 0.0));
    let start = row.clone();
    let mut be = update_backend(Rounding::NearestEven, 1);
    for _ in 0..REPS {
        be.update(
            Tag::global(Class::Forward),
            &mut row,
            ETA,
            Tag::global(Class::Act),
            DELTA,
            Tag::global(Class::Act),
            &x,
        );
    }
    assert_eq!(row, start, "no weight moved");
    let c = be.counters();
    assert_eq!(c.class_lost(Class::Forward), u64::from(REPS) * 64);
    assert_eq!(c.total_updates(), u64::from(REPS) * 64);
    assert_eq!(c.total_saturations(), 0);
}

/// Stochastic rounding moves each weight by its exact increment on average (0.3 LSB per
/// step for the x = 0.5 half of the row), and loses an update only with probability
/// 1 - |increment|.
#[test]
fn stochastic_does_not_stagnate() {
    const REPS: u32 = 1000;
    let (mut row, x) = row_and_input();
    let start = row.clone();
    let inc = increments(&x);
    let mut be = update_backend(Rounding::Stochastic, 2);
    for _ in 0..REPS {
        be.update(
            Tag::global(Class::Forward),
            &mut row,
            ETA,
            Tag::global(Class::Act),
            DELTA,
            Tag::global(Class::Act),
            &x,
        );
    }
    let reps = f64::from(REPS);
    let mut drift_03 = Vec::new();
    for j in 0..row.len() {
        let moved = f64::from(row[j]) - f64::from(start[j]);
        let want = reps * inc[j];
        let sd = (reps * inc[j].abs() * (1.0 - inc[j].abs())).sqrt();
        assert!(
            (moved - want).abs() <= SIGMAS * sd,
            "weight {j}: moved {moved} LSB, expected {want} ± {sd}"
        );
        if j % 2 == 0 {
            drift_03.push(moved.abs() / reps);
        }
    }
    // The ±0.3 LSB half: the mean movement per step over 32 weights and 1000 steps.
    let mean = drift_03.iter().sum::<f64>() / drift_03.len() as f64;
    let p = 19660.0 * 16384.0 / 2f64.powi(30);
    let se = (p * (1.0 - p) / (reps * drift_03.len() as f64)).sqrt();
    assert!(
        (mean - p).abs() <= SIGMAS * se,
        "mean step {mean} LSB, expected {p}"
    );
    assert!(mean > 0.29 && mean < 0.31, "mean step {mean} LSB");
    // Lost updates: a Bernoulli count with probability 1 - |increment| per update.
    let lost = be.counters().class_lost(Class::Forward) as f64;
    let want: f64 = inc.iter().map(|d| reps * (1.0 - d.abs())).sum();
    let sd: f64 = inc
        .iter()
        .map(|d| reps * d.abs() * (1.0 - d.abs()))
        .sum::<f64>()
        .sqrt();
    assert!(
        (lost - want).abs() <= SIGMAS * sd,
        "lost {lost}, expected {want} ± {sd}"
    );
}

/// Wider steps go through the same rounding: a weight LSB of 2^-15 and a Q1.30 step with a
/// 16-bit input puts 30 or more bits below the weight's LSB; shifts of 33, 47, 62 and 63
/// bits exercise the 32- and 64-bit threshold draws.
#[test]
fn update_is_unbiased_for_long_shifts() {
    for (step_frac, x_frac) in [(18u8, 30u8), (32, 30), (40, 22), (40, 38), (40, 23)] {
        let q15 = spec(16, 15, Rounding::Stochastic);
        let mut classes = [q15; 8];
        classes[Class::Step.index()] = spec(32, step_frac, Rounding::Floor);
        classes[Class::Act.index()] = spec(32, x_frac, Rounding::Stochastic);
        classes[Class::Rate.index()] = spec(32, 20, Rounding::Stochastic);
        let cfg = FixedConfig {
            layers: Default::default(),
            classes,
            acc_bits: 32,
            acc_overflow: Overflow::Saturate,
        };
        let mut be = Fixed::<i32>::new(cfg, 9).unwrap_or_else(|e| panic!("{e}"));
        let shift = i32::from(step_frac) + i32::from(x_frac) - 15;
        // Inputs up to 2^29 and a step s with s·2^29 about 2^(shift+1) (or s about 2^30 when
        // the step word cannot hold that): increments of up to a few LSB, mostly fractional.
        let mut g = Stream::new(u64::from(step_frac) * 100 + u64::from(x_frac), 3);
        let x: Vec<i32> = (0..16)
            .map(|_| int(&mut g, -(1 << 29), 1 << 29) as i32)
            .collect();
        let s_target =
            2f64.powi((shift - 28).min(30)) * (0.5 + 0.5 * f64::from(g.next_u32()) / 2f64.powi(32));
        let eta = 1i32 << 20; // 1.0 in the rate's 20 fraction bits
        let delta = (s_target * 2f64.powi(i32::from(x_frac) - i32::from(step_frac))).round() as i32;
        // The step register takes η·δ (20 + x_frac fraction bits) by floor.
        let s = (i128::from(eta) * i128::from(delta))
            >> (20 + i32::from(x_frac) - i32::from(step_frac));
        assert!(s > 0 && s < 1 << 31, "step {s}");
        let mut row = vec![0i32; 16];
        const REPS: usize = 800;
        for _ in 0..REPS {
            be.update(
                Tag::global(Class::Forward),
                &mut row,
                eta,
                Tag::global(Class::Act),
                delta,
                Tag::global(Class::Act),
                &x,
            );
        }
        for j in 0..16 {
            let want = (s * i128::from(x[j])) as f64 / 2f64.powi(shift) * REPS as f64;
            let sd = (REPS as f64).sqrt() / 2.0;
            let moved = f64::from(row[j]);
            assert!(
                (moved - want).abs() <= SIGMAS * sd,
                "shift {shift}, weight {j}: moved {moved}, expected {want}"
            );
        }
    }
}

/// The same seed gives the same rounding bits; another seed gives others.
#[test]
fn seeded_and_reproducible() {
    let run = |seed: u64| {
        let mut be = update_backend(Rounding::Stochastic, seed);
        (0..256)
            .map(|i| {
                be.mul(
                    Tag::global(Class::Act),
                    Tag::global(Class::Act),
                    12345 + i,
                    Tag::global(Class::Act),
                    777,
                )
            })
            .collect::<Vec<i16>>()
    };
    assert_eq!(run(7), run(7));
    assert_ne!(run(7), run(8));
    let (mut a, mut b) = (Stream::new(5, 4), Stream::new(5, 4));
    let f = format(16, 8);
    for i in 0..1000i128 {
        let x = requantize(i * 37, 16, f, Rounding::Stochastic, &mut a);
        let y = requantize(i * 37, 16, f, Rounding::Stochastic, &mut b);
        assert_eq!(x, y);
    }
}

/// The thresholds are positional (see `tidewise_core::rng`): an update of a row of n takes
/// positions base..=base+n (the step, then element j at base+1+j), zero inputs and a zero
/// step included, and each element's rounding is the comparison of its remainder with
/// `threshold(key, position)`, recomputed here by hand. (Derived from the module doc's
/// draw order; the arithmetic is the definition of stochastic rounding in the source above.)
#[test]
fn thresholds_are_positional() {
    use tidewise_core::rng::{self, streams, threshold};
    let (mut row, mut x) = row_and_input();
    x[5] = 0;
    let start = row.clone();
    let mut be = update_backend(Rounding::Stochastic, 9);
    assert_eq!(be.key(), rng::key(9, streams::ROUNDING));
    assert_eq!(be.draws(), 0);
    let _ = be.mul(
        Tag::global(Class::Act),
        Tag::global(Class::Act),
        3,
        Tag::global(Class::Act),
        5,
    );
    assert_eq!(be.draws(), 1, "one position per mul");
    let base = be.draws();
    let (f, a) = (Tag::global(Class::Forward), Tag::global(Class::Act));
    be.update(f, &mut row, ETA, a, DELTA, a, &x);
    assert_eq!(be.draws(), base + 1 + 64, "the step, then one per element");
    let s = i64::from(ETA) * i64::from(DELTA); // the step, exact in Q2.30
    for j in 0..64 {
        let p = s * i64::from(x[j]);
        let (q, rem) = (p >> 30, p & ((1 << 30) - 1));
        let t = i64::from(threshold(be.key(), base + 1 + j as u64) >> 2);
        let want = i64::from(start[j]) + q + i64::from(rem != 0 && t < rem);
        assert_eq!(i64::from(row[j]), want, "element {j}");
    }
    be.update(f, &mut row, 0, a, DELTA, a, &x);
    assert_eq!(
        be.draws(),
        base + 2 * 65,
        "a zero step still takes its positions"
    );
    be.decay(f, &mut row, 0);
    assert_eq!(be.draws(), base + 2 * 65 + 64, "decay: one per element");
}

/// Attempted updates are only those whose exact increment is non-zero, in both arms: a zero
/// input or a zero step attempts nothing, so the lost share is of non-zero updates. (The
/// definition of a lost update: a non-zero exact increment that leaves the weight
/// unchanged; a fact of the trade.)
#[test]
fn only_non_zero_updates_are_attempted() {
    use tidewise_core::backend::Float;
    let (mut row, mut x) = row_and_input();
    x[5] = 0;
    x[9] = 0;
    let (f, a) = (Tag::global(Class::Forward), Tag::global(Class::Act));
    let mut be = update_backend(Rounding::NearestEven, 1);
    be.update(f, &mut row, ETA, a, DELTA, a, &x);
    be.update(f, &mut row, 0, a, DELTA, a, &x);
    let c = be.counters();
    assert_eq!(c.total_updates(), 62, "two zero inputs, then a zero step");
    assert_eq!(
        c.class_lost(Class::Forward),
        62,
        "every 0.3-LSB step is lost to nearest"
    );
    let mut fl = Float::new();
    let mut frow: Vec<f32> = row.iter().map(|&w| f32::from(w)).collect();
    let fx: Vec<f32> = x.iter().map(|&v| f32::from(v) * 1e-3).collect();
    fl.update(f, &mut frow, 0.5, a, 0.25, a, &fx);
    fl.update(f, &mut frow, 0.0, a, 0.25, a, &fx);
    assert_eq!(fl.counters().total_updates(), 62);
}
