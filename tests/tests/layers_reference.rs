//! Per-layer formats against an `f64` computation of the same step.
//!
//! A 4-5-3-2 network whose weights, biases and activations have a different fraction in
//! every layer runs one forward pass and one training step (`bp`, `dtp`, `dtp-direct`, no
//! feedback-training step) in the fixed back end with round-to-nearest. An independent
//! `f64` implementation of the same equations, written here from the rules' published
//! definitions ("Learning representations by back-propagating errors", Nature 323, 1986;
//! "Difference Target Propagation", ECML PKDD 2015; "A Theoretical Framework for Target
//! Propagation", NeurIPS 2020; docs/references.md [1], [4], [5]), starts from the fixed arm's own initial parameters (decoded
//! exactly) and the real input, and carries with every value a bound on the fixed arm's
//! error. Every activation, derivative, displacement, local error, weight and bias of the
//! fixed arm must lie within its bound.
//!
//! # The bound
//! Standard forward error analysis (a fact of the trade): a result rounded to nearest into a
//! format with `f` fraction bits is off by at most half its LSB, `2^-(f+1)`; nothing else is
//! rounded (products and sums are exact, the accumulator is 64 bits wide, no value
//! saturates, which the test checks). With `x = x* + ε_x`, `|ε_x| <= e_x`:
//! * `x ± y` off by `e_x + e_y`, `x · y` off by `|x*| e_y + |y*| e_x + e_x e_y`, a dot product
//!   `Σ_k m_k x_k` by `Σ_k (|m_k*| e_x + |x_k*| e_m + e_m e_x)`; then the rounding adds half the
//!   destination's LSB;
//! * leaky-relu (`a`, or `a/4` rounded) is 1-Lipschitz: `e_h = e_a/4 + ½LSB` on the negative
//!   branch and `e_a` on the positive one when `|a*| > e_a` (the fixed arm takes the same
//!   branch); otherwise `e_a + ½LSB`, and its derivative may be 1/4 or 1 (`e_f' = 3/4`);
//! * the update `w += round_W(round_step(η δ) · x)` is exact but for the two roundings.
//!
//! The destination of each value is its layer's format, so every half-LSB in the bound is
//! that layer's. A kernel that wrote a layer-2 value in layer 1's format (a wrong tag) would
//! leave it off by a factor 2^(13 − 9) = 16 when read back as layer 2: the test runs such a
//! mis-tagged back end and checks that the comparison then fails.

use tidewise_core::activation::Activation;
use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig, LayerFormats};
use tidewise_core::class::{Class, Counters, Tag, CLASSES};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::network::{Hyper, Net};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::Stream;
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;
use tidewise_core::train::{setup, train_sample, Schedule};

const SIZES: [usize; 4] = [4, 5, 3, 2];
/// Activations `(word, frac)` of layers 0..=3 (input, two hidden, output).
const ACT: [(u8, u8); 4] = [(14, 12), (12, 9), (15, 13), (10, 7)];
/// Forward weights of layers 1..=3 (index 0 unused).
const WEIGHTS: [(u8, u8); 4] = [(0, 0), (11, 10), (15, 14), (9, 8)];
/// Biases of layers 1..=3.
const BIASES: [(u8, u8); 4] = [(0, 0), (10, 8), (14, 12), (8, 6)];
const LR: f32 = 0.125;
const INPUT: [f32; 4] = [0.8, 0.3, 0.55, 0.1];
const LABEL: usize = 1;

fn q(word: u8, frac: u8) -> Format {
    Format::new(word, frac).unwrap()
}

fn config() -> FixedConfig {
    let spec = |format| ClassSpec {
        format,
        rounding: Rounding::NearestEven,
    };
    let mut classes = [spec(q(16, 12)); CLASSES];
    classes[Class::Feedback.index()] = spec(q(16, 12));
    classes[Class::Rate.index()] = spec(q(16, 15));
    classes[Class::Step.index()] = spec(q(32, 28));
    let mut layers = LayerFormats::NONE;
    for l in 0..SIZES.len() {
        layers.activations[l] = Some(q(ACT[l].0, ACT[l].1));
        if l > 0 {
            layers.forward_weights[l] = Some(q(WEIGHTS[l].0, WEIGHTS[l].1));
            layers.biases[l] = Some(q(BIASES[l].0, BIASES[l].1));
        }
    }
    FixedConfig {
        classes,
        acc_bits: 64,
        acc_overflow: Overflow::Saturate,
        layers,
    }
}

