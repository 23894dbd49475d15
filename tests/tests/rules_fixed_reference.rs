//! Every rule's training step in wide fixed-point formats against the float back end, and the
//! fixed `tanh` and `sigmoid` against the float evaluation of the same table.
//!
//! # The step
//! For each of the seven rules, a 7-6-5-4 network (two hidden layers, so every layer's loop
//! runs) takes one training step (its feedback steps, then the forward update) three times
//! from the same initial parameters, sample, noise draws and order:
//! * in the fixed back end with 32-bit words (weights Q5.26, activations, biases and noise
//!   Q7.24, rate Q1.30, step Q3.28), a 64-bit accumulator and round-to-nearest, so the
//!   rounding generator draws nothing;
//! * in the float back end (`f32`);
//! * in a third back end written here, [`Tracked`], which computes every operation of the same
//!   rule code in `f64` (the ideal value) and carries two bounds: on the fixed arm's error and
//!   on the float arm's error against that ideal value.
//!
//! Each parameter, activation, displacement and local error of the fixed arm must then agree
//! with the float arm within the sum of the two bounds. The test does not look inside any
//! rule: the bound is derived per operation of the back-end interface, so it holds for
//! whatever equations the rule's code evaluates (both arms run the same code).
//!
//! # The bound (forward error analysis, a fact of the trade)
//! With `x̂ = x + ε_x`, `|ε_x| ≤ e_x` (and likewise for `y`):
//! * `x̂ ± ŷ` is off by `e_x + e_y`; `x̂ ŷ` by `|x| e_y + |y| e_x + e_x e_y`; a dot product
//!   `Σ_k â_k b̂_k (+ b̂)` by the sum of the product terms (plus the bias's error);
//! * fixed point: products and sums are exact in the 64-bit accumulator and every result is
//!   rounded once to nearest into its destination's format, adding half that format's LSB,
//!   `2^-(f+1)`; an encoded real is off by half an LSB; a change to the same format is exact.
//!   No value may saturate: the tracker checks `|x| + e_x` against each destination's range
//!   and the accumulator's, and the fixed arm's saturation counter must stay zero;
//! * `f32`: every operation rounds its computed result `z` to nearest, off by at most
//!   `u |z|` with `u = 2^-24` ("IEEE Standard for Floating-Point Arithmetic", IEEE 754-2019;
//!   the model of "Accuracy and Stability of Numerical Algorithms", SIAM, 2002, §2.2;
//!   docs/references.md [15], [16]);
//!   multiplying by a power of two is exact; a dot product of `n` terms accumulated in any
//!   order (the float back end keeps partial sums) is off by at most
//!   `γ_{n+1} (|b| + Σ |a_k b_k|)`, `γ_m = m u / (1 − m u)` (same book, §3.1), plus the
//!   propagated input errors;
//! * a branch (a comparison) may go another way in an arm only when the two compared values
//!   are within their bounds of each other; the tracker counts such comparisons and the test
//!   requires none (otherwise the bound would not cover both paths).
//!
//! The bound is checked in two directions: the fixed arm against the ideal value, and the float
//! arm against it, so a wrong rounding in either back end fails the test on its own. And it is
//! not vacuous: the same step in 16-bit formats (Q2.13 weights, Q3.12 activations) must leave
//! the bound somewhere, and the weights must move by far more than the bound.

use std::cell::Cell;
use std::cmp::Ordering;

use tidewise_core::activation::{fill_tanh_table, ActConsts, Activation, TANH_POINTS, TANH_TABLE};
use tidewise_core::backend::{Backend, Fixed, FixedConfig, Float};
use tidewise_core::class::{Class, Counters, Tag};
use tidewise_core::format::Format;
use tidewise_core::network::Hyper;
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::Stream;
use tidewise_core::rules::Rule;
use tidewise_core::train::{setup, train_sample, Schedule};

/// Unit roundoff of `f32` (round to nearest, 24-bit significand).
const U: f64 = 1.0 / 16_777_216.0;
/// Slack for the reference's own `f64` arithmetic (unit roundoff 2^-53), relative.
const F64_SLACK: f64 = 1e-12;

