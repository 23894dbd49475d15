//! Operations of one training step, and an energy estimate from a per-operation cost table.
//!
//! # Counting
//! [`census`] runs one real training step of the core (forward pass, output target,
//! the rule's `K` feedback steps, the hidden targets, the forward updates: the sequence of
//! [`tidewise_core::train::train_sample`]) through a counting back end, so the counts follow
//! the kernels exactly and cannot drift from them. It is the project's one operation count:
//! [`ops_per_sample`] costs it here, and the board report's MACs per step
//! (`onchip::macs`) are its vector-kernel terms ([`PhaseCounts::terms`]). Every operation is recorded with the
//! tensor classes of its operands, per phase, and again with the operands' layers
//! ([`Wire`]); [`energy`] turns each operand's layer and class into its width, so a design
//! with per-layer formats is costed at each layer's widths.
//!
//! What counts as what (assumptions):
//! * a multiply-accumulate term of a dot product is one multiply (its two operands' words) and
//!   one addition at the accumulator width; a bias is loaded into the accumulator as its
//!   start value (no addition);
//! * `mul`, `add` and `sub` of the back end are one multiply or one addition; an addition is
//!   as wide as its wider operand;
//! * a weight-row update `w[j] += (η·δ)·x[j]` is one multiply `η·δ` (rate × local error) for
//!   the row, then per element one multiply (step register × input) and one addition at the
//!   weight's word; weight decay `w[j] -= k·w[j]` is a multiply (rate × weight) and a
//!   subtraction per element. Updates are counted dense: the fixed back end skips zero inputs
//!   and zero steps, so for sparse data this is an upper bound;
//! * a noise value is one multiply of the noise amplitude by an 18-bit integer draw (the
//!   Irwin-Hall sum of four 16-bit draws lies in ±131070);
//! * shifts (power-of-two rates, the tanh table's `/0.5`, leaky slopes), comparisons
//!   (the table's segment search, clamps), rounding, saturation logic and random-number
//!   generation are not counted;
//! * activations are counted on their most expensive path (the network is evaluated with
//!   zero weights and inputs, which puts every tanh input inside the table, where it costs
//!   two subtractions, a multiply and an addition);
//! * memory traffic is the learned parameters only (forward weights, biases, feedback
//!   weights): every dot-product term whose operand is a parameter is a read, every updated
//!   or decayed parameter a read and a write. Activations and working vectors are assumed to
//!   sit in registers next to the datapath; their traffic is not counted;
//! * evaluation passes are not counted; a warm-up (feedback-only) sample costs less than the
//!   regular sample counted here.
//!
//! # Energy
//! [`EnergyTable::default_45nm`] holds the 45 nm, 0.9 V figures of "Computing's energy
//! problem (and what we can do about it)", IEEE ISSCC Digest of Technical Papers, 2014
//! (`docs/references.md` \[21\]):
//! integer add 0.03 pJ (8 bit) and 0.1 pJ (32 bit), integer multiply 0.2 / 3.1 pJ, float add
//! 0.4 / 0.9 pJ (16 / 32 bit), float multiply 1.1 / 3.7 pJ, a 64-bit SRAM read 10 / 20 /
//! 100 pJ from 8 KB / 32 KB / 1 MB. The table has no 16-bit integer entries.
//!
//! Integer widths between the table's points follow a power law through the two neighbouring
//! points (straight lines in log-log), which reproduces every point exactly. Between 8 and 32
//! bits the exponents are `ln(3.1/0.2)/ln 4 = 1.98` for multiplies (the quadratic law of an
//! array multiplier, whose partial products grow as width²: 15.5 against 16) and
//! `ln(0.1/0.03)/ln 4 = 0.87` for adds (the linear law of a ripple adder: 3.3 against 4). A
//! 16-bit operation is therefore interpolated, not published: the geometric mean of the 8- and
//! 32-bit figures, 0.787 pJ per multiply and 0.0548 pJ per add. Outside the table the ideal
//! exponents (2 and 1) continue from the nearest point. A multiply of an `a`-bit by a `b`-bit
//! operand costs as one of width `√(a·b)` (∝ `a·b` under the quadratic law).
//!
//! Memory: the energy per bit is the 64-bit read figure of the smallest SRAM in the table that
//! holds the design's whole storage (its silicon bits), divided by 64; a write is assumed to
//! cost a read. A design larger than the largest SRAM uses the largest (and says so); DRAM is
//! not modelled.
//!
//! The float arm's figure uses the 32-bit float add and multiply for every operation and
//! 32-bit parameter words, its SRAM row chosen by the float design's size.
//!
//! # The cost table file
//! ```toml
//! name = "my process"                 # optional
//! source = "where the numbers come from"  # optional
//! [integer_add]        # pJ per operation, by operand width in bits
//! 8 = 0.03
//! 32 = 0.1
//! [integer_mul]
//! 8 = 0.2
//! 32 = 3.1
//! [float_add]          # must hold a 32-bit entry (the float arm)
//! 16 = 0.4
//! 32 = 0.9
//! [float_mul]
//! 16 = 1.1
//! 32 = 3.7
//! [sram_read_64bit]    # pJ per 64-bit read, by SRAM capacity in KiB
//! 8 = 10.0
//! 32 = 20.0
//! 1024 = 100.0
//! ```
//! Every section is required, every value must be a positive finite number, every key a
//! positive integer (widths 1 to 64 bits).

