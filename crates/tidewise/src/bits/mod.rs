//! The bit-width estimator: the fewest word bits, and the integer/fraction split, per tensor
//! class at which the fixed arm stays within a tolerance of the float reference.
//!
//! # The search
//! The float arm does not depend on the fixed formats, so it runs once per seed (seeds
//! `run.seed`, `run.seed + 1`, ...); while it trains, an observer records the largest
//! magnitudes of the forward weights and biases, the feedback weights and the activations
//! (inputs, activations, pre-activations up to where the activation goes flat, output
//! displacements). A design point passes when the fixed arm's final test accuracy, averaged
//! over the seeds, is within the tolerance of the float arm's
//! (`mean(float − fixed) ≤ tolerance` points).
//!
//! The **reference** is generous: each searched class at the spec's format, widened to 16
//! bits by fraction bits when it is narrower; the accumulator at the spec's width, at least
//! 32 bits and at least 6 integer bits above the widest product fraction. It is run first;
//! when it misses the tolerance the report says so.
//!
//! 1. **One class at a time** (forward weights, forward biases, feedback weights when the
//!    rule has them, activations and targets), the other classes at the reference:
//!    * *integer bits*: start at the observed range, `m = floor(log2 max) + 1`, at a generous
//!      word (the reference's word for the class); while it passes, try up to two
//!      fewer integer bits (rare outliers may saturate harmlessly); if it fails, try up to
//!      three more. If none passes, the class keeps the reference format and the report says so;
//!    * *word length*: with `m` fixed, bisect the word between `m + 2` bits (one fraction bit)
//!      and the generous word (which passed), for the shortest passing word.
//! 2. **Jointly**: all classes at their recommendations at once, the accumulator at the
//!    reference width. The classes interact, so if this misses the tolerance, the class
//!    whose own gap at its recommendation is largest (from the runs of step 1, interpolated
//!    between the widths it ran, halved for every widening the class already had) gets one
//!    more fraction bit, and the design is run again, at most `max_widen` times. Every step
//!    is reported.
//! 3. **Accumulator**: word bits only (its fraction is that of the products), bisected between
//!    the widest product fraction plus one and the reference width, with the other classes at
//!    their (joint) recommendations; the passing point it ends on is the confirmed joint design.
//!
//! Each evaluation costs one fixed-arm run per seed, cached by design point and seed. The
//! cost is about `seeds × (classes × (2 + log2(words)) + log2(accumulator widths) + widening)`
//! runs, against the full grid of every class's formats (every word up to the generous one
//! for each of the six integer-bit counts the probe may visit) times every accumulator width
//! times the seeds, which the report gives for comparison.
//!
//! A **scan** for the plot (coarser, by default the first seed only) runs each class's word
//! lengths with round-to-nearest and with stochastic rounding for every class; points that
//! the search already ran are reused.
//!
//! The learning-rate multiplier, the η·δ step register and the noise stay at the spec's
//! formats (in the reference and in the recommendation); the search uses the spec's rounding.

mod observe;
mod report;
mod runner;

use std::collections::BTreeMap;
use std::fmt;

use serde::Serialize;
use tidewise_core::class::Class;
use tidewise_core::format::Format;
use tidewise_core::round::Rounding;

pub use observe::{int_bits_for, RangeObserver, Ranges};
pub use report::{recommendation_json, runs_csv, svg, table, Extras};
pub use runner::{Outcome, Purpose, Runner};

use crate::arms::{self, Prepared};
use crate::spec::{Design, Spec};

/// Why a search could not be made.
#[derive(Debug, thiserror::Error)]
pub enum BitsError {
    /// An option is outside what is allowed.
    #[error("{0}")]
    Options(String),
    /// A training run failed.
    #[error("{0}")]
    Run(String),
    /// The spec and the data disagree.
    #[error(transparent)]
    Arms(#[from] arms::RunError),
}

/// A searched class.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Knob {
    /// Forward weights.
    ForwardWeights,
    /// Forward biases.
    Biases,
    /// Feedback weights and biases.
    FeedbackWeights,
    /// Activations, targets and local errors.
    Activations,
    /// The multiply-accumulate register (word bits only).
    Accumulator,
}

/// The searched classes, in report order.
pub const KNOBS: [Knob; 5] = [
    Knob::ForwardWeights,
    Knob::Biases,
    Knob::FeedbackWeights,
    Knob::Activations,
    Knob::Accumulator,
];