const SIZES: [usize; 4] = [7, 6, 5, 4];
const SEED: u64 = 21;
const LABEL: usize = 2;

/// A value of the ideal computation with bounds on the fixed arm's (`e`) and the float arm's
/// (`ef`) distance from it.
#[derive(Clone, Copy, Debug, Default, PartialEq, PartialOrd)]
struct T {
    v: f64,
    e: f64,
    ef: f64,
}

/// The error-tracking back end: see the module documentation.
struct Tracked {
    cfg: FixedConfig,
    counters: Counters,
    /// Comparisons whose outcome the bounds do not decide.
    ambiguous: Cell<u32>,
    /// Results whose bound reaches past their format's range (or the accumulator's).
    overflows: u32,
}

impl Tracked {
    fn new(cfg: FixedConfig) -> Tracked {
        Tracked {
            cfg,
            counters: Counters::default(),
            ambiguous: Cell::new(0),
            overflows: 0,
        }
    }
    fn format(&self, t: Tag) -> Format {
        self.cfg.format(t)
    }
    fn half(&self, t: Tag) -> f64 {
        0.5 * self.format(t).lsb()
    }
    /// A result `v` with propagated bounds `(e, ef)`, rounded into the format of `out` in the
    /// fixed arm and to `f32` in the float arm.
    fn put(&mut self, out: Tag, v: f64, e: f64, ef: f64) -> T {
        let e = e + self.half(out);
        let ef = ef + U * (v.abs() + ef) + f64::from(f32::from_bits(1));
        if v.abs() + e >= self.format(out).max_value() {
            self.overflows += 1;
        }
        T { v, e, ef }
    }
    fn check_acc(&mut self, magnitude: f64, frac: i32) {
        let limit = 2f64.powi(i32::from(self.cfg.acc_bits) - 1 - frac);
        if magnitude >= limit {
            self.overflows += 1;
        }
    }
}

fn mul_bound(x: T, y: T) -> (f64, f64) {
    (
        x.v.abs() * y.e + y.v.abs() * x.e + x.e * y.e,
        x.v.abs() * y.ef + y.v.abs() * x.ef + x.ef * y.ef,
    )
}

fn gamma(m: usize) -> f64 {
    let mu = m as f64 * U;
    mu / (1.0 - mu)
}

impl Backend for Tracked {
    type S = T;

    fn encode(&mut self, t: Tag, x: f32) -> T {
        // The float arm holds `x` exactly; the fixed arm rounds it once.
        let mut r = self.put(t, f64::from(x), 0.0, 0.0);
        r.ef = 0.0;
        r
    }
    fn decode(&self, _t: Tag, v: T) -> f32 {
        v.v as f32
    }
    fn set_layer(&mut self, _layer: usize) {}

