//! A recording back end: the fixed back end with every multiply-accumulate and every row
//! update written down as it happens, so a step's arithmetic can be handed to an HDL test
//! bench without touching the core.

use std::cmp::Ordering;

use tidewise_core::backend::{Backend, Fixed, FixedConfig, Word};
use tidewise_core::class::{Class, Counters, Tag};
use tidewise_core::rng::Position;
use tidewise_core::round::{self, Rounding};

/// One `dot` call: `Σ a[i]·b[i] (+ bias)` into `out`.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DotRecord {
    /// Tag of the `a` operands (after the stride was applied).
    pub at: Tag,
    /// Tag of the `b` operands.
    pub bt: Tag,
    /// The bias and its tag, if any.
    pub bias: Option<(Tag, i64)>,
    /// Destination tag.
    pub out: Tag,
    /// The `a` words actually multiplied, in order.
    pub a: Vec<i64>,
    /// The `b` words.
    pub b: Vec<i64>,
    /// The rounded result.
    pub result: i64,
    /// The stochastic-rounding threshold of the bias alignment, reduced to the bits the
    /// comparison uses (0 when the site does not round stochastically).
    pub thr_bias: u64,
    /// The threshold of the result's rounding, likewise.
    pub thr_out: u64,
}

/// One `update` call: `row[j] += round(step · x[j])`, `step = round(η · δ)`.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct UpdateRecord {
    /// Tag of the row (its format and rounding).
    pub wt: Tag,
    /// Tag of δ.
    pub dt: Tag,
    /// Tag of the `x` operands.
    pub xt: Tag,
    /// η, a raw word of the rate class.
    pub eta: i64,
    /// δ.
    pub delta: i64,
    /// The `x` words.
    pub x: Vec<i64>,
    /// The row before the update.
    pub before: Vec<i64>,
    /// The row after it.
    pub after: Vec<i64>,
    /// The step register `round(η · δ)` (0 when `η · δ = 0`: the row is left alone).
    pub step: i64,
    /// The threshold of the step's rounding (0 when it is not stochastic).
    pub thr_step: u64,
    /// The threshold of each element's rounding (0 when it is not stochastic).
    pub thr: Vec<u64>,
}

/// A recorded operation, in the order the step performed them.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Record {
    /// A multiply-accumulate with one rounding.
    Dot(DotRecord),
    /// A row update.
    Update(UpdateRecord),
}

/// The fixed back end with a log of its `dot` and `update` calls.
#[derive(Clone, Debug)]
pub struct Recorder<W: Word> {
    inner: Fixed<W>,
    cfg: FixedConfig,
    /// The log since the last [`Recorder::take`].
    log: Vec<Record>,
}

impl<W: Word> Recorder<W> {
    /// Wraps `inner`, a back end built from `cfg`.
    pub fn new(inner: Fixed<W>, cfg: FixedConfig) -> Recorder<W> {
        Recorder {
            inner,
            cfg,
            log: Vec::new(),
        }
    }

    /// The records since the last call, leaving the log empty.
    pub fn take(&mut self) -> Vec<Record> {
        std::mem::take(&mut self.log)
    }

    /// Threshold position `n` in `lane` of the wrapped back end's key.
    fn at(&self, n: u64, lane: u32) -> Position {
        Position {
            key: self.inner.key(),
            n,
            lane,
        }
    }

    /// The threshold a site at position `at` compares a remainder of `s` bits with, when the
    /// site rounds stochastically and drops 1 to 64 bits (the core's module `rng` describes
    /// the positions); else 0.
    fn thr(&self, at: Position, mode: Rounding, s: i32) -> u64 {
        if mode == Rounding::Stochastic && (1..=64).contains(&s) {
            at.threshold_bits(s as u32)
        } else {
            0
        }
    }

    /// The step register value and its threshold as the fixed back end forms them for
    /// `η · δ` at position `pos`, by `round::requantize` (the core's reference path).
    fn step_value(&self, eta: i64, dt: Tag, delta: i64, pos: u64) -> (i64, u64) {
        let step = self.cfg.spec(Tag::global(Class::Step));
        let frac = i32::from(self.cfg.format(Tag::global(Class::Rate)).frac())
            + i32::from(self.cfg.format(dt).frac());
        let mut at = self.at(pos, 0);
        let thr = self.thr(at, step.rounding, frac - i32::from(step.format.frac()));
        let exact = eta * delta;
        if exact == 0 {
            return (0, thr);
        }
        let v = round::requantize(i128::from(exact), frac, step.format, step.rounding, &mut at);
        (v.raw, thr)
    }
}