impl Knob {
    /// The spec's name of the class.
    pub fn name(self) -> &'static str {
        match self {
            Knob::ForwardWeights => "forward_weights",
            Knob::Biases => "biases",
            Knob::FeedbackWeights => "feedback_weights",
            Knob::Activations => "activations",
            Knob::Accumulator => "accumulator",
        }
    }
    /// The core's class.
    pub fn class(self) -> Class {
        match self {
            Knob::ForwardWeights => Class::Forward,
            Knob::Biases => Class::Bias,
            Knob::FeedbackWeights => Class::Feedback,
            Knob::Activations => Class::Act,
            Knob::Accumulator => Class::Acc,
        }
    }
}

/// A fixed-arm design point: the searched formats, the accumulator width and the rounding of
/// every class; everything else comes from the spec.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Point {
    /// Forward weights.
    pub forward: Format,
    /// Forward biases.
    pub bias: Format,
    /// Feedback weights.
    pub feedback: Format,
    /// Activations.
    pub act: Format,
    /// Accumulator bits.
    pub acc: u8,
    /// Rounding of every class.
    pub rounding: Rounding,
}

impl Point {
    /// The point of a design as the spec gives it.
    pub fn of(design: &Design) -> Point {
        let f = |c: Class| design.fixed.classes[c.index()].format;
        Point {
            forward: f(Class::Forward),
            bias: f(Class::Bias),
            feedback: f(Class::Feedback),
            act: f(Class::Act),
            acc: design.fixed.acc_bits,
            rounding: design.fixed.classes[Class::Forward.index()].rounding,
        }
    }

    /// The format of `k` (`None` for the accumulator).
    pub fn format(&self, k: Knob) -> Option<Format> {
        match k {
            Knob::ForwardWeights => Some(self.forward),
            Knob::Biases => Some(self.bias),
            Knob::FeedbackWeights => Some(self.feedback),
            Knob::Activations => Some(self.act),
            Knob::Accumulator => None,
        }
    }

    /// Word bits of `k`.
    pub fn word(&self, k: Knob) -> u8 {
        self.format(k).map_or(self.acc, |f| f.word())
    }

    /// The same point with `k` at `f` (ignored for the accumulator).
    pub fn with(mut self, k: Knob, f: Format) -> Point {
        match k {
            Knob::ForwardWeights => self.forward = f,
            Knob::Biases => self.bias = f,
            Knob::FeedbackWeights => self.feedback = f,
            Knob::Activations => self.act = f,
            Knob::Accumulator => {}
        }
        self
    }

    /// The same point with an accumulator of `bits`.
    pub fn with_acc(mut self, bits: u8) -> Point {
        self.acc = bits;
        self
    }

    /// The same point with every class rounded by `r`.
    pub fn rounded(mut self, r: Rounding) -> Point {
        self.rounding = r;
        self
    }

    /// `design` with this point's formats.
    pub fn apply(&self, design: &Design) -> Design {
        let mut d = design.clone();
        let set = |d: &mut Design, c: Class, f: Format| d.fixed.classes[c.index()].format = f;
        set(&mut d, Class::Forward, self.forward);
        set(&mut d, Class::Bias, self.bias);
        set(&mut d, Class::Feedback, self.feedback);
        set(&mut d, Class::Act, self.act);
        d.fixed.acc_bits = self.acc;
        for c in d.fixed.classes.iter_mut() {
            c.rounding = self.rounding;
        }
        d
    }

    /// The fraction of the products the accumulator sums: `(W·h, feedback·h)`.
    pub fn product_fracs(&self) -> (u8, u8) {
        (
            self.forward.frac() + self.act.frac(),
            self.feedback.frac() + self.act.frac(),
        )
    }
}

impl fmt::Display for Point {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "W {} / b {} / B {} / A {} / acc {} / {}",
            self.forward,
            self.bias,
            self.feedback,
            self.act,
            self.acc,
            self.rounding.name()
        )
    }
}

/// The accuracy gap of a point over seeds, in percentage points (float − fixed).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct GapStats {
    /// Mean gap.
    pub mean: f64,
    /// Sample standard deviation (0 for one seed).
    pub std: f64,
    /// Smallest gap.
    pub min: f64,
    /// Largest gap.
    pub max: f64,
    /// Per seed, in seed order.
    pub per_seed: Vec<f64>,
    /// Mean fixed-arm accuracy, percent.
    pub fixed_accuracy: f64,
    /// Saturation events per attempted weight update, all seeds (0 when not known).
    pub saturations_per_update: f64,
    /// Share of weight updates lost to rounding, all seeds (0 when not known).
    pub lost_share: f64,
}