    fn dot(
        &mut self,
        out: Tag,
        at: Tag,
        a: &[T],
        stride: usize,
        bt: Tag,
        b: &[T],
        bias: Option<(Tag, T)>,
    ) -> T {
        let bias = bias.map_or(T::default(), |(_, v)| v);
        let (mut v, mut e, mut ef) = (bias.v, bias.e, bias.ef);
        let mut magnitude = bias.v.abs() + bias.ef;
        let mut terms = 0;
        for (x, y) in a.iter().step_by(stride.max(1)).zip(b) {
            v += x.v * y.v;
            let (pe, pef) = mul_bound(*x, *y);
            e += pe;
            ef += pef;
            magnitude += x.v.abs() * y.v.abs() + pef;
            terms += 1;
        }
        let frac = i32::from(self.format(at).frac()) + i32::from(self.format(bt).frac());
        self.check_acc(magnitude + e, frac);
        let e = e + self.half(out);
        // The float arm rounds every product and every partial sum.
        let ef = ef + gamma(terms + 1) * magnitude + f64::from(f32::from_bits(1)) * terms as f64;
        if v.abs() + e >= self.format(out).max_value() {
            self.overflows += 1;
        }
        T { v, e, ef }
    }
    fn mul(&mut self, out: Tag, _xt: Tag, x: T, _yt: Tag, y: T) -> T {
        let (e, ef) = mul_bound(x, y);
        self.put(out, x.v * y.v, e, ef)
    }
    fn add(&mut self, out: Tag, _xt: Tag, x: T, _yt: Tag, y: T) -> T {
        self.put(out, x.v + y.v, x.e + y.e, x.ef + y.ef)
    }
    fn sub(&mut self, out: Tag, _xt: Tag, x: T, _yt: Tag, y: T) -> T {
        self.put(out, x.v - y.v, x.e + y.e, x.ef + y.ef)
    }
    fn shift(&mut self, t: Tag, x: T, k: i32) -> T {
        let p = 2f64.powi(k);
        // Exact in `f32`; in fixed point exact for k ≥ 0, rounded for k < 0.
        let mut r = self.put(t, x.v * p, x.e * p, 0.0);
        r.ef = x.ef * p;
        if k >= 0 {
            r.e = x.e * p;
        }
        r
    }
    fn convert(&mut self, out: Tag, xt: Tag, x: T) -> T {
        if self.format(out) == self.format(xt) {
            return x;
        }
        let mut r = self.put(out, x.v, x.e, 0.0);
        r.ef = x.ef;
        r
    }
    fn cmp(&self, _xt: Tag, x: T, _yt: Tag, y: T) -> Option<Ordering> {
        let slack = (x.e + y.e).max(x.ef + y.ef);
        if slack > 0.0 && (x.v - y.v).abs() <= slack {
            self.ambiguous.set(self.ambiguous.get() + 1);
        }
        x.v.partial_cmp(&y.v)
    }
    fn update(&mut self, wt: Tag, row: &mut [T], eta: T, dt: Tag, delta: T, xt: Tag, x: &[T]) {
        let _ = (dt, xt);
        let step = {
            let (e, ef) = mul_bound(eta, delta);
            self.put(Tag::global(Class::Step), eta.v * delta.v, e, ef)
        };
        for (w, &xj) in row.iter_mut().zip(x) {
            let (e, ef) = mul_bound(step, xj);
            let inc = self.put(wt, step.v * xj.v, e, ef);
            // The addition is exact in fixed point (one format), rounded in `f32`.
            let v = w.v + inc.v;
            let ef = w.ef + inc.ef + U * (v.abs() + w.ef + inc.ef);
            let e = w.e + inc.e;
            if v.abs() + e >= self.format(wt).max_value() {
                self.overflows += 1;
            }
            *w = T { v, e, ef };
        }
    }
    fn decay(&mut self, wt: Tag, row: &mut [T], k: T) {
        for w in row.iter_mut() {
            let (e, ef) = mul_bound(k, *w);
            let dec = self.put(wt, k.v * w.v, e, ef);
            let v = w.v - dec.v;
            let ef = w.ef + dec.ef + U * (v.abs() + w.ef + dec.ef);
            *w = T {
                v,
                e: w.e + dec.e,
                ef,
            };
        }
    }
    fn noise(&mut self, out: Tag, amp: T, z: i32) -> T {
        let s = f64::from(z) / 65536.0;
        self.put(out, amp.v * s, amp.e * s.abs(), amp.ef * s.abs())
    }
    fn counters(&self) -> &Counters {
        &self.counters
    }
    fn reset_counters(&mut self) {}
    fn fault(&self) -> Option<(usize, Class)> {
        None
    }
    fn is_fixed(&self) -> bool {
        false
    }
    fn raw_bits(v: T) -> u32 {
        (v.v as f32).to_bits()
    }
}

const WIDE: [&str; 9] = [
    "fixed.forward_weights=Q5.26",
    "fixed.feedback_weights=Q5.26",
    "fixed.biases=Q7.24",
    "fixed.activations=Q7.24",
    "fixed.noise=Q7.24",
    "fixed.rate=Q1.30",
    "fixed.step=Q3.28",
    "fixed.accumulator=64",
    "fixed.rounding=\"nearest\"",
];