use std::collections::BTreeMap;
use std::path::Path;

use serde::{Deserialize, Serialize};
use tidewise_core::backend::{Backend, Float};
use tidewise_core::class::{Class, Counters, Tag};
use tidewise_core::kernels::{forward, output_target, update_layer};
use tidewise_core::network::{Hyper, Net};
use tidewise_core::plan::Plan;
use tidewise_core::rules::{displacements, train_feedback};
use tidewise_core::train::Streams;

use crate::memory::Memory;
use crate::spec::Design;

/// Width of a noise draw ([`tidewise_core::rng::Stream::irwin_hall4`] lies in ±131070).
pub const DRAW_BITS: u32 = 18;

/// Parts of a training step, in the order they run.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Phase {
    /// The forward pass.
    Forward,
    /// The output target `d_L = β (y − h_L)`.
    OutputTarget,
    /// The rule's `K` feedback-training steps.
    Feedback,
    /// The hidden displacements and local errors.
    Targets,
    /// The forward-weight and bias updates (outer products).
    Update,
}

/// Every phase, in order.
pub const PHASES: [Phase; 5] = [
    Phase::Forward,
    Phase::OutputTarget,
    Phase::Feedback,
    Phase::Targets,
    Phase::Update,
];

impl Phase {
    /// Snake-case name.
    pub fn name(self) -> &'static str {
        match self {
            Phase::Forward => "forward",
            Phase::OutputTarget => "output_target",
            Phase::Feedback => "feedback",
            Phase::Targets => "targets",
            Phase::Update => "update",
        }
    }
}

/// An operand: a value of a tensor class, or a noise draw.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Operand {
    /// A value of this class ([`Class::Acc`]: the accumulator register).
    Class(Class),
    /// An integer noise draw of [`DRAW_BITS`] bits.
    Draw,
}

/// Operand slots: the eight classes and the draw.
pub const OPERANDS: usize = 9;

impl Operand {
    fn index(self) -> usize {
        match self {
            Operand::Class(c) => c.index(),
            Operand::Draw => 8,
        }
    }
    fn from_index(i: usize) -> Operand {
        Class::ALL
            .get(i)
            .map_or(Operand::Draw, |&c| Operand::Class(c))
    }
    /// Name for reports.
    pub fn name(self) -> &'static str {
        match self {
            Operand::Class(c) => c.name(),
            Operand::Draw => "noise_draw",
        }
    }
}

/// An operand with its layer: a tagged value, or a noise draw. What per-layer widths need.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Wire {
    /// A value of this tag (the accumulator, step and rate registers are global tags).
    Value(Tag),
    /// An integer noise draw of [`DRAW_BITS`] bits.
    Draw,
}

impl Wire {
    /// The operand class of the wire.
    pub fn operand(self) -> Operand {
        match self {
            Wire::Value(t) => Operand::Class(t.class),
            Wire::Draw => Operand::Draw,
        }
    }
}

/// Counts by pair of wires `(a, b)`, `a <= b`.
pub type WireTable = BTreeMap<(Wire, Wire), u64>;