impl GapStats {
    /// Statistics of `gaps`, with the fixed arm's accuracies `fixed` (percent).
    pub fn of(gaps: &[f64], fixed: &[f64]) -> GapStats {
        let n = gaps.len().max(1) as f64;
        let mean = gaps.iter().sum::<f64>() / n;
        let var = if gaps.len() > 1 {
            gaps.iter().map(|g| (g - mean).powi(2)).sum::<f64>() / (n - 1.0)
        } else {
            0.0
        };
        GapStats {
            mean,
            std: var.sqrt(),
            min: gaps.iter().copied().fold(f64::INFINITY, f64::min),
            max: gaps.iter().copied().fold(f64::NEG_INFINITY, f64::max),
            per_seed: gaps.to_vec(),
            fixed_accuracy: fixed.iter().sum::<f64>() / fixed.len().max(1) as f64,
            saturations_per_update: 0.0,
            lost_share: 0.0,
        }
    }
}

/// How the search runs.
#[derive(Clone, Debug, PartialEq)]
pub struct Options {
    /// Allowed mean accuracy loss, percentage points (≥ 0).
    pub tolerance: f64,
    /// Seeds averaged (1 to 64).
    pub seeds: u32,
    /// Worker threads (≥ 1).
    pub jobs: usize,
    /// Run the scan for the plot.
    pub scan: bool,
    /// Seeds of the scan (1 to `seeds`).
    pub scan_seeds: u32,
    /// Word-length step of the scan (1 to 8 bits).
    pub scan_step: u8,
    /// Most one-bit widenings of the joint design.
    pub max_widen: u32,
}

impl Default for Options {
    fn default() -> Options {
        Options {
            tolerance: 1.0,
            seeds: 3,
            jobs: 1,
            scan: true,
            scan_seeds: 1,
            scan_step: 2,
            max_widen: 8,
        }
    }
}

impl Options {
    /// Checks every option, naming the value and what is allowed.
    pub fn validate(&self) -> Result<(), BitsError> {
        let bad = |s: String| Err(BitsError::Options(s));
        if !(self.tolerance >= 0.0 && self.tolerance.is_finite()) {
            return bad(format!(
                "--tolerance {}: allowed: a finite number of accuracy points, 0 or more (e.g. 1.0)",
                self.tolerance
            ));
        }
        if !(1..=64).contains(&self.seeds) {
            return bad(format!("--seeds {}: allowed: 1 to 64", self.seeds));
        }
        if self.jobs == 0 {
            return bad("--jobs 0: allowed: 1 or more worker threads".into());
        }
        if self.scan && !(1..=self.seeds).contains(&self.scan_seeds) {
            return bad(format!(
                "--scan-seeds {}: allowed: 1 to --seeds ({})",
                self.scan_seeds, self.seeds
            ));
        }
        if !(1..=8).contains(&self.scan_step) {
            return bad(format!(
                "--scan-step {}: allowed: 1 to 8 bits",
                self.scan_step
            ));
        }
        if self.max_widen > 32 {
            return bad(format!("--max-widen {}: allowed: 0 to 32", self.max_widen));
        }
        Ok(())
    }
}

/// One evaluation the search made, for the report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Step {
    /// What it was for: `reference`, `range`, `width`, `joint`, `widen`, `accumulator`.
    pub stage: &'static str,
    /// The class moved (or `joint`).
    pub class: &'static str,
    /// The design point, in words.
    pub point: String,
    /// The moved class's word bits.
    pub word_bits: u8,
    /// The gap over the seeds.
    pub gap: GapStats,
    /// Within the tolerance.
    pub pass: bool,
}

/// The outcome for one class.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ClassResult {
    /// Which class.
    pub class: Knob,
    /// Whether the rule uses it (bp and fa have no learned or no feedback weights to size).
    pub used: bool,
    /// Whether it was searched (else it keeps the spec's format).
    pub searched: bool,
    /// Word bits.
    pub word_bits: u8,
    /// Integer bits (sign excluded; for the accumulator, those above the W·h products'
    /// fraction).
    pub int_bits: i32,
    /// Fraction bits (for the accumulator: that of the W·h products).
    pub frac_bits: u8,
    /// Q notation (for the accumulator, the W·h products' view of the register).
    pub format: String,
    /// Largest magnitude the float arm produced (not for the accumulator).
    pub observed_max: Option<f64>,
    /// The gap at the recommendation with the other classes at the reference (the
    /// accumulator: with the others at their recommendations).
    pub gap: Option<GapStats>,
    /// What happened, in words.
    pub note: String,
}

/// One series of the scan.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Scan {
    /// Which class.
    pub class: Knob,
    /// The rounding of every class.
    pub rounding: &'static str,
    /// `(word bits, mean fixed accuracy %)`.
    pub points: Vec<(u8, f64)>,
}

