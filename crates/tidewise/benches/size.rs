//! Training cost against network size: multiply-accumulates per second of whole training
//! samples (forward, feedback training, targets, updates) for the 16-bit fixed arm, its
//! scalar reference (`FixedRef`, the same results computed element by element) and the float
//! arm, at 64-32-10 and 64-256-256-10 for every rule and at 784-512-512-10 for `bp` and
//! `dtp-direct`, and a baseline that does the same `bp` step in `f32` with nalgebra
//! (matrix-vector products and rank-one updates), all in one run so the ratios compare like
//! with like on a shared machine.
//!
//! Run: `cargo bench -p tidewise --bench size`. Inputs and labels are generated (seeded
//! uniform reals in [-1, 1), labels uniform over the outputs). Each cell times its arms in
//! alternation, `ROUNDS` times, and keeps the best round of each (load only slows a round).

use std::hint::black_box;
use std::time::Instant;

use nalgebra::{DMatrix, DVector};
use tidewise::onchip::macs;
use tidewise_core::activation::Activation;
use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig, FixedRef, Float};
use tidewise_core::class::{Class, Tag, CLASSES};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::network::{Hyper, Net};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::{streams, Stream};
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;
use tidewise_core::train::{self, Schedule};

/// Timed rounds per arm; the best is kept.
const ROUNDS: usize = 5;
/// Generated samples, cycled through.
const SAMPLES: usize = 64;

const HYPER: Hyper = Hyper {
    lr: 0.01,
    lr_feedback: 0.01,
    beta: 0.5,
    sigma: 0.1,
    decay: 0.01,
    feedback_steps: 1,
    // The spec's default: layers with a fan-in above 64 learn at a shifted rate.
    lr_fan_in: 64,
    regulariser: tidewise_core::network::Regulariser::Decay,
};

/// 16-bit words with 12 fraction bits; weights, biases and feedback rounded stochastically,
/// everything else to nearest even; a 40-bit saturating accumulator.
fn fixed_config() -> FixedConfig {
    let format = Format::new(16, 12).expect("16-bit format");
    let mut classes = [ClassSpec {
        format,
        rounding: Rounding::NearestEven,
    }; CLASSES];
    for c in [Class::Forward, Class::Bias, Class::Feedback] {
        classes[c.index()].rounding = Rounding::Stochastic;
    }
    FixedConfig::uniform(classes, 40, Overflow::Saturate)
}

/// Seeded reals uniform in [-1, 1).
fn reals(seed: u64, len: usize) -> Vec<f32> {
    let mut g = Stream::new(seed, 0);
    (0..len)
        .map(|_| g.next_u32() as f32 / 2_147_483_648.0 - 1.0)
        .collect()
}

/// Seconds for `n` training samples of `net` on `be`, cycling through the encoded inputs `x`.
fn time<B: Backend>(
    net: &mut Net<'_, B::S>,
    be: &mut B,
    schedule: &Schedule,
    x: &[B::S],
    labels: &[usize],
    noise: &mut Stream,
    n: usize,
) -> f64 {
    let inputs = net.plan.n(0);
    let t = Instant::now();
    for i in 0..n {
        let k = i % SAMPLES;
        let r = train::train_sample(
            net,
            be,
            schedule,
            black_box(&x[k * inputs..][..inputs]),
            labels[k],
            noise,
            false,
        );
        black_box(r);
    }
    t.elapsed().as_secs_f64()
}

/// The same `bp` step in `f32` with nalgebra: forward by matrix-vector products, the output
/// error of the squared loss, the backward pass by transposed products, rank-one updates.
struct Blas {
    w: Vec<DMatrix<f32>>,
    b: Vec<DVector<f32>>,
    h: Vec<DVector<f32>>,
    a: Vec<DVector<f32>>,
    x: Vec<DVector<f32>>,
    labels: Vec<usize>,
}