const NARROW: [&str; 9] = [
    "fixed.forward_weights=Q2.13",
    "fixed.feedback_weights=Q2.13",
    "fixed.biases=Q3.12",
    "fixed.activations=Q3.12",
    "fixed.noise=Q3.12",
    "fixed.rate=Q0.15",
    "fixed.step=Q3.28",
    "fixed.accumulator=32",
    "fixed.rounding=\"nearest\"",
];

/// The shipped defaults for `rule` with the given formats and hidden activation: rates, β,
/// σ, decay and feedback steps come from the spec, so the test follows them.
fn design(rule: Rule, act: Activation, formats: &[&str]) -> (Hyper, FixedConfig) {
    let mut sets: Vec<String> = formats.iter().map(|s| s.to_string()).collect();
    sets.push(format!("rule.name=\"{}\"", rule.name()));
    sets.push(format!("net.activation=\"{}\"", act.name()));
    sets.push("net.hidden=[6, 5]".into());
    let (_, d) = tidewise::spec::parse("[data]\nsource = \"digits\"\n", &sets)
        .unwrap_or_else(|e| panic!("{rule:?}: {e}"));
    (d.hyper, d.fixed)
}

fn input() -> Vec<f32> {
    let mut s = Stream::new(SEED, 77);
    (0..SIZES[0])
        .map(|_| (s.next_u32() >> 8) as f32 / 16_777_216.0)
        .collect()
}

/// One training step of `be` from the seeded start: the network's values afterwards, in
/// [`Net::params`] order followed by the activations, displacements and local errors.
fn step<B: Backend>(
    plan: Plan,
    hyper: &Hyper,
    be: &mut B,
    decode: impl Fn(Class, B::S) -> f64,
) -> Vec<Vec<f64>> {
    let mut arena = vec![B::S::default(); plan.counts().total()];
    let mut net = setup(plan, hyper, &mut arena, be, SEED).unwrap();
    let x: Vec<B::S> = input().iter().map(|&v| be.encode(Tag::act(0), v)).collect();
    let schedule = Schedule {
        rule: plan.rule,
        feedback_steps: hyper.feedback_steps,
    };
    let mut noise = Stream::new(SEED, 3);
    train_sample(&mut net, be, &schedule, &x, LABEL, &mut noise, false);
    let dec = |c: Class, s: &[B::S]| s.iter().map(|&v| decode(c, v)).collect::<Vec<f64>>();
    vec![
        dec(Class::Forward, net.w),
        dec(Class::Bias, net.b),
        dec(Class::Feedback, net.fw),
        dec(Class::Feedback, net.fb),
        dec(Class::Act, net.h),
        dec(Class::Act, net.d),
        dec(Class::Act, net.delta),
    ]
}

const PARTS: [&str; 7] = [
    "forward weights",
    "biases",
    "feedback weights",
    "feedback biases",
    "activations",
    "displacements",
    "local errors",
];

struct Outcome {
    /// Values the fixed arm holds outside `bound_fixed + bound_float` of the float arm.
    outside: Vec<String>,
    /// Largest combined bound over the learned parameters.
    widest: f64,
    /// Largest weight change of the float arm.
    moved: f64,
}