/// Counts of one phase, by operand classes, and by operands with their layers.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct PhaseCounts {
    /// Terms of the vector kernels: dot-product terms, weights of a row update
    /// (`Backend::update`) and of a decay (`Backend::decay`), each counted whether or not the
    /// back end skips it (the MACs of a datapath without zero skipping).
    pub terms: u64,
    /// Multiplies of dot-product terms, `[a][b]` with `a <= b` (operand indices).
    pub mac: [[u64; OPERANDS]; OPERANDS],
    /// Other multiplies, `[a][b]` with `a <= b`.
    pub mul: [[u64; OPERANDS]; OPERANDS],
    /// Additions and subtractions, `[a][b]` with `a <= b`; accumulation is `[Acc][Acc]`.
    pub add: [[u64; OPERANDS]; OPERANDS],
    /// Parameter values read, per class.
    pub reads: [u64; 8],
    /// Parameter values written, per class.
    pub writes: [u64; 8],
    /// Every multiply (MACs included) by operands with their layers.
    pub wire_mul: WireTable,
    /// Every addition (accumulation included) by operands with their layers.
    pub wire_add: WireTable,
    /// Parameter values read or written, by tag.
    pub wire_traffic: BTreeMap<Tag, u64>,
}

fn pair(a: Operand, b: Operand) -> (usize, usize) {
    let (i, j) = (a.index(), b.index());
    (i.min(j), i.max(j))
}

impl PhaseCounts {
    /// Count in `table` for the operand pair `(a, b)` (order does not matter).
    pub fn get(table: &[[u64; OPERANDS]; OPERANDS], a: Operand, b: Operand) -> u64 {
        let (i, j) = pair(a, b);
        table[i][j]
    }
    fn bump(table: &mut [[u64; OPERANDS]; OPERANDS], a: Operand, b: Operand, n: u64) {
        let (i, j) = pair(a, b);
        table[i][j] += n;
    }
    /// Non-zero entries of `table` as `(a, b, count)`.
    pub fn entries(table: &[[u64; OPERANDS]; OPERANDS]) -> Vec<(Operand, Operand, u64)> {
        let mut out = Vec::new();
        for (i, row) in table.iter().enumerate() {
            for (j, &n) in row.iter().enumerate() {
                if n > 0 {
                    out.push((Operand::from_index(i), Operand::from_index(j), n));
                }
            }
        }
        out
    }
    fn sum(table: &[[u64; OPERANDS]; OPERANDS]) -> u64 {
        table.iter().flatten().sum()
    }
    /// Dot-product terms (MACs).
    pub fn macs(&self) -> u64 {
        Self::sum(&self.mac)
    }
    /// All multiplies, MACs included.
    pub fn multiplies(&self) -> u64 {
        Self::sum(&self.mac) + Self::sum(&self.mul)
    }
    /// All additions and subtractions, accumulation included.
    pub fn additions(&self) -> u64 {
        Self::sum(&self.add)
    }
    fn merge(&mut self, o: &PhaseCounts) {
        self.terms += o.terms;
        for (t, s) in [
            (&mut self.mac, &o.mac),
            (&mut self.mul, &o.mul),
            (&mut self.add, &o.add),
        ] {
            for (tr, sr) in t.iter_mut().zip(s) {
                for (a, b) in tr.iter_mut().zip(sr) {
                    *a += b;
                }
            }
        }
        for (a, b) in self.reads.iter_mut().zip(&o.reads) {
            *a += b;
        }
        for (a, b) in self.writes.iter_mut().zip(&o.writes) {
            *a += b;
        }
        for (t, s) in [
            (&mut self.wire_mul, &o.wire_mul),
            (&mut self.wire_add, &o.wire_add),
        ] {
            for (k, n) in s {
                *t.entry(*k).or_default() += n;
            }
        }
        for (k, n) in &o.wire_traffic {
            *self.wire_traffic.entry(*k).or_default() += n;
        }
    }
}

/// The operations of one training sample.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct OpCounts {
    /// The network counted.
    pub plan: Plan,
    /// Feedback steps per sample (K).
    pub feedback_steps: u8,
    /// Per phase, in [`PHASES`] order.
    pub phases: [PhaseCounts; 5],
}

impl OpCounts {
    /// All phases together.
    pub fn total(&self) -> PhaseCounts {
        let mut t = PhaseCounts::default();
        for p in &self.phases {
            t.merge(p);
        }
        t
    }
    /// One phase.
    pub fn phase(&self, p: Phase) -> &PhaseCounts {
        &self.phases[p as usize]
    }
}

fn is_param(c: Class) -> bool {
    matches!(c, Class::Forward | Class::Bias | Class::Feedback)
}

/// A float back end that records what it is asked to do.
#[derive(Clone)]
struct Counting {
    inner: Float,
    phase: usize,
    counts: [PhaseCounts; 5],
}

/// What an operation is counted as.
#[derive(Clone, Copy)]
enum Op {
    Mac,
    Mul,
    Add,
}

fn wire_pair(a: Wire, b: Wire) -> (Wire, Wire) {
    (a.min(b), a.max(b))
}

