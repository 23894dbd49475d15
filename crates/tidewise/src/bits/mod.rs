//! The bit-width estimator: the fewest word bits, and the integer/fraction split, per tensor
//! class at which on-chip learning stays within a tolerance of the float reference, accepted
//! only with a stated confidence.
//!
//! # The protocol
//! A **replicate** is one training seed and one split seed; both arms run on it (same
//! initialisation, order, noise, test split), and its **paired gap** is float − fixed final
//! test accuracy in points. Replicates come in disjoint sets derived from `run.seed`
//! ([`seeds`]): the **search** set explores, each **confirmation** round gets a fresh set, and
//! an optional **re-check** set is only reported. A candidate chosen on the search set is
//! never judged on it: the best-looking of many noisy candidates is optimistic on the data
//! that chose it ("The Elements of Statistical Learning", Springer, 2nd ed., 2009, §7.10;
//! `docs/references.md` \[25\]).
//!
//! 1. **Float reference** on the search replicates, observing the largest values each class
//!    holds ([`observe`]), and the **reference design**: each searched class at the spec's
//!    format widened to 16 bits, the accumulator at least 32 bits and 6 integer bits above the
//!    widest product fraction; held classes (`--hold`) at their held format everywhere.
//! 2. **One class at a time** (the others at the reference): integer bits from the observed
//!    range (never fewer; up to three more if it fails) at the generous word, then a
//!    bisection of the word. A class passes when its mean paired gap, pooled over the search
//!    replicates, plus the margin a confirmation round would add (`t · sd / √n_confirm`), is
//!    at most **half** the tolerance: the classes' losses add up when combined.
//! 3. **Jointly**, all classes at once: the design goes on while its *predicted* bound (its
//!    mean search gap plus `t · sd / √n_confirm`) exceeds the tolerance, widening one class by
//!    one fraction bit at a time. Which class is decided by the **paired test-loss gap**, a
//!    smoother measure than accuracy: every class one bit wider is a candidate, all run on the
//!    search replicates, and the candidate with the smallest loss gap is taken; when none
//!    lowers it, widening stops. Then the **accumulator** word is bisected with the same
//!    prediction.
//! 4. **Confirmation**: the design runs on a fresh confirmation set and is accepted when the
//!    one-sided upper confidence bound on its mean paired gap is at most the tolerance
//!    ([`stats`]: the t-based non-inferiority test). If it misses, every searched class gets
//!    one more fraction bit and the accumulator one more integer bit (then step 3's widening
//!    while the search set predicts a miss) and
//!    the design is confirmed on the next fresh set, for at most `rounds` rounds, each at the
//!    Bonferroni-corrected level `1 − (1 − confidence)/rounds`.
//!
//! With `--per-layer`, each layer of the forward weights and of the activations is a class of
//! its own in steps 2 to 4 ([`Knob::LayerWeights`], [`Knob::LayerActivations`]). Per-layer
//! formats the input spec gives, and layers held with `--hold CLASS.LAYER=FORMAT`, are held
//! as given in every mode.
//!
//! Small test sets: one test sample is worth `100 / n_test` points; when that is more than
//! half the tolerance, every replicate also gets its own stratified split (`--splits auto`).
//!
//! Every run is journalled as it finishes ([`journal`]); a rerun resumes without repeating a
//! finished run and, runs being deterministic, ends with the same `recommendation.json`.
//! Fixed-arm runs may go to the sweep machinery or a Slurm array job ([`remote`]).
//!
//! The learning-rate multiplier, the η·δ step register and the noise stay at the spec's
//! formats; the search uses the spec's rounding.

pub mod journal;
pub mod observe;
mod point;
pub mod remote;
mod report;
mod runner;
mod search;
pub mod seeds;
pub mod stats;

use serde::Serialize;
use tidewise_core::format::Format;

pub use journal::{Journal, MANIFEST, RUNS};
pub use observe::{int_bits_for, RangeObserver, Ranges};
pub use point::{spec_format, Knob, Layers, Point, KNOBS, LAYERED};
pub use remote::{absolute_paths, Executor};
pub use report::{recommendation_json, recommended_spec, runs_csv, svg, table, Extras};
pub use runner::{Outcome, Purpose, Runner, Used};
pub use search::{reference_point, search};
pub use seeds::{Replicate, Role, Seeds};
pub use stats::Bound;