/// Run counts.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RunCounts {
    /// Fixed-arm runs the recommendation needed.
    pub search_fixed: usize,
    /// Extra fixed-arm runs for the plot.
    pub scan_fixed: usize,
    /// Float-arm runs (one per seed).
    pub float: usize,
    /// Fixed-arm runs of the full grid over the same candidates and seeds.
    pub full_grid: u64,
    /// Fixed-arm runs of a one-class-at-a-time grid (every candidate of each class in turn).
    pub one_class_grid: u64,
}

/// What the search found.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Recommendation {
    /// Allowed mean gap, points.
    pub tolerance: f64,
    /// The seeds.
    pub seeds: Vec<u64>,
    /// Rounding of the search (the spec's).
    pub rounding: &'static str,
    /// The reference design point (see the module documentation).
    #[serde(skip)]
    pub reference: Point,
    /// The recommended design point.
    #[serde(skip)]
    pub point: Point,
    /// The recommended design.
    #[serde(skip)]
    pub design: Design,
    /// Float accuracy per seed, percent.
    pub float_accuracy: Vec<f64>,
    /// What the float arm's values spanned.
    pub ranges: Ranges,
    /// Per class, in [`KNOBS`] order.
    pub classes: Vec<ClassResult>,
    /// The joint design's gap.
    pub joint: GapStats,
    /// The joint design is within the tolerance.
    pub within_tolerance: bool,
    /// What the joint confirmation did, in words.
    pub joint_notes: Vec<String>,
    /// Every evaluation, in order.
    pub steps: Vec<Step>,
    /// The scan (empty without one).
    pub scans: Vec<Scan>,
    /// Float accuracy of the scan's seeds, percent.
    pub scan_float: f64,
    /// Run counts.
    pub runs: RunCounts,
    /// Every fixed-arm run, in the order made.
    #[serde(skip)]
    pub run_log: Vec<RunRow>,
}

/// One fixed-arm run.
#[derive(Clone, Debug, PartialEq)]
pub struct RunRow {
    /// `search` or `scan`.
    pub purpose: &'static str,
    /// The design point.
    pub point: Point,
    /// The seed.
    pub seed: u64,
    /// The run's outcome.
    pub outcome: Outcome,
    /// The float arm's accuracy of the seed, a fraction.
    pub float_accuracy: f64,
}

impl Recommendation {
    /// The result of one class.
    pub fn class(&self, k: Knob) -> Option<&ClassResult> {
        self.classes.iter().find(|c| c.class == k)
    }
}

/// Progress messages.
pub type Log<'l> = &'l mut dyn FnMut(&str);

fn q(m: i32, w: u8, like: Format) -> Option<Format> {
    let frac = i32::from(w) - 1 - m;
    let frac = u8::try_from(frac).ok()?;
    Format::new(w, frac)
        .ok()
        .map(|f| f.overflowing(like.overflow()))
}

struct Search<'r, 'a> {
    runner: &'r mut Runner<'a>,
    seeds: Vec<u64>,
    tolerance: f64,
    steps: Vec<Step>,
}

impl Search<'_, '_> {
    fn eval(
        &mut self,
        stage: &'static str,
        k: Option<Knob>,
        p: Point,
        log: Log<'_>,
    ) -> Result<(GapStats, bool), BitsError> {
        let g = self.runner.gap(p, &self.seeds, Purpose::Search)?;
        let pass = within(g.mean, self.tolerance);
        let (class, word) = match k {
            Some(k) => (k.name(), p.word(k)),
            None if stage == "reference" => ("reference", p.word(Knob::Accumulator)),
            None => ("joint", p.word(Knob::Accumulator)),
        };
        log(&format!(
            "{stage:>11} {class:<16} {p}: gap {:+.2} ± {:.2} points {}",
            g.mean,
            g.std,
            if pass { "pass" } else { "miss" }
        ));
        self.steps.push(Step {
            stage,
            class,
            point: p.to_string(),
            word_bits: word,
            gap: g.clone(),
            pass,
        });
        Ok((g, pass))
    }
}

/// Whether a mean gap is within the tolerance. Accuracies are multiples of one test sample,
/// so a mean can equal the tolerance exactly in real arithmetic and miss it by a rounding
/// error of the float sum; a margin far below one sample absorbs that.
pub fn within(mean_gap: f64, tolerance: f64) -> bool {
    mean_gap <= tolerance + 1e-9
}