const ACC: Wire = Wire::Value(Tag::global(Class::Acc));

impl Counting {
    fn new() -> Counting {
        Counting {
            inner: Float::new(),
            phase: 0,
            counts: Default::default(),
        }
    }
    fn now(&mut self) -> &mut PhaseCounts {
        &mut self.counts[self.phase]
    }
    /// `n` operations of kind `op` on `a` and `b`, by class and by wire.
    fn op(&mut self, op: Op, a: Wire, b: Wire, n: u64) {
        let now = self.now();
        let (table, wires) = match op {
            Op::Mac => (&mut now.mac, &mut now.wire_mul),
            Op::Mul => (&mut now.mul, &mut now.wire_mul),
            Op::Add => (&mut now.add, &mut now.wire_add),
        };
        PhaseCounts::bump(table, a.operand(), b.operand(), n);
        *wires.entry(wire_pair(a, b)).or_default() += n;
    }
    /// Parameter traffic of `t` (nothing for values that are not parameters).
    fn traffic(&mut self, t: Tag, reads: u64, writes: u64) {
        if is_param(t.class) {
            let now = self.now();
            now.reads[t.class.index()] += reads;
            now.writes[t.class.index()] += writes;
            *now.wire_traffic.entry(t).or_default() += reads + writes;
        }
    }
    fn binary(&mut self, op: Op, xt: Tag, yt: Tag) {
        self.op(op, Wire::Value(xt), Wire::Value(yt), 1);
        self.traffic(xt, 1, 0);
        self.traffic(yt, 1, 0);
    }
}

impl Backend for Counting {
    type S = f32;

    fn encode(&mut self, t: Tag, x: f32) -> f32 {
        self.inner.encode(t, x)
    }
    fn decode(&self, t: Tag, v: f32) -> f32 {
        self.inner.decode(t, v)
    }
    fn set_layer(&mut self, layer: usize) {
        self.inner.set_layer(layer)
    }
    fn dot(
        &mut self,
        out: Tag,
        at: Tag,
        a: &[f32],
        stride: usize,
        bt: Tag,
        b: &[f32],
        bias: Option<(Tag, f32)>,
    ) -> f32 {
        let n = b.len() as u64;
        self.now().terms += n;
        self.op(Op::Mac, Wire::Value(at), Wire::Value(bt), n);
        self.op(Op::Add, ACC, ACC, n);
        self.traffic(at, n, 0);
        self.traffic(bt, n, 0);
        if let Some((c, _)) = bias {
            self.traffic(c, 1, 0);
        }
        self.inner.dot(out, at, a, stride, bt, b, bias)
    }
    fn mul(&mut self, out: Tag, xt: Tag, x: f32, yt: Tag, y: f32) -> f32 {
        self.binary(Op::Mul, xt, yt);
        self.inner.mul(out, xt, x, yt, y)
    }
    fn add(&mut self, out: Tag, xt: Tag, x: f32, yt: Tag, y: f32) -> f32 {
        self.binary(Op::Add, xt, yt);
        self.inner.add(out, xt, x, yt, y)
    }
    fn sub(&mut self, out: Tag, xt: Tag, x: f32, yt: Tag, y: f32) -> f32 {
        self.binary(Op::Add, xt, yt);
        self.inner.sub(out, xt, x, yt, y)
    }
    fn shift(&mut self, t: Tag, x: f32, k: i32) -> f32 {
        self.inner.shift(t, x, k)
    }
    fn convert(&mut self, out: Tag, xt: Tag, x: f32) -> f32 {
        self.inner.convert(out, xt, x)
    }
    fn cmp(&self, xt: Tag, x: f32, yt: Tag, y: f32) -> Option<core::cmp::Ordering> {
        self.inner.cmp(xt, x, yt, y)
    }
    fn update(
        &mut self,
        wt: Tag,
        row: &mut [f32],
        eta: f32,
        dt: Tag,
        delta: f32,
        xt: Tag,
        x: &[f32],
    ) {
        let n = row.len().min(x.len()) as u64;
        self.now().terms += n;
        let w = Wire::Value(wt);
        let rate = Wire::Value(Tag::global(Class::Rate));
        self.op(Op::Mul, rate, Wire::Value(dt), 1);
        self.op(
            Op::Mul,
            Wire::Value(Tag::global(Class::Step)),
            Wire::Value(xt),
            n,
        );
        self.op(Op::Add, w, w, n);
        self.traffic(wt, n, n);
        self.inner.update(wt, row, eta, dt, delta, xt, x)
    }
    fn decay(&mut self, wt: Tag, row: &mut [f32], k: f32) {
        let n = row.len() as u64;
        self.now().terms += n;
        let w = Wire::Value(wt);
        self.op(Op::Mul, Wire::Value(Tag::global(Class::Rate)), w, n);
        self.op(Op::Add, w, w, n);
        self.traffic(wt, n, n);
        self.inner.decay(wt, row, k)
    }
    fn noise(&mut self, out: Tag, amp: f32, z: i32) -> f32 {
        self.op(
            Op::Mul,
            Wire::Value(Tag::global(Class::Noise)),
            Wire::Draw,
            1,
        );
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
        false
    }
    fn raw_bits(v: f32) -> u32 {
        v.to_bits()
    }
}