use crate::arms;

/// Why a search could not be made.
#[derive(Debug, thiserror::Error)]
pub enum BitsError {
    /// An option is outside what is allowed.
    #[error("{0}")]
    Options(String),
    /// A training run failed.
    #[error("{0}")]
    Run(String),
    /// The output folder cannot take this search.
    #[error("{0}")]
    Folder(String),
    /// The spec and the data disagree.
    #[error(transparent)]
    Arms(#[from] arms::RunError),
}

/// Whether every replicate gets its own split seed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Splits {
    /// Vary when one test sample is worth more than half the tolerance.
    Auto,
    /// Always the spec's split.
    Fixed,
    /// A split of its own for every replicate.
    Vary,
}

impl Splits {
    /// Parses `auto`, `fixed` or `vary`.
    pub fn parse(s: &str) -> Result<Splits, BitsError> {
        match s {
            "auto" => Ok(Splits::Auto),
            "fixed" => Ok(Splits::Fixed),
            "vary" => Ok(Splits::Vary),
            _ => Err(BitsError::Options(format!(
                "--splits {s}: allowed: auto, fixed, vary"
            ))),
        }
    }
}

/// A class the design cannot change (`--hold CLASS=FORMAT`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Hold {
    /// Which class.
    pub knob: Knob,
    /// Its format (formats).
    #[serde(skip)]
    pub format: Option<Format>,
    /// Its width (the accumulator).
    pub bits: Option<u8>,
}

impl Hold {
    /// Parses `CLASS=FORMAT` (`accumulator=BITS` for the accumulator), or
    /// `CLASS.LAYER=FORMAT` for one layer of forward_weights, biases or activations.
    pub fn parse(text: &str) -> Result<Hold, BitsError> {
        let names: Vec<&str> = KNOBS.iter().map(|k| k.name()).collect();
        let layered: Vec<&str> = LAYERED.iter().map(|k| k.name()).collect();
        let bad = |m: String| BitsError::Options(format!("--hold {text}: {m}"));
        let (class, value) = text.split_once('=').ok_or_else(|| {
            bad(format!(
                "expected CLASS=FORMAT or CLASS.LAYER=FORMAT, e.g. forward_weights=Q1.6 or forward_weights.2=Q1.6 (classes: {})",
                names.join(", ")
            ))
        })?;
        let class = class.trim();
        let knob = match class.split_once('.') {
            None => Knob::parse(class).ok_or_else(|| {
                bad(format!(
                    "unknown class `{class}`; allowed: {}",
                    names.join(", ")
                ))
            })?,
            Some((base, layer)) => {
                let b = Knob::parse(base)
                    .filter(|b| LAYERED.contains(b))
                    .ok_or_else(|| {
                        bad(format!(
                            "`{base}` has no per-layer formats; allowed with a layer: {}",
                            layered.join(", ")
                        ))
                    })?;
                let l: u8 = layer
                    .parse()
                    .ok()
                    .filter(|&l| usize::from(l) <= tidewise_core::class::MAX_LAYERS)
                    .ok_or_else(|| {
                        bad(format!(
                            "layer `{layer}`: allowed: a layer number, 1 to L for weights and biases, 0 (the input) to L for activations"
                        ))
                    })?;
                Knob::at_layer(b, l).ok_or_else(|| bad(format!("unknown class `{class}`")))?
            }
        };
        let value = value.trim();
        if knob == Knob::Accumulator {
            let bits: u8 = value
                .parse()
                .ok()
                .filter(|b| (2..=64).contains(b))
                .ok_or_else(|| {
                    bad(format!(
                        "accumulator width `{value}`: allowed: 2 to 64 bits"
                    ))
                })?;
            return Ok(Hold {
                knob,
                format: None,
                bits: Some(bits),
            });
        }
        let format = Format::parse(value).map_err(|e| bad(format!("format `{value}`: {e}")))?;
        Ok(Hold {
            knob,
            format: Some(format),
            bits: None,
        })
    }

    /// The held value as text.
    pub fn value(&self) -> String {
        match (self.format, self.bits) {
            (Some(f), _) => f.to_string(),
            (None, Some(b)) => b.to_string(),
            _ => String::new(),
        }
    }
}