/// The fixed arm in `formats` against the float arm, within the bounds derived for
/// `bound_formats`; `strict` also checks each arm against the ideal value and the
/// preconditions of the derivation (only meaningful when the two sets of formats agree).
fn compare(
    rule: Rule,
    act: Activation,
    formats: &[&str],
    bound_formats: &[&str],
    strict: bool,
) -> Outcome {
    let (hyper, cfg) = design(rule, act, formats);
    let bound_cfg = design(rule, act, bound_formats).1;
    let plan = Plan::new(Shape::new(&SIZES).unwrap(), rule, act, Activation::Identity);
    let frac = |c: Class| cfg.format(Tag::global(c)).frac();
    assert!(
        Class::ALL
            .iter()
            .all(|&c| cfg.classes[c.index()].format == cfg.format(Tag::global(c))),
        "no per-layer formats here"
    );
    let mut fixed = Fixed::<i32>::new(cfg, SEED).unwrap();
    let fx = step(plan, &hyper, &mut fixed, |c, v: i32| {
        f64::from(v) * 2f64.powi(-i32::from(frac(c)))
    });
    let mut float = Float::new();
    let fl = step(plan, &hyper, &mut float, |_, v: f32| f64::from(v));
    let mut tracked = Tracked::new(bound_cfg);
    let mut before = Tracked::new(bound_cfg);
    let tr = step_tracked(plan, &hyper, &mut tracked);
    let start = start_tracked(plan, &hyper, &mut before);
    if strict {
        assert_eq!(
            fixed.counters().total_saturations(),
            0,
            "{rule:?}: the fixed arm saturated"
        );
        assert_eq!(
            tracked.overflows, 0,
            "{rule:?}: a bound reaches a format's range"
        );
        assert_eq!(
            tracked.ambiguous.get(),
            0,
            "{rule:?} {act:?}: a branch the bounds do not decide"
        );
    }
    let mut outside = Vec::new();
    let (mut widest, mut moved) = (0f64, 0f64);
    for (p, name) in PARTS.iter().enumerate() {
        for (k, ((&a, &b), t)) in fx[p].iter().zip(&fl[p]).zip(&tr[p]).enumerate() {
            let slack = F64_SLACK * (t.v.abs() + 1.0);
            if strict {
                assert!(
                    (a - t.v).abs() <= t.e + slack,
                    "{rule:?} {act:?} {name}[{k}]: fixed {a} is {} from the ideal {}, bound {}",
                    (a - t.v).abs(),
                    t.v,
                    t.e
                );
                assert!(
                    (b - t.v).abs() <= t.ef + slack,
                    "{rule:?} {act:?} {name}[{k}]: float {b} is {} from the ideal {}, bound {}",
                    (b - t.v).abs(),
                    t.v,
                    t.ef
                );
            }
            let bound = t.e + t.ef + 2.0 * slack;
            if (a - b).abs() > bound {
                outside.push(format!(
                    "{name}[{k}]: fixed {a}, float {b}, bound {bound:.3e}"
                ));
            }
            if p < 4 {
                widest = widest.max(bound);
            }
            if p == 0 {
                moved = moved.max((b - start[k]).abs());
            }
        }
    }
    Outcome {
        outside,
        widest,
        moved,
    }
}

fn step_tracked(plan: Plan, hyper: &Hyper, be: &mut Tracked) -> Vec<Vec<T>> {
    let mut arena = vec![T::default(); plan.counts().total()];
    let mut net = setup(plan, hyper, &mut arena, be, SEED).unwrap();
    let x: Vec<T> = input().iter().map(|&v| be.encode(Tag::act(0), v)).collect();
    let schedule = Schedule {
        rule: plan.rule,
        feedback_steps: hyper.feedback_steps,
    };
    let mut noise = Stream::new(SEED, 3);
    train_sample(&mut net, be, &schedule, &x, LABEL, &mut noise, false);
    vec![
        net.w.to_vec(),
        net.b.to_vec(),
        net.fw.to_vec(),
        net.fb.to_vec(),
        net.h.to_vec(),
        net.d.to_vec(),
        net.delta.to_vec(),
    ]
}

/// The initial forward weights (ideal values).
fn start_tracked(plan: Plan, hyper: &Hyper, be: &mut Tracked) -> Vec<f64> {
    let mut arena = vec![T::default(); plan.counts().total()];
    let net = setup(plan, hyper, &mut arena, be, SEED).unwrap();
    net.w.iter().map(|t| t.v).collect()
}

/// A smooth (table) and a piecewise-linear hidden activation for every rule.
const ACTIVATIONS: [Activation; 2] = [Activation::Tanh, Activation::LeakyRelu];