/// Why an estimate could not be made.
#[derive(Debug, thiserror::Error)]
pub enum EnergyError {
    /// The network cannot be laid out.
    #[error("cannot lay out the network for counting: {0}")]
    Plan(String),
    /// The cost table file could not be read.
    #[error("cannot read energy table {path}: {source}")]
    Read {
        /// The file.
        path: String,
        /// The reason.
        source: std::io::Error,
    },
    /// The cost table is not valid.
    #[error("energy table {origin}: {message}")]
    Table {
        /// File name.
        origin: String,
        /// What is wrong, with the value and what is allowed.
        message: String,
    },
}

/// Counts the operations of one regular training sample of `plan` trained as `design` says
/// (its rule's `K = design.hyper.feedback_steps` feedback steps included).
pub fn ops_per_sample(plan: &Plan, design: &Design) -> Result<OpCounts, EnergyError> {
    census(plan, &design.hyper)
}

/// The operation census: one regular training sample of `plan` with the hyper-parameters
/// `hyper` (its rule's `K = hyper.feedback_steps` feedback steps included), run through the
/// counting back end phase by phase.
pub fn census(plan: &Plan, hyper: &Hyper) -> Result<OpCounts, EnergyError> {
    let mut be = Counting::new();
    let mut arena = vec![0f32; plan.counts().total()];
    let mut net = Net::new(*plan, hyper, &mut arena, &mut be)
        .map_err(|e| EnergyError::Plan(e.to_string()))?;
    be.counts = Default::default();
    let x = vec![0f32; plan.shape.inputs()];
    let mut streams = Streams::new(1);
    let rule = plan.rule;
    let k = if rule.learns_feedback() {
        hyper.feedback_steps
    } else {
        0
    };
    be.phase = Phase::Forward as usize;
    forward(&mut net, &mut be, &x);
    be.phase = Phase::OutputTarget as usize;
    output_target(&mut net, &mut be, 0);
    be.phase = Phase::Feedback as usize;
    for _ in 0..k {
        train_feedback(rule, &mut net, &mut be, &mut streams.noise);
    }
    be.phase = Phase::Targets as usize;
    displacements(rule, &mut net, &mut be);
    be.phase = Phase::Update as usize;
    for l in 1..=plan.layers() {
        update_layer(&mut net, &mut be, l);
    }
    Ok(OpCounts {
        plan: *plan,
        feedback_steps: k,
        phases: be.counts,
    })
}

/// Counts one sample by calling [`tidewise_core::train::train_sample`] itself (all phases
/// together): the check that [`ops_per_sample`] follows the core's own sequence.
pub fn ops_of_train_sample(plan: &Plan, design: &Design) -> Result<PhaseCounts, EnergyError> {
    let mut be = Counting::new();
    let mut arena = vec![0f32; plan.counts().total()];
    let mut net = Net::new(*plan, &design.hyper, &mut arena, &mut be)
        .map_err(|e| EnergyError::Plan(e.to_string()))?;
    be.counts = Default::default();
    let x = vec![0f32; plan.shape.inputs()];
    let mut streams = Streams::new(1);
    let hyper = design.hyper;
    let schedule = tidewise_core::train::Schedule {
        rule: plan.rule,
        feedback_steps: if plan.rule.learns_feedback() {
            hyper.feedback_steps
        } else {
            0
        },
    };
    tidewise_core::train::train_sample(
        &mut net,
        &mut be,
        &schedule,
        &x,
        0,
        &mut streams.noise,
        false,
    );
    let mut t = PhaseCounts::default();
    t.merge(&be.counts[0]);
    Ok(t)
}