/// How the search runs.
#[derive(Clone, Debug, PartialEq)]
pub struct Options {
    /// Allowed mean accuracy loss, percentage points (> 0).
    pub tolerance: f64,
    /// One-sided confidence of the acceptance, over all rounds (0.5 < c < 1).
    pub confidence: f64,
    /// Search replicates (2 to 64).
    pub search_seeds: u32,
    /// Replicates per confirmation round (3 to 256).
    pub confirm_seeds: u32,
    /// Most confirmation rounds (1 to 8).
    pub rounds: u32,
    /// Re-check replicates of the final design (0 to 256; reported, never decides).
    pub recheck: u32,
    /// Split seeds.
    pub splits: Splits,
    /// Held classes (or layers of classes).
    pub holds: Vec<Hold>,
    /// Search forward weights and activations per layer.
    pub per_layer: bool,
    /// Worker threads (≥ 1).
    pub jobs: usize,
    /// Run the scan for the plot.
    pub scan: bool,
    /// Word-length step of the scan (1 to 8 bits).
    pub scan_step: u8,
    /// Also scan with round-to-nearest (the search's rounding is always scanned).
    pub scan_nearest: bool,
    /// Most one-bit widenings, in the search and before each further round.
    pub max_widen: u32,
    /// Most training runs (both arms) the command may make (≥ 1).
    pub budget: usize,
}

impl Default for Options {
    fn default() -> Options {
        Options {
            tolerance: 1.0,
            confidence: 0.95,
            search_seeds: 4,
            confirm_seeds: 16,
            rounds: 3,
            recheck: 0,
            splits: Splits::Auto,
            holds: Vec::new(),
            per_layer: false,
            jobs: 1,
            scan: true,
            scan_step: 2,
            scan_nearest: false,
            max_widen: 8,
            budget: 5000,
        }
    }
}

impl Options {
    /// Checks every option, naming the value and what is allowed.
    pub fn validate(&self) -> Result<(), BitsError> {
        let bad = |s: String| Err(BitsError::Options(s));
        if !(self.tolerance > 0.0 && self.tolerance.is_finite()) {
            return bad(format!(
                "--tolerance {}: allowed: a finite number of accuracy points greater than 0 (e.g. 1.0)",
                self.tolerance
            ));
        }
        if !(self.confidence > 0.5 && self.confidence < 1.0) {
            return bad(format!(
                "--confidence {}: allowed: strictly between 0.5 and 1 (e.g. 0.95)",
                self.confidence
            ));
        }
        if !(2..=64).contains(&self.search_seeds) {
            return bad(format!(
                "--search-seeds {}: allowed: 2 to 64",
                self.search_seeds
            ));
        }
        if !(3..=256).contains(&self.confirm_seeds) {
            return bad(format!(
                "--confirm-seeds {}: allowed: 3 to 256",
                self.confirm_seeds
            ));
        }
        if !(1..=8).contains(&self.rounds) {
            return bad(format!("--rounds {}: allowed: 1 to 8", self.rounds));
        }
        if self.recheck > 256 {
            return bad(format!("--recheck {}: allowed: 0 to 256", self.recheck));
        }
        if self.jobs == 0 {
            return bad("--jobs 0: allowed: 1 or more worker threads".into());
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
        for (i, h) in self.holds.iter().enumerate() {
            if self.holds[..i].iter().any(|o| o.knob == h.knob) {
                return bad(format!(
                    "--hold {}: held twice; allowed: one --hold per class or layer",
                    h.knob.name()
                ));
            }
        }
        let least = self.least_runs();
        if least > self.budget {
            return bad(format!(
                "--search-seeds {} --confirm-seeds {} --rounds {} --recheck {}: at least {least} training runs (float and fixed of every search replicate, and of every confirmation round and re-check replicate), more than --budget {}: allowed: fewer seeds or rounds, or a larger --budget",
                self.search_seeds, self.confirm_seeds, self.rounds, self.recheck, self.budget
            ));
        }
        Ok(())
    }

    /// The fewest runs the options can need: both arms of the reference on the search
    /// replicates, of every confirmation round and of the re-check.
    pub fn least_runs(&self) -> usize {
        2 * (self.search_seeds as usize
            + self.rounds as usize * self.confirm_seeds as usize
            + self.recheck as usize)
    }

    /// The options that change the decision, for the journal's manifest (not the re-check,
    /// which only adds runs: a rerun with `--recheck` reuses the journal and adds them).
    pub fn manifest_json(&self) -> serde_json::Value {
        let mut v = serde_json::json!({
            "tolerance": self.tolerance,
            "confidence": self.confidence,
            "search_seeds": self.search_seeds,
            "confirm_seeds": self.confirm_seeds,
            "rounds": self.rounds,
            "splits": self.splits,
            "holds": self.holds.iter().map(|h| format!("{}={}", h.knob.name(), h.value())).collect::<Vec<_>>(),
            "scan": self.scan,
            "scan_step": self.scan_step,
            "scan_nearest": self.scan_nearest,
            "max_widen": self.max_widen,
            "budget": self.budget,
        });
        // Only when set: a uniform search's manifest is unchanged.
        if self.per_layer {
            v["per_layer"] = serde_json::Value::Bool(true);
        }
        v
    }

    /// Checks the held layers against a network of `weight_layers` weight layers.
    pub fn check_layers(&self, weight_layers: u8) -> Result<(), BitsError> {
        for h in &self.holds {
            h.knob.check_layer(weight_layers).map_err(|m| {
                BitsError::Options(format!("--hold {}={}: {m}", h.knob.name(), h.value()))
            })?;
        }
        Ok(())
    }

    /// The held format of `k`, if any.
    pub fn held(&self, k: Knob) -> Option<&Hold> {
        self.holds.iter().find(|h| h.knob == k)
    }
}

/// The paired gaps of a design point over replicates, in points (float − fixed).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct GapStats {
    /// Replicates.
    pub n: usize,
    /// Mean accuracy gap.
    pub mean: f64,
    /// Sample standard deviation (0 for one replicate).
    pub std: f64,
    /// Smallest gap.
    pub min: f64,
    /// Largest gap.
    pub max: f64,
    /// Per replicate, in replicate order.
    pub per_replicate: Vec<f64>,
    /// Mean paired test-loss gap (fixed − float).
    pub loss_gap: f64,
    /// Mean fixed-arm accuracy, percent.
    pub fixed_accuracy: f64,
    /// Saturation events per attempted weight update, all replicates.
    pub saturations_per_update: f64,
    /// Share of weight updates lost to rounding, all replicates.
    pub lost_share: f64,
}