#[test]
fn every_rule_in_wide_fixed_point_agrees_with_float_within_the_lsb_bound() {
    for rule in Rule::ALL {
        for act in ACTIVATIONS {
            let o = compare(rule, act, &WIDE, &WIDE, true);
            assert!(
                o.outside.is_empty(),
                "{rule:?} {act:?}: {} values outside the bound, first {:?}",
                o.outside.len(),
                o.outside.first()
            );
            // The bound is a few dozen LSBs of Q5.26 at most, and the step moved the weights
            // by far more than it: the comparison is not vacuous.
            assert!(
                o.widest < 1e-6,
                "{rule:?} {act:?}: bound {} is loose",
                o.widest
            );
            assert!(
                o.moved > 1e3 * o.widest,
                "{rule:?} {act:?}: weights moved {} against bound {}",
                o.moved,
                o.widest
            );
            println!(
                "{:>10} {:>10}: widest bound {:.2e} ({:.1} LSB of Q5.26), largest weight change {:.2e}",
                rule.name(),
                act.name(),
                o.widest,
                o.widest * 2f64.powi(26),
                o.moved
            );
        }
    }
}

/// The same step in 16-bit formats leaves the wide bound: the check can fail.
#[test]
fn narrow_formats_fall_outside_the_wide_bound() {
    for rule in Rule::ALL {
        let narrow = compare(rule, Activation::Tanh, &NARROW, &WIDE, false);
        assert!(
            !narrow.outside.is_empty(),
            "{rule:?}: 16-bit formats stayed inside the 32-bit bound"
        );
    }
}

/// `(f(a), f'(a))` of `act` at the raw activation word `raw` (fraction `frac`) in the fixed
/// back end, decoded exactly.
fn fixed_act(act: Activation, fixed: &mut Fixed<i32>, frac: u8, raw: i32) -> (f64, f64) {
    let t = Tag::act(1);
    let scale = 2f64.powi(-i32::from(frac));
    let k = ActConsts::new(fixed);
    let mut table = [0i32; TANH_POINTS];
    fill_tanh_table(fixed, &mut table);
    let lk = k.at(fixed, &table, t);
    let (y, d) = act.apply(fixed, &k, &lk, &table, raw, t);
    (f64::from(y) * scale, f64::from(d) * scale)
}

/// The same forms in the float back end.
fn float_act(act: Activation, a: f32) -> (f64, f64) {
    let t = Tag::act(1);
    let mut float = Float::new();
    let k = ActConsts::new(&mut float);
    let mut table = [0f32; TANH_POINTS];
    fill_tanh_table(&mut float, &mut table);
    let lk = k.at(&mut float, &table, t);
    let (y, d) = act.apply(&mut float, &k, &lk, &table, a, t);
    (f64::from(y), f64::from(d))
}

/// The table form of `tanh` evaluated here in `f64` from the same 17 table values: flat
/// outside [-4, 4], else the segment whose left knot is the last at or below `a`.
fn tanh_table_f64(a: f64) -> (f64, f64) {
    let y = |k: usize| f64::from(TANH_TABLE[k]);
    if a <= -4.0 {
        return (y(0), 0.0);
    }
    if a >= 4.0 {
        return (y(TANH_POINTS - 1), 0.0);
    }
    let k = (((a + 4.0) * 2.0).floor() as usize).min(TANH_POINTS - 2);
    let x = (a - (-4.0 + 0.5 * k as f64)) * 2.0;
    let rise = y(k + 1) - y(k);
    (y(k) + rise * x, 2.0 * rise)
}