/// Per-operation energies. See the module documentation for the file format and the laws.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct EnergyTable {
    /// What the table describes.
    pub name: String,
    /// Where its numbers come from.
    pub source: String,
    /// Integer add, `(width bits, pJ)`, ascending.
    pub integer_add: Vec<(u32, f64)>,
    /// Integer multiply, `(width bits, pJ)`, ascending.
    pub integer_mul: Vec<(u32, f64)>,
    /// Float add, `(width bits, pJ)`, ascending.
    pub float_add: Vec<(u32, f64)>,
    /// Float multiply, `(width bits, pJ)`, ascending.
    pub float_mul: Vec<(u32, f64)>,
    /// 64-bit SRAM read, `(capacity KiB, pJ)`, ascending.
    pub sram_read_64bit: Vec<(u64, f64)>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct TableFile {
    name: Option<String>,
    source: Option<String>,
    integer_add: Option<BTreeMap<String, toml::Value>>,
    integer_mul: Option<BTreeMap<String, toml::Value>>,
    float_add: Option<BTreeMap<String, toml::Value>>,
    float_mul: Option<BTreeMap<String, toml::Value>>,
    sram_read_64bit: Option<BTreeMap<String, toml::Value>>,
}

/// A value looked up in a table, and whether it is one of the table's own points.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Lookup {
    /// pJ.
    pub pj: f64,
    /// `true` when the width is one of the table's points; `false` when interpolated or
    /// extrapolated by the scaling law.
    pub published: bool,
}

/// `value` at `x` from `points` by the piecewise power law (see the module docs), with
/// `ideal` as the exponent outside the points.
pub fn power_law(points: &[(u32, f64)], x: f64, ideal: f64) -> Lookup {
    let (Some(&(x0, e0)), Some(&(xn, en))) = (points.first(), points.last()) else {
        return Lookup {
            pj: 0.0,
            published: false,
        };
    };
    if let Some(&(_, e)) = points.iter().find(|(w, _)| f64::from(*w) == x) {
        return Lookup {
            pj: e,
            published: true,
        };
    }
    let pj = if x < f64::from(x0) {
        e0 * (x / f64::from(x0)).powf(ideal)
    } else if x > f64::from(xn) {
        en * (x / f64::from(xn)).powf(ideal)
    } else {
        let mut v = e0;
        for w in points.windows(2) {
            let ((a, ea), (b, eb)) = (w[0], w[1]);
            let (a, b) = (f64::from(a), f64::from(b));
            if x > a && x < b {
                let k = (eb / ea).ln() / (b / a).ln();
                v = ea * (x / a).powf(k);
            }
        }
        v
    };
    Lookup {
        pj,
        published: false,
    }
}

impl EnergyTable {
    /// The 45 nm table of the module documentation.
    pub fn default_45nm() -> EnergyTable {
        EnergyTable {
            name: "45 nm CMOS, 0.9 V".into(),
            source: "\"Computing's energy problem (and what we can do about it)\", IEEE ISSCC Digest of Technical Papers, 2014".into(),
            integer_add: vec![(8, 0.03), (32, 0.1)],
            integer_mul: vec![(8, 0.2), (32, 3.1)],
            float_add: vec![(16, 0.4), (32, 0.9)],
            float_mul: vec![(16, 1.1), (32, 3.7)],
            sram_read_64bit: vec![(8, 10.0), (32, 20.0), (1024, 100.0)],
        }
    }

    /// Reads a table file.
    pub fn load(path: &Path) -> Result<EnergyTable, EnergyError> {
        let text = std::fs::read_to_string(path).map_err(|source| EnergyError::Read {
            path: path.display().to_string(),
            source,
        })?;
        EnergyTable::parse(&text, &path.display().to_string())
    }