impl GapStats {
    /// Statistics of `runs`.
    pub fn of(runs: &[Used]) -> GapStats {
        let gaps: Vec<f64> = runs.iter().map(Used::gap).collect();
        let b = Bound::of(&gaps, 0.95);
        let n = runs.len().max(1) as f64;
        let (mut sat, mut lost, mut upd) = (0u64, 0u64, 0u64);
        for r in runs {
            sat = sat.saturating_add(r.fixed.saturations);
            lost = lost.saturating_add(r.fixed.lost_updates);
            upd = upd.saturating_add(r.fixed.updates);
        }
        GapStats {
            n: runs.len(),
            mean: b.mean,
            std: b.sd,
            min: gaps.iter().copied().fold(f64::INFINITY, f64::min),
            max: gaps.iter().copied().fold(f64::NEG_INFINITY, f64::max),
            per_replicate: gaps,
            loss_gap: runs.iter().map(Used::loss_gap).sum::<f64>() / n,
            fixed_accuracy: runs.iter().map(|r| r.fixed.accuracy()).sum::<f64>() / n,
            saturations_per_update: sat as f64 / upd.max(1) as f64,
            lost_share: lost as f64 / upd.max(1) as f64,
        }
    }
}

/// One evaluation the search made, for the report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Step {
    /// `reference`, `range`, `width`, `joint`, `widen`, `accumulator`, `confirm`, `recheck`.
    pub stage: &'static str,
    /// The class moved (or `reference`, `joint`).
    pub class: &'static str,
    /// The design point, in words.
    pub point: String,
    /// The moved class's word bits.
    pub word_bits: u8,
    /// The gap over the replicates.
    pub gap: GapStats,
    /// Passed its criterion.
    pub pass: bool,
}

/// The outcome for one class.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ClassResult {
    /// Which class.
    pub class: Knob,
    /// Whether the rule uses it (bp and fa have no learned or no feedback weights to size).
    pub used: bool,
    /// Whether it was searched (else it keeps the spec's or the held format).
    pub searched: bool,
    /// Whether `--hold` fixed it.
    pub held: bool,
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
    /// The gap on the search replicates at the class's own recommendation, the other
    /// classes at the reference (the accumulator: with the others at their recommendations).
    pub gap: Option<GapStats>,
    /// What happened, in words.
    pub note: String,
}