fn plan(rule: Rule) -> Plan {
    Plan::new(
        Shape::new(&SIZES).unwrap(),
        rule,
        Activation::LeakyRelu,
        Activation::Identity,
    )
}

/// A real value of the ideal computation and a bound on the fixed arm's error.
#[derive(Clone, Copy, Debug)]
struct E {
    v: f64,
    e: f64,
}

impl E {
    fn exact(v: f64) -> E {
        E { v, e: 0.0 }
    }
    /// Rounded to nearest into a format of `frac` fraction bits.
    fn round(self, frac: u8) -> E {
        E {
            v: self.v,
            e: self.e + half_lsb(frac),
        }
    }
    fn add(self, o: E) -> E {
        E {
            v: self.v + o.v,
            e: self.e + o.e,
        }
    }
    fn sub(self, o: E) -> E {
        E {
            v: self.v - o.v,
            e: self.e + o.e,
        }
    }
    fn mul(self, o: E) -> E {
        E {
            v: self.v * o.v,
            e: self.v.abs() * o.e + o.v.abs() * self.e + self.e * o.e,
        }
    }
}

fn half_lsb(frac: u8) -> f64 {
    0.5 * 2f64.powi(-i32::from(frac))
}

fn dot(m: &[E], x: &[E]) -> E {
    m.iter()
        .zip(x)
        .fold(E::exact(0.0), |acc, (&a, &b)| acc.add(a.mul(b)))
}

/// Leaky-relu of `a` (of a layer with `frac` fraction bits): `(h, f')`.
fn leaky(a: E, frac: u8) -> (E, E) {
    if a.v.abs() > a.e {
        if a.v >= 0.0 {
            (a, E::exact(1.0))
        } else {
            (
                E {
                    v: a.v / 4.0,
                    e: a.e / 4.0 + half_lsb(frac),
                },
                E::exact(0.25),
            )
        }
    } else {
        let v = if a.v >= 0.0 { a.v } else { a.v / 4.0 };
        let d = if a.v >= 0.0 { 1.0 } else { 0.25 };
        (
            E {
                v,
                e: a.e + half_lsb(frac),
            },
            E { v: d, e: 0.75 },
        )
    }
}

/// The fixed arm's values decoded exactly with the *correct* tags.
fn decode(cfg: &FixedConfig, t: Tag, raw: &[i16]) -> Vec<f64> {
    let f = cfg.format(t).frac();
    raw.iter()
        .map(|&r| f64::from(r) * 2f64.powi(-i32::from(f)))
        .collect()
}

fn exact(v: Vec<f64>) -> Vec<E> {
    v.into_iter().map(E::exact).collect()
}

/// The ideal step and its bounds, from the decoded initial parameters.
struct Reference {
    h: Vec<Vec<E>>,
    fp: Vec<Vec<E>>,
    d: Vec<Vec<E>>,
    delta: Vec<Vec<E>>,
    w: Vec<Vec<E>>,
    b: Vec<Vec<E>>,
}