impl Blas {
    fn new(sizes: &[usize], x: &[f32], labels: &[usize]) -> Blas {
        let mut g = Stream::new(3, 0);
        let mut uni = move || g.next_u32() as f32 / 2_147_483_648.0 - 1.0;
        let mut w = Vec::new();
        let mut b = Vec::new();
        for p in sizes.windows(2) {
            let lim = (6.0 / (p[0] + p[1]) as f32).sqrt();
            w.push(DMatrix::from_fn(p[1], p[0], |_, _| uni() * lim));
            b.push(DVector::zeros(p[1]));
        }
        let h = sizes.iter().map(|&n| DVector::zeros(n)).collect();
        let a = sizes[1..].iter().map(|&n| DVector::zeros(n)).collect();
        let x = x.chunks(sizes[0]).map(DVector::from_column_slice).collect();
        Blas {
            w,
            b,
            h,
            a,
            x,
            labels: labels.to_vec(),
        }
    }

    fn step(&mut self, k: usize) {
        let layers = self.w.len();
        self.h[0].copy_from(&self.x[k]);
        for l in 0..layers {
            let (lo, hi) = self.h.split_at_mut(l + 1);
            let a = &mut self.a[l];
            a.copy_from(&self.b[l]);
            a.gemv(1.0, &self.w[l], &lo[l], 1.0);
            // Leaky ReLU on hidden layers (slope 1/4 below zero), identity at the output.
            hi[0].copy_from(a);
            if l + 1 < layers {
                hi[0].apply(|v| {
                    if *v < 0.0 {
                        *v *= 0.25
                    }
                });
            }
        }
        let mut delta = self.h[layers].clone();
        delta[self.labels[k]] -= 1.0;
        for l in (0..layers).rev() {
            let below = if l > 0 {
                let mut e = DVector::zeros(self.w[l].ncols());
                e.gemv_tr(1.0, &self.w[l], &delta, 0.0);
                e.zip_apply(&self.a[l - 1], |e, a| {
                    if a < 0.0 {
                        *e *= 0.25
                    }
                });
                Some(e)
            } else {
                None
            };
            self.w[l].ger(-HYPER.lr, &delta, &self.h[l], 1.0);
            self.b[l].axpy(-HYPER.lr, &delta, 1.0);
            if let Some(e) = below {
                delta = e;
            }
        }
    }

    /// Seconds for `n` steps.
    fn round(&mut self, n: usize) -> f64 {
        let t = Instant::now();
        for i in 0..n {
            self.step(black_box(i % SAMPLES));
        }
        black_box(&self.w);
        t.elapsed().as_secs_f64()
    }

    /// MACs of one step: forward, backward (not into the input) and the updates.
    fn macs(sizes: &[usize]) -> f64 {
        let fwd: usize = sizes.windows(2).map(|p| p[0] * p[1]).sum();
        let back: usize = sizes.windows(2).skip(1).map(|p| p[0] * p[1]).sum();
        (2 * fwd + back) as f64
    }
}