/// One point of a scan curve: accuracy over the replicates at one width.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ScanPoint {
    /// Word bits.
    pub word_bits: u8,
    /// Mean fixed-arm accuracy, percent.
    pub mean: f64,
    /// Its sample standard deviation over the replicates.
    pub std: f64,
    /// Lowest replicate.
    pub min: f64,
    /// Highest replicate.
    pub max: f64,
}

/// One series of the scan.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Scan {
    /// Which class.
    pub class: Knob,
    /// The rounding of every class.
    pub rounding: &'static str,
    /// The curve.
    pub points: Vec<ScanPoint>,
}

/// One confirmation round.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Round {
    /// 1-based.
    pub round: u32,
    /// The design, in words.
    pub point: String,
    /// Its replicates' seeds.
    pub replicates: Vec<Replicate>,
    /// The bound at the corrected level.
    pub bound: Bound,
    /// Accepted.
    pub accepted: bool,
    /// Gap details.
    pub gap: GapStats,
}

/// Run counts.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RunCounts {
    /// Fixed-arm runs of the search.
    pub search_fixed: usize,
    /// Fixed-arm runs of the confirmation rounds.
    pub confirm_fixed: usize,
    /// Fixed-arm runs of the re-check.
    pub recheck_fixed: usize,
    /// Extra fixed-arm runs for the plot.
    pub scan_fixed: usize,
    /// Float-arm runs (one per replicate).
    pub float: usize,
    /// Fixed-arm runs of the full grid over the same candidates and search replicates.
    pub full_grid: u64,
    /// Fixed-arm runs of a one-class-at-a-time grid (every candidate of each class in turn).
    pub one_class_grid: u64,
}

/// What the search found.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Recommendation {
    /// Allowed mean gap, points.
    pub tolerance: f64,
    /// Confidence over all rounds.
    pub confidence: f64,
    /// Level of each round's bound.
    pub round_level: f64,
    /// Most rounds.
    pub max_rounds: u32,
    /// Rounding of the search (the spec's).
    pub rounding: &'static str,
    /// Test samples of the spec's split.
    pub test_samples: usize,
    /// Whether replicates have splits of their own.
    pub vary_splits: bool,
    /// Why (or why not).
    pub splits_note: String,
    /// The search replicates.
    pub search_replicates: Vec<Replicate>,
    /// The reference design point (see the module documentation).
    #[serde(skip)]
    pub reference: Point,
    /// The recommended design point.
    #[serde(skip)]
    pub point: Point,
    /// The recommended design.
    #[serde(skip)]
    pub design: crate::spec::Design,
    /// Float accuracy per search replicate, percent.
    pub float_accuracy: Vec<f64>,
    /// What the float arm's values spanned.
    pub ranges: Ranges,
    /// Per class (per layer with `--per-layer`), in [`KNOBS`] order.
    pub classes: Vec<ClassResult>,
    /// The final design on the search replicates.
    pub search_gap: GapStats,
    /// The confirmation rounds, in order.
    pub rounds: Vec<Round>,
    /// Whether a round accepted the design.
    pub accepted: bool,
    /// The re-check on further fresh replicates (never used to decide).
    pub recheck: Option<Round>,
    /// What the search did, in words.
    pub notes: Vec<String>,
    /// Every evaluation, in order.
    pub steps: Vec<Step>,
    /// The scan (empty without one).
    pub scans: Vec<Scan>,
    /// Float accuracy of the search replicates, mean, percent.
    pub scan_float: f64,
    /// Run counts.
    pub runs: RunCounts,
    /// Every fixed-arm run used, in the order first asked for.
    #[serde(skip)]
    pub run_log: Vec<Used>,
}

impl Recommendation {
    /// The result of one class.
    pub fn class(&self, k: Knob) -> Option<&ClassResult> {
        self.classes.iter().find(|c| c.class == k)
    }

    /// The accepting round, or the last one tried.
    pub fn decision(&self) -> Option<&Round> {
        self.rounds.last()
    }
}

/// Progress messages.
pub type Log<'l> = &'l mut dyn FnMut(&str);