/// Fixed `tanh` (17-point table, linear interpolation) and `sigmoid` (clamp(a/4 + 1/2, 0, 1))
/// against the evaluation of the same table and form in `f64`, within one LSB of the
/// activation format, over every input word in [-5, 5] of Q3.12 and a sweep of Q7.24 (32-bit
/// words); the float back end's evaluation against the same `f64` values within its `f32`
/// rounding.
///
/// Derivation (forward error analysis, a fact of the trade): the input word is exact.
/// `tanh`: each table value is rounded to nearest (off by `e_0, e_1 ≤ ½` LSB); the segment
/// offset `x ∈ [0, 1)` is exact (a knot subtracted, a shift left by one); the interpolation
/// `y_0 + (y_1 − y_0) x = (1 − x) y_0 + x y_1` so carries `(1 − x) e_0 + x e_1 ≤ ½` LSB, plus
/// ½ LSB for rounding the product: 1 LSB. Its derivative `2 (y_1 − y_0)` is off by at most
/// 2 LSB. `sigmoid`: `a/4` rounded (½ LSB), `+ ½` and the clamp exact (the clamp is
/// 1-Lipschitz): ½ LSB; its derivative (1/4 or 0) is exact except within ½ LSB of a clamp,
/// where the rounded value may fall on the other side. The `f32` evaluation of a handful of
/// operations on values below 4 stays within 16 units of 2^-24 (IEEE 754-2019 rounding).
#[test]
fn fixed_tanh_and_sigmoid_within_one_lsb_of_the_float_table() {
    for (word, frac, stride) in [(16u8, 12u8, 1i64), (32, 24, 4099)] {
        let name = format!("Q{}.{frac}", word - frac - 1);
        let format = Format::new(word, frac).unwrap();
        let mut cfg = design(Rule::Bp, Activation::Tanh, &WIDE).1;
        cfg.classes[Class::Act.index()].format = format;
        let mut fixed = Fixed::<i32>::new(cfg, 1).unwrap();
        let lsb = format.lsb();
        let f32_err = 16.0 * U;
        let (lo, hi) = ((-5.0 / lsb) as i64, (5.0 / lsb) as i64);
        let (mut worst_tanh, mut worst_sig) = (0f64, 0f64);
        let mut raw = lo;
        while raw <= hi {
            let r = raw as i32;
            let a = raw as f64 * lsb;
            let (y, d) = fixed_act(Activation::Tanh, &mut fixed, frac, r);
            let (yr, dr) = tanh_table_f64(a);
            assert!(
                (y - yr).abs() <= lsb,
                "{name} tanh at {a}: fixed {y}, table {yr}"
            );
            assert!(
                (d - dr).abs() <= 2.0 * lsb,
                "{name} tanh' at {a}: fixed {d}, table {dr}"
            );
            worst_tanh = worst_tanh.max((y - yr).abs() / lsb);
            let (yf, df) = float_act(Activation::Tanh, a as f32);
            if a as f32 as f64 == a {
                assert!(
                    (yf - yr).abs() <= f32_err,
                    "float tanh at {a}: {yf}, table {yr}"
                );
                assert!(
                    (df - dr).abs() <= f32_err,
                    "float tanh' at {a}: {df}, table {dr}"
                );
            }

            let (y, d) = fixed_act(Activation::Sigmoid, &mut fixed, frac, r);
            let s = a / 4.0 + 0.5;
            let (yr, dr) = (
                s.clamp(0.0, 1.0),
                if s > 0.0 && s < 1.0 { 0.25 } else { 0.0 },
            );
            assert!(
                (y - yr).abs() <= 0.5 * lsb,
                "{name} sigmoid at {a}: fixed {y}, form {yr}"
            );
            if s.abs() > 0.5 * lsb && (s - 1.0).abs() > 0.5 * lsb {
                assert_eq!(d, dr, "{name} sigmoid' at {a}");
            }
            worst_sig = worst_sig.max((y - yr).abs() / lsb);
            let (yf, df) = float_act(Activation::Sigmoid, a as f32);
            assert!(
                (yf - yr).abs() <= f32_err,
                "float sigmoid at {a}: {yf}, form {yr}"
            );
            if s.abs() > f32_err && (s - 1.0).abs() > f32_err {
                assert_eq!(df, dr, "float sigmoid' at {a}");
            }
            raw += stride;
        }
        println!("{name}: worst tanh {worst_tanh:.3} LSB, sigmoid {worst_sig:.3} LSB");
        // Rounding the table shows: the one-LSB bound is not loose by orders of magnitude.
        assert!(worst_tanh > 0.2, "{name}: worst tanh {worst_tanh} LSB");
    }
}