fn main() {
    println!("training MAC/s against size (best of {ROUNDS} rounds; arms alternate within a cell)");
    println!(
        "{:<16} {:<11} {:>11} {:>12} {:>12} {:>12} {:>10} {:>11} {:>11} {:>11}",
        "network",
        "rule",
        "MACs/sample",
        "fixed MMAC/s",
        "ref MMAC/s",
        "float MMAC/s",
        "fixed/ref",
        "fixed/float",
        "blas MMAC/s",
        "float/blas"
    );
    let sizes: [&[usize]; 3] = [&[64, 32, 10], &[64, 256, 256, 10], &[784, 512, 512, 10]];
    for s in sizes {
        let shape = Shape::new(s).expect("shape");
        let x = reals(1, SAMPLES * s[0]);
        let mut g = Stream::new(2, 0);
        let labels: Vec<usize> = (0..SAMPLES)
            .map(|_| g.below(s[s.len() - 1] as u32) as usize)
            .collect();
        let weights: usize = s.windows(2).map(|p| p[0] * p[1]).sum();
        // About 0.2 s per round for the fastest arm at ~1 GMAC/s.
        let n = (60_000_000 / weights).clamp(8, 20_000);
        let mut blas = Blas::new(s, &x, &labels);
        // Every rule where the reference is timed too; the two headline rules at the largest.
        let big = s[0] > 256;
        let rules: &[Rule] = if big {
            &[Rule::Bp, Rule::DtpDirect]
        } else {
            &Rule::ALL
        };
        for &rule in rules {
            let plan = Plan::new(shape, rule, Activation::LeakyRelu, Activation::Identity);
            let m = macs::per_step(&plan, &HYPER).expect("census").total() as f64;
            let schedule = Schedule {
                rule,
                feedback_steps: HYPER.feedback_steps,
            };
            let mut bx = Fixed::<i16>::new(fixed_config(), 7).expect("fixed back end");
            let mut br = FixedRef::<i16>::new(fixed_config(), 7).expect("reference back end");
            let mut bf = Float::new();
            let mut ax = vec![0i16; plan.counts().total()];
            let mut ar = vec![0i16; plan.counts().total()];
            let mut af = vec![0f32; plan.counts().total()];
            let mut nx = train::setup(plan, &HYPER, &mut ax, &mut bx, 7).expect("network");
            let mut nr = train::setup(plan, &HYPER, &mut ar, &mut br, 7).expect("network");
            let mut nf = train::setup(plan, &HYPER, &mut af, &mut bf, 7).expect("network");
            // The data encoded on its own stream, so both fixed arms start at the same position.
            let mut enc = Fixed::<i16>::on_stream(fixed_config(), 7, streams::DATA).expect("data");
            let xx: Vec<i16> = x.iter().map(|&v| enc.encode(Tag::act(0), v)).collect();
            let (mut gx, mut gr, mut gf) =
                (Stream::new(7, 9), Stream::new(7, 9), Stream::new(7, 9));
            let (mut tx, mut tr, mut tf, mut tb) = (f64::MAX, f64::MAX, f64::MAX, f64::MAX);
            for _ in 0..ROUNDS {
                tx = tx.min(time(&mut nx, &mut bx, &schedule, &xx, &labels, &mut gx, n));
                if !big {
                    tr = tr.min(time(&mut nr, &mut br, &schedule, &xx, &labels, &mut gr, n));
                }
                tf = tf.min(time(&mut nf, &mut bf, &schedule, &x, &labels, &mut gf, n));
                if rule == Rule::Bp {
                    tb = tb.min(blas.round(n));
                }
            }
            // The same samples in the same order: the fast arm must have reached the
            // reference's parameters bit for bit.
            if !big {
                assert_eq!(
                    train::digest::<Fixed<i16>>(&nx),
                    train::digest::<FixedRef<i16>>(&nr)
                );
            }
            let (rx, rr, rf, rb) = (n as f64 / tx, n as f64 / tr, n as f64 / tf, n as f64 / tb);
            let bm = Blas::macs(s);
            let name = s
                .iter()
                .map(|v| v.to_string())
                .collect::<Vec<_>>()
                .join("-");
            let timed_blas = rule == Rule::Bp;
            let na = |v: f64| {
                if v.is_finite() && v > 0.0 {
                    format!("{v:.2}")
                } else {
                    "-".to_string()
                }
            };
            println!(
                "{:<16} {:<11} {:>11} {:>12.0} {:>12} {:>12.0} {:>10} {:>11.2} {:>11} {:>11}",
                name,
                format!("{rule:?}"),
                m,
                rx * m / 1e6,
                if big {
                    "-".to_string()
                } else {
                    format!("{:.0}", rr * m / 1e6)
                },
                rf * m / 1e6,
                if big { "-".to_string() } else { na(rx / rr) },
                rx / rf,
                if timed_blas {
                    na(rb * bm / 1e6)
                } else {
                    "-".to_string()
                },
                if timed_blas {
                    na(rf / rb)
                } else {
                    "-".to_string()
                },
            );
        }
    }
}