fn reference(rule: Rule, cfg: &FixedConfig, net: &Net<'_, i16>) -> Reference {
    let plan = net.plan;
    let top = plan.layers();
    let af = |l: usize| cfg.format(Tag::act(l)).frac();
    let rows =
        |m: &[E], cols: usize| -> Vec<Vec<E>> { m.chunks(cols).map(<[E]>::to_vec).collect() };
    let w: Vec<Vec<E>> = (0..=top)
        .map(|l| {
            if l == 0 {
                Vec::new()
            } else {
                exact(decode(cfg, Tag::weights(l), &net.w[plan.w_range(l)]))
            }
        })
        .collect();
    let b: Vec<Vec<E>> = (0..=top)
        .map(|l| {
            if l == 0 {
                Vec::new()
            } else {
                exact(decode(cfg, Tag::bias(l), &net.b[plan.node_range(l)]))
            }
        })
        .collect();
    // Forward: the input is rounded into layer 0's format when encoded.
    let mut h = vec![INPUT
        .iter()
        .map(|&x| E::exact(f64::from(x)).round(af(0)))
        .collect::<Vec<_>>()];
    let mut fp = vec![Vec::new()];
    for l in 1..=top {
        let (mut hl, mut fl) = (Vec::new(), Vec::new());
        for (r, row) in rows(&w[l], plan.n(l - 1)).iter().enumerate() {
            let a = dot(row, &h[l - 1]).add(b[l][r]).round(af(l));
            let (y, d) = if l == top {
                (a, E::exact(1.0))
            } else {
                leaky(a, af(l))
            };
            hl.push(y);
            fl.push(d);
        }
        h.push(hl);
        fp.push(fl);
    }
    // Output displacement β (y − h_L), β = 1, and δ_L.
    let mut d = vec![Vec::new(); top + 1];
    let mut delta = vec![Vec::new(); top + 1];
    d[top] = h[top]
        .iter()
        .enumerate()
        .map(|(j, &hj)| {
            let y = E::exact(if j == LABEL { 1.0 } else { 0.0 });
            y.sub(hj).round(af(top)).round(af(top))
        })
        .collect();
    let local = |d: &[E], fp: &[E], frac: u8| -> Vec<E> {
        d.iter()
            .zip(fp)
            .map(|(&a, &b)| a.mul(b).round(frac))
            .collect()
    };
    delta[top] = local(&d[top], &fp[top], af(top));
    for i in (1..top).rev() {
        d[i] = match rule {
            Rule::Bp => {
                // Column j of W_{i+1}.
                let wt = rows(&w[i + 1], plan.n(i));
                (0..plan.n(i))
                    .map(|j| {
                        let col: Vec<E> = wt.iter().map(|r| r[j]).collect();
                        dot(&col, &delta[i + 1]).round(af(i))
                    })
                    .collect()
            }
            Rule::DtpDirect => {
                let q = exact(decode(cfg, Tag::feedback(i), &net.fw[plan.fb_range(i)]));
                rows(&q, plan.n(top))
                    .iter()
                    .map(|r| dot(r, &d[top]).round(af(i)))
                    .collect()
            }
            Rule::Dtp => {
                let g = exact(decode(cfg, Tag::feedback(i), &net.fw[plan.fb_range(i)]));
                let c = exact(decode(cfg, Tag::feedback(i), &net.fb[plan.fbb_range(i)]));
                let inverse = |v: &[E]| -> Vec<E> {
                    rows(&g, plan.n(i + 1))
                        .iter()
                        .zip(&c)
                        .map(|(r, &cj)| leaky(dot(r, v).add(cj).round(af(i)), af(i)).0)
                        .collect()
                };
                let tau: Vec<E> = h[i + 1]
                    .iter()
                    .zip(&d[i + 1])
                    .map(|(&a, &b)| a.add(b).round(af(i + 1)))
                    .collect();
                let (g_tau, g_h) = (inverse(&tau), inverse(&h[i + 1]));
                g_tau
                    .iter()
                    .zip(&g_h)
                    .map(|(&a, &b)| a.sub(b).round(af(i)))
                    .collect()
            }
            other => panic!("no reference for {other:?}"),
        };
        delta[i] = local(&d[i], &fp[i], af(i));
    }
    // Updates: W_l += round_W(round_step(η δ) · h_{l−1}), b_l += round_b(round_step(η δ)).
    let eta = E::exact(f64::from(LR));
    let step_frac = cfg.format(Tag::global(Class::Step)).frac();
    let (mut w_new, mut b_new) = (w.clone(), b.clone());
    for l in 1..=top {
        let (wf, bf) = (
            cfg.format(Tag::weights(l)).frac(),
            cfg.format(Tag::bias(l)).frac(),
        );
        let cols = plan.n(l - 1);
        for (r, &e) in delta[l].iter().enumerate() {
            let s = eta.mul(e).round(step_frac);
            for (k, &x) in h[l - 1].iter().enumerate() {
                let slot = &mut w_new[l][r * cols + k];
                *slot = slot.add(s.mul(x).round(wf));
            }
            b_new[l][r] = b_new[l][r].add(s.round(bf));
        }
    }
    Reference {
        h,
        fp,
        d,
        delta,
        w: w_new,
        b: b_new,
    }
}