/// Estimated per-class gap at `word` from the widths the class ran: the run itself, else a
/// straight line between the nearest widths below and above.
fn estimate(known: &BTreeMap<u8, f64>, word: u8) -> f64 {
    if let Some(&g) = known.get(&word) {
        return g;
    }
    let below = known.range(..word).next_back();
    let above = known.range(word..).next();
    match (below, above) {
        (Some((&a, &ga)), Some((&b, &gb))) => {
            ga + (gb - ga) * f64::from(word - a) / f64::from(b - a)
        }
        (Some((_, &g)), None) | (None, Some((_, &g))) => g,
        (None, None) => 0.0,
    }
}

fn scan_words(lo: u8, hi: u8, step: u8, rec: u8) -> Vec<u8> {
    let mut w: Vec<u8> = (lo..=hi).step_by(usize::from(step.max(1))).collect();
    for extra in [hi, rec] {
        if (lo..=hi).contains(&extra) && !w.contains(&extra) {
            w.push(extra);
        }
    }
    w.sort_unstable();
    w
}

/// The generous reference of a design (see the module documentation).
pub fn reference_point(design: &Design) -> Point {
    let wide = |f: Format| {
        if f.word() >= 16 {
            f
        } else {
            q(f.int_bits(), 16, f).unwrap_or(f)
        }
    };
    let spec = Point::of(design);
    let mut p = Point {
        forward: wide(spec.forward),
        bias: wide(spec.bias),
        feedback: wide(spec.feedback),
        act: wide(spec.act),
        ..spec
    };
    let (pw, pb) = p.product_fracs();
    let need = (pw.max(pb) + 7).min(64);
    p.acc = spec.acc.max(32).max(need);
    p
}