fn words<W: Word>(v: &[W]) -> Vec<i64> {
    v.iter().map(|w| w.get()).collect()
}

impl<W: Word> Backend for Recorder<W> {
    type S = W;

    fn encode(&mut self, t: Tag, x: f32) -> W {
        self.inner.encode(t, x)
    }
    fn decode(&self, t: Tag, v: W) -> f32 {
        self.inner.decode(t, v)
    }
    fn set_layer(&mut self, layer: usize) {
        self.inner.set_layer(layer)
    }
    fn dot(
        &mut self,
        out: Tag,
        at: Tag,
        a: &[W],
        stride: usize,
        bt: Tag,
        b: &[W],
        bias: Option<(Tag, W)>,
    ) -> W {
        let pos = self.inner.draws();
        let result = self.inner.dot(out, at, a, stride, bt, b, bias);
        let pf = i32::from(self.cfg.format(at).frac()) + i32::from(self.cfg.format(bt).frac());
        let os = self.cfg.spec(out);
        let thr_out = self.thr(
            self.at(pos, 0),
            os.rounding,
            pf - i32::from(os.format.frac()),
        );
        let thr_bias = bias.map_or(0, |(t, _)| {
            let s = i32::from(self.cfg.format(t).frac()) - pf;
            self.thr(self.at(pos, 1), os.rounding, s)
        });
        let a_used: Vec<i64> = a
            .iter()
            .step_by(stride.max(1))
            .zip(b)
            .map(|(x, _)| x.get())
            .collect();
        let b_used = words(&b[..a_used.len()]);
        self.log.push(Record::Dot(DotRecord {
            at,
            bt,
            bias: bias.map(|(t, v)| (t, v.get())),
            out,
            a: a_used,
            b: b_used,
            result: result.get(),
            thr_bias,
            thr_out,
        }));
        result
    }
    fn mul(&mut self, out: Tag, xt: Tag, x: W, yt: Tag, y: W) -> W {
        self.inner.mul(out, xt, x, yt, y)
    }
    fn add(&mut self, out: Tag, xt: Tag, x: W, yt: Tag, y: W) -> W {
        self.inner.add(out, xt, x, yt, y)
    }
    fn sub(&mut self, out: Tag, xt: Tag, x: W, yt: Tag, y: W) -> W {
        self.inner.sub(out, xt, x, yt, y)
    }
    fn shift(&mut self, t: Tag, x: W, k: i32) -> W {
        self.inner.shift(t, x, k)
    }
    fn convert(&mut self, out: Tag, xt: Tag, x: W) -> W {
        self.inner.convert(out, xt, x)
    }
    fn cmp(&self, xt: Tag, x: W, yt: Tag, y: W) -> Option<Ordering> {
        self.inner.cmp(xt, x, yt, y)
    }
    fn update(&mut self, wt: Tag, row: &mut [W], eta: W, dt: Tag, delta: W, xt: Tag, x: &[W]) {
        let n = row.len().min(x.len());
        let before = words(&row[..n]);
        let pos = self.inner.draws();
        self.inner.update(wt, row, eta, dt, delta, xt, x);
        let (step, thr_step) = self.step_value(eta.get(), dt, delta.get(), pos);
        let ws = self.cfg.spec(wt);
        let sh = i32::from(self.cfg.format(Tag::global(Class::Step)).frac())
            + i32::from(self.cfg.format(xt).frac())
            - i32::from(ws.format.frac());
        let thr = (0..n as u64)
            .map(|j| self.thr(self.at(pos + 1 + j, 0), ws.rounding, sh))
            .collect();
        self.log.push(Record::Update(UpdateRecord {
            wt,
            dt,
            xt,
            eta: eta.get(),
            delta: delta.get(),
            x: words(&x[..n]),
            before,
            after: words(&row[..n]),
            step,
            thr_step,
            thr,
        }));
    }
    fn decay(&mut self, wt: Tag, row: &mut [W], k: W) {
        self.inner.decay(wt, row, k)
    }
    fn noise(&mut self, out: Tag, amp: W, z: i32) -> W {
        self.inner.noise(out, amp, z)
    }
    fn counters(&self) -> &Counters {
        self.inner.counters()
    }
    fn reset_counters(&mut self) {
        self.inner.reset_counters()
    }
    fn fault(&self) -> Option<(usize, Class)> {
        self.inner.fault()
    }
    fn is_fixed(&self) -> bool {
        true
    }
    fn raw_bits(v: W) -> u32 {
        Fixed::<W>::raw_bits(v)
    }
}