/// Largest `|fixed − ideal| / bound`, or the first value outside its bound.
fn compare(what: &str, got: &[f64], want: &[E]) -> Result<f64, String> {
    assert_eq!(got.len(), want.len(), "{what}");
    let mut worst = 0f64;
    for (j, (&g, w)) in got.iter().zip(want).enumerate() {
        // The f64 reference itself rounds; 1e-12 covers it.
        let bound = w.e + 1e-12;
        let off = (g - w.v).abs();
        if off > bound {
            return Err(format!(
                "{what}[{j}]: fixed {g}, ideal {}, off by {off:.3e} > bound {bound:.3e}",
                w.v
            ));
        }
        worst = worst.max(off / bound);
    }
    Ok(worst)
}

/// One forward pass and one training step of `rule` on back end `be`, checked against the
/// reference; `Ok` with the largest share of its bound that any value used.
fn check<B: Backend<S = i16>>(rule: Rule, mut be: B) -> Result<f64, String> {
    let cfg = config();
    let plan = plan(rule);
    let hyper = Hyper {
        lr: LR,
        lr_feedback: 0.01,
        beta: 1.0,
        sigma: 0.1,
        decay: 0.01,
        feedback_steps: 0,
        lr_fan_in: 0,
        regulariser: Default::default(),
    };
    let mut arena = vec![0i16; plan.counts().total()];
    let mut net = setup(plan, &hyper, &mut arena, &mut be, 11).unwrap();
    let mut start_arena = vec![0i16; plan.counts().total()];
    let mut start = Net::new(plan, &hyper, &mut start_arena, &mut be).unwrap();
    start.copy_params_from(&net);
    let x: Vec<i16> = INPUT.iter().map(|&v| be.encode(Tag::act(0), v)).collect();
    let schedule = Schedule {
        rule,
        feedback_steps: 0,
    };
    be.reset_counters();
    let mut noise = Stream::new(11, 0);
    train_sample(&mut net, &mut be, &schedule, &x, LABEL, &mut noise, false);
    let r = reference(rule, &cfg, &start);
    let mut worst = 0f64;
    let top = plan.layers();
    for l in 0..=top {
        let got = decode(&cfg, Tag::act(l), &net.h[plan.h_range(l)]);
        worst = worst.max(compare(&format!("h_{l}"), &got, &r.h[l])?);
    }
    for l in 1..=top {
        let nr = plan.node_range(l);
        let t = Tag::act(l);
        for (name, buf, want) in [
            ("f'", &net.fp[nr.clone()], &r.fp[l]),
            ("d", &net.d[nr.clone()], &r.d[l]),
            ("δ", &net.delta[nr.clone()], &r.delta[l]),
        ] {
            let got = decode(&cfg, t, buf);
            worst = worst.max(compare(&format!("{name}_{l}"), &got, want)?);
        }
        let got = decode(&cfg, Tag::weights(l), &net.w[plan.w_range(l)]);
        worst = worst.max(compare(&format!("W_{l}"), &got, &r.w[l])?);
        let got = decode(&cfg, Tag::bias(l), &net.b[nr]);
        worst = worst.max(compare(&format!("b_{l}"), &got, &r.b[l])?);
    }
    // The bound assumes that nothing saturated.
    if be.counters().total_saturations() > 0 {
        return Err(format!("{} saturations", be.counters().total_saturations()));
    }
    Ok(worst)
}

/// Which of the back end's operations a deliberately wrong kernel mis-tags.
#[derive(Clone, Copy, Debug)]
enum Site {
    /// The destination of dot products (linear maps, backpropagated displacements).
    Dot,
    /// The destination of products (local errors, the output displacement).
    Mul,
}

/// The fixed back end behind a kernel that swaps the tags of layers 1 and 2 of the
/// activations at one kind of site: what passing the wrong layer would do.
struct MisTagged {
    inner: Fixed<i16>,
    site: Site,
}

fn swap(t: Tag) -> Tag {
    match (t.class, t.layer) {
        (Class::Act, 1) => Tag::act(2),
        (Class::Act, 2) => Tag::act(1),
        _ => t,
    }
}