/// Runs the search for `spec` on `prepared` (see the module documentation).
pub fn search(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    opts: &Options,
    log: Log<'_>,
) -> Result<Recommendation, BitsError> {
    opts.validate()?;
    let plan = arms::plan(spec, design, prepared)?;
    let seeds: Vec<u64> = (0..u64::from(opts.seeds))
        .map(|i| spec.run.seed.wrapping_add(i))
        .collect();
    let mut runner = Runner::new(spec, design, prepared, opts.jobs)?;
    log(&format!(
        "float reference: {} seed(s), {} epochs each",
        seeds.len(),
        spec.run.epochs
    ));
    let ranges = runner.floats(&seeds)?;
    let float_accuracy: Vec<f64> = seeds
        .iter()
        .filter_map(|&s| runner.float_accuracy(s).map(|a| 100.0 * a))
        .collect();
    log(&format!(
        "float accuracy {:?}; largest magnitudes: forward weights {:.3}, biases {:.3}, feedback weights {:.3}, activations {:.3}",
        float_accuracy.iter().map(|a| format!("{a:.2}%")).collect::<Vec<_>>(),
        ranges.forward_weights,
        ranges.biases,
        ranges.feedback_weights,
        ranges.activations
    ));
    let reference = reference_point(design);
    log(&format!(
        "reference (the other classes while one is searched): {reference}"
    ));
    let has_feedback = plan.counts().feedback_weights > 0;
    let mut s = Search {
        runner: &mut runner,
        seeds: seeds.clone(),
        tolerance: opts.tolerance,
        steps: Vec::new(),
    };

    // The reference itself: when it misses, no class can be fixed by its own width alone.
    let (ref_gap, ref_pass) = s.eval("reference", None, reference, log)?;
    let mut reference_note = None;
    if !ref_pass {
        reference_note = Some(format!(
            "the reference design itself ({reference}) has a gap of {:+.2} ± {:.2} points, outside the tolerance: the limit lies in the classes held at the spec's formats (rate, step register, noise), in the training itself, or in the spread over the seeds",
            ref_gap.mean, ref_gap.std
        ));
    }

    // 1. One class at a time.
    let mut chosen = reference;
    let mut classes = Vec::new();
    let mut known: BTreeMap<Knob, BTreeMap<u8, f64>> = BTreeMap::new();
    let mut int_of: BTreeMap<Knob, i32> = BTreeMap::new();
    let mut generous: BTreeMap<Knob, u8> = BTreeMap::new();
    let mut full_grid: u64 = u64::from(opts.seeds);
    let mut one_class: u64 = 0;
    for k in [
        Knob::ForwardWeights,
        Knob::Biases,
        Knob::FeedbackWeights,
        Knob::Activations,
    ] {
        let Some(ref_fmt) = reference.format(k) else {
            continue;
        };
        let observed = match k {
            Knob::ForwardWeights => ranges.forward_weights,
            Knob::Biases => ranges.biases,
            Knob::FeedbackWeights => ranges.feedback_weights,
            _ => ranges.activations,
        };
        if k == Knob::FeedbackWeights && !has_feedback {
            classes.push(ClassResult {
                class: k,
                used: false,
                searched: false,
                word_bits: ref_fmt.word(),
                int_bits: ref_fmt.int_bits(),
                frac_bits: ref_fmt.frac(),
                format: ref_fmt.to_string(),
                observed_max: None,
                gap: None,
                note: format!("rule {} keeps no feedback weights", plan.rule.name()),
            });
            continue;
        }
        let w_gen = ref_fmt.word().max(16);
        generous.insert(k, w_gen);
        let m_obs = int_bits_for(observed).clamp(i32::from(w_gen) - 41, i32::from(w_gen) - 2);
        let (m_lo, m_hi) = (
            (m_obs - 2).max(i32::from(w_gen) - 41),
            (m_obs + 3).min(i32::from(w_gen) - 2),
        );
        let candidates: u64 = (m_lo..=m_hi)
            .map(|m| u64::from(w_gen) - (m + 2).max(2) as u64 + 1)
            .sum();
        full_grid = full_grid.saturating_mul(candidates);
        one_class += candidates;
        let at = |m: i32, w: u8| q(m, w, ref_fmt).map(|f| reference.with(k, f));
        let mut history: BTreeMap<(i32, u8), f64> = BTreeMap::new();
        let mut probe = |s: &mut Search, m: i32, log: Log<'_>| -> Result<bool, BitsError> {
            match at(m, w_gen) {
                Some(p) => {
                    let (g, pass) = s.eval("range", Some(k), p, log)?;
                    history.insert((m, w_gen), g.mean);
                    Ok(pass)
                }
                None => Ok(false),
            }
        };
        let mut m = m_obs;
        let mut found = probe(&mut s, m, log)?;
        if found {
            while m > m_lo && m > m_obs - 2 {
                if probe(&mut s, m - 1, log)? {
                    m -= 1;
                } else {
                    break;
                }
            }
        } else {
            for up in 1..=3 {
                if m_obs + up > m_hi {
                    break;
                }
                if probe(&mut s, m_obs + up, log)? {
                    m = m_obs + up;
                    found = true;
                    break;
                }
            }
        }
        if !found {
            let note = format!(
                "no integer-bit count from {} to {} reached the tolerance at {w_gen} bits: kept the reference {ref_fmt}",
                m_obs,
                (m_obs + 3).min(m_hi)
            );
            log(&format!("{}: {note}", k.name()));
            let g = s.runner.cached_gap(reference.with(k, ref_fmt), &seeds);
            let mut hist = BTreeMap::new();
            if let Some(g) = &g {
                hist.insert(ref_fmt.word(), g.mean);
            }
            known.insert(k, hist);
            int_of.insert(k, ref_fmt.int_bits());
            classes.push(ClassResult {
                class: k,
                used: true,
                searched: false,
                word_bits: ref_fmt.word(),
                int_bits: ref_fmt.int_bits(),
                frac_bits: ref_fmt.frac(),
                format: ref_fmt.to_string(),
                observed_max: Some(observed),
                gap: g,
                note,
            });
            continue;
        }
        // Bisect the word with m fixed: the shortest passing word in [m + 2, w_gen].
        let mut lo = u8::try_from((m + 2).max(2)).unwrap_or(2).min(w_gen);
        let mut hi = w_gen;
        while lo < hi {
            let mid = lo + (hi - lo) / 2;
            let Some(p) = at(m, mid) else { break };
            let (g, pass) = s.eval("width", Some(k), p, log)?;
            history.insert((m, mid), g.mean);
            if pass {
                hi = mid;
            } else {
                lo = mid + 1;
            }
        }
        let fmt = q(m, hi, ref_fmt).unwrap_or(ref_fmt);
        chosen = chosen.with(k, fmt);
        let gap = s.runner.cached_gap(reference.with(k, fmt), &seeds);
        known.insert(
            k,
            history
                .iter()
                .filter(|((mm, _), _)| *mm == m)
                .map(|((_, w), g)| (*w, *g))
                .collect(),
        );
        int_of.insert(k, m);
        classes.push(ClassResult {
            class: k,
            used: true,
            searched: true,
            word_bits: fmt.word(),
            int_bits: fmt.int_bits(),
            frac_bits: fmt.frac(),
            format: fmt.to_string(),
            observed_max: Some(observed),
            gap,
            note: format!(
                "integer bits {m} (observed range gave {m_obs}), word bisected in [{}, {w_gen}]",
                (m + 2).max(2)
            ),
        });
    }

    // 2. Joint confirmation, widening the worst class one fraction bit at a time.
    let mut joint_notes: Vec<String> = reference_note.into_iter().collect();
    let searched: Vec<Knob> = classes
        .iter()
        .filter(|c| c.used && c.class != Knob::Accumulator)
        .map(|c| c.class)
        .collect();
    let (mut jg, mut jpass) = s.eval("joint", None, chosen, log)?;
    let mut widened = 0;
    let mut times: BTreeMap<Knob, i32> = BTreeMap::new();
    while !jpass && widened < opts.max_widen {
        // A class's estimated own gap, halved for every widening it already had, so the
        // widening moves on when one class does not help.
        let score = |k: Knob, times: &BTreeMap<Knob, i32>| {
            let g = known.get(&k).map_or(0.0, |h| estimate(h, chosen.word(k)));
            g * 0.5f64.powi(times.get(&k).copied().unwrap_or(0))
        };
        let worst = searched
            .iter()
            .copied()
            .filter(|&k| chosen.word(k) < 32)
            .max_by(|&a, &b| {
                score(a, &times)
                    .total_cmp(&score(b, &times))
                    .then(b.cmp(&a))
            });
        let Some(k) = worst else { break };
        let Some(old) = chosen.format(k) else { break };
        let m = int_of.get(&k).copied().unwrap_or(old.int_bits());
        let Some(wider) = q(m, old.word() + 1, old) else {
            break;
        };
        let est = score(k, &times);
        *times.entry(k).or_insert(0) += 1;
        chosen = chosen.with(k, wider);
        widened += 1;
        let (g, pass) = s.eval("widen", Some(k), chosen, log)?;
        joint_notes.push(format!(
            "joint gap {:+.2} > {:.2}: widened {} (estimated own gap {est:+.2}, the largest) from {old} to {wider}: joint gap {:+.2} {}",
            jg.mean,
            opts.tolerance,
            k.name(),
            g.mean,
            if pass { "within the tolerance" } else { "still outside" }
        ));
        (jg, jpass) = (g, pass);
    }
    if jpass && widened == 0 {
        joint_notes.push(format!(
            "all classes at their recommendations at once (accumulator {} bits): joint gap {:+.2} ≤ {:.2}, no widening needed",
            chosen.acc, jg.mean, opts.tolerance
        ));
    } else if !jpass {
        joint_notes.push(format!(
            "after {widened} widening step(s) the joint gap is {:+.2}, outside the tolerance {:.2}: the recommendation below is the last design tried",
            jg.mean, opts.tolerance
        ));
    }
    for c in classes.iter_mut() {
        if let Some(f) = chosen.format(c.class) {
            if c.used && f.word() != c.word_bits {
                c.note
                    .push_str(&format!("; widened to {f} by the joint confirmation"));
                c.word_bits = f.word();
                c.int_bits = f.int_bits();
                c.frac_bits = f.frac();
                c.format = f.to_string();
            }
        }
    }

    // 3. The accumulator, with the others at their recommendations.
    let (pw, pb) = chosen.product_fracs();
    let widest = if has_feedback { pw.max(pb) } else { pw };
    let acc_ref = reference.acc;
    let acc_lo = (widest + 1).clamp(2, acc_ref);
    let acc_candidates = u64::from(acc_ref - acc_lo) + 1;
    full_grid = full_grid.saturating_mul(acc_candidates);
    one_class += acc_candidates;
    let mut acc_note = format!(
        "bisected in [{acc_lo}, {acc_ref}] with the other classes at their recommendations"
    );
    if jpass {
        let (mut lo, mut hi) = (acc_lo, acc_ref);
        while lo < hi {
            let mid = lo + (hi - lo) / 2;
            let (_, pass) = s.eval(
                "accumulator",
                Some(Knob::Accumulator),
                chosen.with_acc(mid),
                log,
            )?;
            if pass {
                hi = mid;
            } else {
                lo = mid + 1;
            }
        }
        chosen = chosen.with_acc(hi);
    } else {
        acc_note = format!(
            "kept the reference {acc_ref} bits: the joint design missed the tolerance before the accumulator search"
        );
    }
    let joint = s
        .runner
        .cached_gap(chosen, &seeds)
        .map_or(jg.clone(), |g| g);
    let within = within(joint.mean, opts.tolerance);
    joint_notes.push(format!(
        "confirmed jointly: {chosen}: gap {:+.2} ± {:.2} points over {} seed(s) ({})",
        joint.mean,
        joint.std,
        seeds.len(),
        if within {
            "within the tolerance"
        } else {
            "outside the tolerance"
        }
    ));
    let n = seeds.len() as f64;
    let sem = joint.std / n.sqrt();
    if n > 1.0 && sem > 0.5 * opts.tolerance {
        joint_notes.push(format!(
            "caution: the gap varies from seed to seed (std {:.2} points), so the mean of {} seeds has a standard error of {sem:.2} points, more than half the tolerance: decisions near the tolerance are noisy; use more seeds (--seeds) or a larger test split",
            joint.std,
            seeds.len()
        ));
    }
    let acc_m = i32::from(chosen.acc) - 1 - i32::from(pw);
    classes.push(ClassResult {
        class: Knob::Accumulator,
        used: true,
        searched: jpass,
        word_bits: chosen.acc,
        int_bits: acc_m,
        frac_bits: pw,
        format: format!("Q{acc_m}.{pw}"),
        observed_max: None,
        gap: Some(joint.clone()),
        note: format!(
            "{acc_note}; fraction of the W·h products {pw}{}",
            if has_feedback {
                format!(", of the feedback products {pb}")
            } else {
                String::new()
            }
        ),
    });
    let steps = std::mem::take(&mut s.steps);
    drop(s);

    // The scan for the plot.
    let mut scans = Vec::new();
    let scan_seeds: Vec<u64> = seeds
        .iter()
        .copied()
        .take(opts.scan_seeds as usize)
        .collect();
    if opts.scan {
        let mut wanted: Vec<(Knob, Rounding, u8, Point)> = Vec::new();
        for c in classes.iter().filter(|c| c.used) {
            let k = c.class;
            for r in [Rounding::NearestEven, Rounding::Stochastic] {
                if k == Knob::Accumulator {
                    for w in scan_words(acc_lo, acc_ref, opts.scan_step, chosen.acc) {
                        wanted.push((k, r, w, chosen.with_acc(w).rounded(r)));
                    }
                } else {
                    let (Some(ref_fmt), Some(&w_gen)) = (reference.format(k), generous.get(&k))
                    else {
                        continue;
                    };
                    let m = int_of.get(&k).copied().unwrap_or(ref_fmt.int_bits());
                    let lo = u8::try_from((m + 2).max(2)).unwrap_or(2).min(w_gen);
                    for w in scan_words(lo, w_gen, opts.scan_step, c.word_bits) {
                        if let Some(f) = q(m, w, ref_fmt) {
                            wanted.push((k, r, w, reference.with(k, f).rounded(r)));
                        }
                    }
                }
            }
        }
        let runs: Vec<(Point, u64)> = wanted
            .iter()
            .flat_map(|w| scan_seeds.iter().map(move |&s| (w.3, s)))
            .collect();
        log(&format!(
            "scan for the plot: {} design points × {} seed(s) (cached runs reused)",
            wanted.len(),
            scan_seeds.len()
        ));
        runner.ensure(&runs, Purpose::Scan)?;
        for k in KNOBS {
            for r in [Rounding::NearestEven, Rounding::Stochastic] {
                let points: Vec<(u8, f64)> = wanted
                    .iter()
                    .filter(|w| w.0 == k && w.1 == r)
                    .filter_map(|w| {
                        runner
                            .cached_gap(w.3, &scan_seeds)
                            .map(|g| (w.2, g.fixed_accuracy))
                    })
                    .collect();
                if !points.is_empty() {
                    scans.push(Scan {
                        class: k,
                        rounding: r.name(),
                        points,
                    });
                }
            }
        }
    }
    let scan_float = scan_seeds
        .iter()
        .filter_map(|&s| runner.float_accuracy(s))
        .sum::<f64>()
        * 100.0
        / scan_seeds.len().max(1) as f64;
    Ok(Recommendation {
        tolerance: opts.tolerance,
        seeds,
        rounding: reference.rounding.name(),
        reference,
        point: chosen,
        design: chosen.apply(design),
        float_accuracy,
        ranges,
        classes,
        joint,
        within_tolerance: within,
        joint_notes,
        steps,
        scans,
        scan_float,
        runs: RunCounts {
            search_fixed: runner.search_runs,
            scan_fixed: runner.scan_runs,
            float: runner.float_runs,
            full_grid,
            one_class_grid: one_class.saturating_mul(u64::from(opts.seeds)),
        },
        run_log: runner
            .log
            .iter()
            .map(|&(point, seed, outcome, purpose)| RunRow {
                purpose: match purpose {
                    Purpose::Search => "search",
                    Purpose::Scan => "scan",
                },
                point,
                seed,
                outcome,
                float_accuracy: runner.float_accuracy(seed).unwrap_or(f64::NAN),
            })
            .collect(),
    })
}