    /// Parses table text; `origin` names it in errors.
    pub fn parse(text: &str, origin: &str) -> Result<EnergyTable, EnergyError> {
        let err = |message: String| EnergyError::Table {
            origin: origin.to_string(),
            message,
        };
        let file: TableFile = toml::from_str(text).map_err(|e| err(e.message().to_string()))?;
        fn points(
            section: &str,
            map: Option<BTreeMap<String, toml::Value>>,
            max_key: u64,
            unit: &str,
        ) -> Result<Vec<(u64, f64)>, String> {
            let map = map.ok_or_else(|| {
                format!("missing section [{section}] (pJ by {unit}; see the format in the docs)")
            })?;
            if map.is_empty() {
                return Err(format!("section [{section}] has no entries"));
            }
            let mut out = Vec::new();
            for (k, v) in map {
                let key: u64 = k
                    .parse()
                    .ok()
                    .filter(|&n| n >= 1 && n <= max_key)
                    .ok_or_else(|| {
                        format!("{section}.{k}: the key must be a {unit} from 1 to {max_key}")
                    })?;
                let pj = match v {
                    toml::Value::Float(f) => f,
                    toml::Value::Integer(i) => i as f64,
                    other => {
                        return Err(format!(
                            "{section}.{k} = {other}: expected a number of picojoules"
                        ))
                    }
                };
                if !(pj > 0.0 && pj.is_finite()) {
                    return Err(format!(
                        "{section}.{k} = {pj}: energies must be positive finite picojoules"
                    ));
                }
                out.push((key, pj));
            }
            out.sort_by_key(|p| p.0);
            Ok(out)
        }
        let widths = |section: &str, map| -> Result<Vec<(u32, f64)>, EnergyError> {
            points(section, map, 64, "width in bits")
                .map(|v| v.into_iter().map(|(k, e)| (k as u32, e)).collect())
                .map_err(err)
        };
        let integer_add = widths("integer_add", file.integer_add)?;
        let integer_mul = widths("integer_mul", file.integer_mul)?;
        let float_add = widths("float_add", file.float_add)?;
        let float_mul = widths("float_mul", file.float_mul)?;
        for (section, t) in [("float_add", &float_add), ("float_mul", &float_mul)] {
            if !t.iter().any(|(w, _)| *w == 32) {
                return Err(err(format!(
                    "section [{section}] needs a 32-bit entry (`32 = ...`): the float arm uses it"
                )));
            }
        }
        let sram = points(
            "sram_read_64bit",
            file.sram_read_64bit,
            1 << 30,
            "capacity in KiB",
        )
        .map_err(err)?;
        Ok(EnergyTable {
            name: file.name.unwrap_or_else(|| origin.to_string()),
            source: file.source.unwrap_or_default(),
            integer_add,
            integer_mul,
            float_add,
            float_mul,
            sram_read_64bit: sram,
        })
    }

    /// The table as TOML text in the file format.
    pub fn to_toml(&self) -> String {
        let mut s = format!("name = {:?}\nsource = {:?}\n", self.name, self.source);
        let mut section = |name: &str, rows: Vec<(u64, f64)>| {
            s.push_str(&format!("\n[{name}]\n"));
            for (k, v) in rows {
                s.push_str(&format!("{k} = {v:?}\n"));
            }
        };
        let widen = |v: &[(u32, f64)]| v.iter().map(|&(k, e)| (u64::from(k), e)).collect();
        section("integer_add", widen(&self.integer_add));
        section("integer_mul", widen(&self.integer_mul));
        section("float_add", widen(&self.float_add));
        section("float_mul", widen(&self.float_mul));
        section("sram_read_64bit", self.sram_read_64bit.clone());
        s
    }

    /// Integer add of a `width`-bit adder.
    pub fn int_add(&self, width: u32) -> Lookup {
        power_law(&self.integer_add, f64::from(width), 1.0)
    }

    /// Integer multiply of an `a`-bit by a `b`-bit operand (costed at width `√(a·b)`).
    pub fn int_mul(&self, a: u32, b: u32) -> Lookup {
        let w = (f64::from(a) * f64::from(b)).sqrt();
        power_law(&self.integer_mul, w, 2.0)
    }

    /// The SRAM row for a storage of `bytes`: `(capacity KiB, pJ per 64-bit read, beyond the
    /// table)`.
    pub fn sram_for(&self, bytes: u64) -> (u64, f64, bool) {
        let fit = self
            .sram_read_64bit
            .iter()
            .find(|(kib, _)| kib.saturating_mul(1024) >= bytes);
        match (fit, self.sram_read_64bit.last()) {
            (Some(&(k, e)), _) => (k, e, false),
            (None, Some(&(k, e))) => (k, e, true),
            (None, None) => (0, 0.0, true),
        }
    }

    fn float_at(points: &[(u32, f64)], width: u32) -> f64 {
        points
            .iter()
            .find(|(w, _)| *w == width)
            .map_or(0.0, |p| p.1)
    }
}

/// An energy figure per training sample.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct EnergyEstimate {
    /// Everything, pJ per training sample.
    pub total_pj: f64,
    /// Multiplies (MACs included).
    pub multiply_pj: f64,
    /// Additions (accumulation included).
    pub add_pj: f64,
    /// Parameter reads and writes.
    pub memory_pj: f64,
    /// Per phase, pJ, in [`PHASES`] order.
    pub by_phase: Vec<(String, f64)>,
    /// Storage the SRAM row was chosen for, bytes.
    pub storage_bytes: u64,
    /// The chosen SRAM capacity, KiB.
    pub sram_kib: u64,
    /// Its 64-bit read energy, pJ.
    pub sram_pj_per_64bit: f64,
    /// The storage exceeds the largest SRAM of the table.
    pub beyond_table: bool,
    /// Operations costed by the scaling law instead of a published point.
    pub interpolated: Vec<String>,
}