impl Backend for MisTagged {
    type S = i16;
    fn encode(&mut self, t: Tag, x: f32) -> i16 {
        self.inner.encode(t, x)
    }
    fn decode(&self, t: Tag, v: i16) -> f32 {
        self.inner.decode(t, v)
    }
    fn set_layer(&mut self, layer: usize) {
        self.inner.set_layer(layer)
    }
    fn dot(
        &mut self,
        out: Tag,
        at: Tag,
        a: &[i16],
        stride: usize,
        bt: Tag,
        b: &[i16],
        bias: Option<(Tag, i16)>,
    ) -> i16 {
        let out = match self.site {
            Site::Dot => swap(out),
            Site::Mul => out,
        };
        self.inner.dot(out, at, a, stride, bt, b, bias)
    }
    fn mul(&mut self, out: Tag, xt: Tag, x: i16, yt: Tag, y: i16) -> i16 {
        let out = match self.site {
            Site::Mul => swap(out),
            Site::Dot => out,
        };
        self.inner.mul(out, xt, x, yt, y)
    }
    fn add(&mut self, out: Tag, xt: Tag, x: i16, yt: Tag, y: i16) -> i16 {
        self.inner.add(out, xt, x, yt, y)
    }
    fn sub(&mut self, out: Tag, xt: Tag, x: i16, yt: Tag, y: i16) -> i16 {
        self.inner.sub(out, xt, x, yt, y)
    }
    fn shift(&mut self, t: Tag, x: i16, k: i32) -> i16 {
        self.inner.shift(t, x, k)
    }
    fn convert(&mut self, out: Tag, xt: Tag, x: i16) -> i16 {
        self.inner.convert(out, xt, x)
    }
    fn cmp(&self, xt: Tag, x: i16, yt: Tag, y: i16) -> Option<std::cmp::Ordering> {
        self.inner.cmp(xt, x, yt, y)
    }
    fn update(
        &mut self,
        wt: Tag,
        row: &mut [i16],
        eta: i16,
        dt: Tag,
        delta: i16,
        xt: Tag,
        x: &[i16],
    ) {
        self.inner.update(wt, row, eta, dt, delta, xt, x)
    }
    fn decay(&mut self, wt: Tag, row: &mut [i16], k: i16) {
        self.inner.decay(wt, row, k)
    }
    fn noise(&mut self, out: Tag, amp: i16, z: i32) -> i16 {
        self.inner.noise(out, amp, z)
    }
    fn counters(&self) -> &Counters {
        self.inner.counters()
    }
    fn reset_counters(&mut self) {
        self.inner.reset_counters()
    }
    fn fault(&self) -> Option<(usize, Class)> {
        None
    }
    fn is_fixed(&self) -> bool {
        true
    }
    fn raw_bits(v: i16) -> u32 {
        Fixed::<i16>::raw_bits(v)
    }
}

const RULES: [Rule; 3] = [Rule::Bp, Rule::Dtp, Rule::DtpDirect];

fn fixed() -> Fixed<i16> {
    Fixed::new(config(), 11).unwrap()
}

#[test]
fn one_step_within_each_layers_lsb_bound() {
    for rule in RULES {
        let worst = check(rule, fixed()).unwrap_or_else(|e| panic!("{}: {e}", rule.name()));
        println!("{}: largest error {:.2} of its bound", rule.name(), worst);
        // Not vacuous: some value uses a fair share of its bound.
        assert!(worst > 0.05, "{}: {worst}", rule.name());
    }
}

#[test]
fn a_mis_tagged_kernel_breaks_the_bound() {
    for rule in RULES {
        for site in [Site::Dot, Site::Mul] {
            let be = MisTagged {
                inner: fixed(),
                site,
            };
            match check(rule, be) {
                Ok(w) => panic!(
                    "{} with layers 1 and 2 swapped at {site:?}: still within the bound ({w:.2})",
                    rule.name()
                ),
                // The values themselves leave their bounds (not only the saturation check).
                Err(e) => {
                    println!("{} mis-tagged at {site:?}: {e}", rule.name());
                    assert!(e.contains("> bound"), "{e}");
                }
            }
        }
    }
}

#[test]
fn the_layers_really_differ() {
    // The design must give each layer another fraction, or swapping could not show.
    let cfg = config();
    let fracs: Vec<u8> = (0..4).map(|l| cfg.format(Tag::act(l)).frac()).collect();
    assert_eq!(fracs, [12, 9, 13, 7]);
    assert_ne!(
        cfg.format(Tag::weights(1)).frac(),
        cfg.format(Tag::weights(2)).frac()
    );
}