/// Bits of a fixed design's operand class (its class format, without per-layer overrides).
pub fn operand_bits(design: &Design, o: Operand) -> u32 {
    match o {
        Operand::Draw => DRAW_BITS,
        Operand::Class(c) => wire_bits(design, Wire::Value(Tag::global(c))),
    }
}

/// Bits of a fixed design's operand in its layer: the layer's format when it has one.
pub fn wire_bits(design: &Design, w: Wire) -> u32 {
    match w {
        Wire::Draw => DRAW_BITS,
        Wire::Value(t) if t.class == Class::Acc => u32::from(design.fixed.acc_bits),
        Wire::Value(t) => u32::from(design.fixed.format(t).word()),
    }
}

fn cost(
    ops: &OpCounts,
    storage_bytes: u64,
    table: &EnergyTable,
    mut mul: impl FnMut(Wire, Wire) -> Lookup,
    mut add: impl FnMut(Wire, Wire) -> Lookup,
    mut word: impl FnMut(Wire) -> u32,
) -> EnergyEstimate {
    let (sram_kib, sram_pj, beyond) = table.sram_for(storage_bytes);
    let per_bit = sram_pj / 64.0;
    let mut est = EnergyEstimate {
        total_pj: 0.0,
        multiply_pj: 0.0,
        add_pj: 0.0,
        memory_pj: 0.0,
        by_phase: Vec::new(),
        storage_bytes,
        sram_kib,
        sram_pj_per_64bit: sram_pj,
        beyond_table: beyond,
        interpolated: Vec::new(),
    };
    let note = |what: String, l: Lookup, est: &mut EnergyEstimate| {
        if !l.published && !est.interpolated.contains(&what) {
            est.interpolated.push(what);
        }
    };
    for (phase, counts) in PHASES.iter().zip(&ops.phases) {
        let mut e = 0.0;
        for (&(a, b), &n) in &counts.wire_mul {
            let l = mul(a, b);
            note(
                format!("multiply {}x{} bits: {:.4} pJ", word(a), word(b), l.pj),
                l,
                &mut est,
            );
            est.multiply_pj += n as f64 * l.pj;
            e += n as f64 * l.pj;
        }
        for (&(a, b), &n) in &counts.wire_add {
            let l = add(a, b);
            note(
                format!("add {} bits: {:.4} pJ", word(a).max(word(b)), l.pj),
                l,
                &mut est,
            );
            est.add_pj += n as f64 * l.pj;
            e += n as f64 * l.pj;
        }
        for (&t, &n) in &counts.wire_traffic {
            let m = (n * u64::from(word(Wire::Value(t)))) as f64 * per_bit;
            est.memory_pj += m;
            e += m;
        }
        est.by_phase.push((phase.name().to_string(), e));
    }
    est.total_pj = est.multiply_pj + est.add_pj + est.memory_pj;
    est
}

/// The energy of one training sample of a fixed-point design: integer operations at the
/// widths of each operand's layer and class, parameter traffic at their words.
pub fn energy(ops: &OpCounts, table: &EnergyTable, design: &Design) -> EnergyEstimate {
    let mem = Memory::of(&ops.plan, &design.fixed);
    let bits = |w| wire_bits(design, w);
    cost(
        ops,
        mem.total_bits.div_ceil(8),
        table,
        |a, b| table.int_mul(bits(a), bits(b)),
        |a, b| table.int_add(bits(a).max(bits(b))),
        bits,
    )
}

/// The energy of one training sample of the float arm: 32-bit float operations, 32-bit
/// parameter words, the SRAM row for every stored value at 4 bytes.
pub fn energy_float(ops: &OpCounts, table: &EnergyTable) -> EnergyEstimate {
    let (fm, fa) = (
        EnergyTable::float_at(&table.float_mul, 32),
        EnergyTable::float_at(&table.float_add, 32),
    );
    let published = |pj| Lookup {
        pj,
        published: true,
    };
    cost(
        ops,
        ops.plan.counts().total() as u64 * 4,
        table,
        |_, _| published(fm),
        |_, _| published(fa),
        |_| 32,
    )
}
