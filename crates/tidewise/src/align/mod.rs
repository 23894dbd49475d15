//! `tidewise align`: how well each rule's updates line up with backpropagation and with
//! Gauss-Newton, in the fixed and in the float arm, measured at checkpoints of an ordinary
//! training run without changing it.
//!
//! At epoch 0, every `every` epochs and after the last epoch, the measurement takes the first
//! `samples` samples of the test split and, for each, runs the rule's step on a copy of the
//! network with a clone of the arm's back end (so the run's rounding stream and weights are
//! untouched; a measured run ends with the same digests as one without). It then decodes
//! the operating point to reals and works in `f64` with `nalgebra`. The Jacobians use the
//! decoded weights and the activation derivatives the network itself used (the core's
//! piecewise-linear forms): `J_{L,l} = ∂h_L/∂h_l`, `J_a = J_{L,l} diag(f'(a_l))`, and for
//! the weights of layer `l`, `J_W = ∂h_L/∂vec(W_l) = J_a ⊗ h_{l−1}ᵀ`. The output target is
//! `τ_L = h_L + β (y − h_L)` (one-hot `y`).
//!
//! The update `ΔW_l` is what the back end writes: `new − old` of the stored words, decoded,
//! in the fixed arm (so rounding noise and lost updates show up as misalignment); the rule's
//! exact `η δ_l h_{l−1}ᵀ` in the float arm. The fixed arm is also measured on its *intended*
//! update, `η δ_l h_{l−1}ᵀ` from its own words before the rounding into the weights (arm
//! `fixed-intended` in `alignment.csv` and the table, for the measures of the update:
//! `angle_bp`, `angle_gn`, `null_share`): where it matches the float arm and the stored
//! update does not, the gap is rounding noise, not the rule's geometry. The step is the training step without its
//! feedback-training steps (see [`sample::observe`]).
//!
//! # Measures (the `measure` column of `alignment.csv`)
//!
//! | name | layers | value |
//! |---|---|---|
//! | `angle_bp` | all | angle (degrees) between `ΔW_l` and the negative gradient of the sample's loss `½‖h_L − y‖²` w.r.t. `W_l`, `(J_aᵀ (y − h_L)) h_{l−1}ᵀ`, computed in `f64` from the decoded weights (not with the core's `bp` rule) |
//! | `angle_gn` | all | angle (degrees) between `ΔW_l` and the Gauss-Newton update, the minimum-norm change of `vec(W_l)` that moves the output to `τ_L` to first order: `J_W⁺ (τ_L − h_L) = vec((J_a⁺ (τ_L − h_L)) h_{l−1}ᵀ) / ‖h_{l−1}‖²` |
//! | `null_share` | all | `‖(I − J_W⁺ J_W) vec(ΔW_l)‖ / ‖vec(ΔW_l)‖`: the share of the update that does not move the output at all (to first order); samples with a zero update are left out |
//! | `angle_target_gn` | hidden | angle (degrees) between the propagated displacement `d_i = τ_i − h_i` and the Gauss-Newton displacement `−J_{L,i}⁺ (h_L − τ_L)` |
//! | `feedback_align` | hidden | angle (degrees) between the learned feedback, flattened, and its ideal `J_{L,i}ᵀ (J_{L,i} J_{L,i}ᵀ + γ I)⁻¹` with `γ = λ` (`rule.decay`, the damping of the σ²-normalised loss; in the core's folded rates `decay / σ²` for weight decay and `decay` for `dtp-drl`'s output noise), the minimiser of the difference reconstruction loss. The feedback is `Q_i` for `dtp-direct`, and for the learned inverses (`tp`, `dtp`, `dtp-drl`) the product of their Jacobians `∂g_k/∂h_k` from the output down to layer `i`. Only for rules with learned feedback |
//!
//! Layers are numbered as weight layers: layer `l` holds `W_l` and produces `h_l` (1 is the
//! first hidden layer, `L` the output). Each value is the mean over the measurement samples. A
//! zero vector has no direction; its angle is taken as 90°. Pseudo-inverses drop singular
//! values at or below `max(m, n) · ε · σ_max`.
//!
//! Sources: "A Theoretical Framework for Target Propagation", NeurIPS 2020 (Gauss-Newton
//! targets, the difference reconstruction loss and its damped pseudo-inverse fixed point,
//! and the observation that plain DTP's updates lie largely in the null space of `J_W`;
//! `docs/references.md` \[5\]).

pub mod linalg;
pub mod sample;

use std::time::Instant;

use serde::Serialize;
use tidewise_core::backend::Backend;
use tidewise_core::network::Net;
use tidewise_core::rules::Rule;

use crate::arms::{self, Arm, Checkpoint, Comparison, Observer, Prepared, Progress, RunError};
use crate::plot::{self, Panel, Series};
use crate::spec::{Design, Spec};

/// One alignment measure.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Measure {
    /// Angle between the update and the negative BP gradient.
    AngleBp,
    /// Angle between the update and the Gauss-Newton update.
    AngleGn,
    /// Share of the update in the null space of the output's weight Jacobian.
    NullShare,
    /// Angle between the learned feedback and its damped-pseudo-inverse ideal.
    FeedbackAlign,
    /// Angle between a hidden displacement and the Gauss-Newton displacement.
    AngleTargetGn,
}

impl Measure {
    /// Every measure, in report order.
    pub const ALL: [Measure; 5] = [
        Measure::AngleBp,
        Measure::AngleGn,
        Measure::NullShare,
        Measure::AngleTargetGn,
        Measure::FeedbackAlign,
    ];

    /// The name used in `alignment.csv` and by `--measure`.
    pub const fn name(self) -> &'static str {
        match self {
            Measure::AngleBp => "angle_bp",
            Measure::AngleGn => "angle_gn",
            Measure::NullShare => "null_share",
            Measure::FeedbackAlign => "feedback_align",
            Measure::AngleTargetGn => "angle_target_gn",
        }
    }

    /// Parses one of the names.
    pub fn parse(name: &str) -> Option<Measure> {
        Measure::ALL.iter().copied().find(|m| m.name() == name)
    }

    /// The unit of the value.
    pub const fn unit(self) -> &'static str {
        match self {
            Measure::NullShare => "share of the norm",
            _ => "degrees",
        }
    }

    /// Whether the measure is of the weight update (and so also taken on the fixed arm's
    /// intended update).
    pub const fn of_update(self) -> bool {
        matches!(
            self,
            Measure::AngleBp | Measure::AngleGn | Measure::NullShare
        )
    }

    /// The measures a rule has: all but `feedback_align` for rules without learned feedback.
    pub fn for_rule(rule: Rule) -> Vec<Measure> {
        Measure::ALL
            .iter()
            .copied()
            .filter(|&m| m != Measure::FeedbackAlign || rule.learns_feedback())
            .collect()
    }
}

/// Why an alignment measurement was refused or failed.
#[derive(Debug, thiserror::Error)]
pub enum ProbeError {
    /// `--every 0`.
    #[error("--every 0: alignment is measured every N epochs, N at least 1")]
    Every,
    /// `--samples 0`.
    #[error("--samples 0: at least 1 sample is needed (this spec's test split holds {test})")]
    NoSamples {
        /// Samples in the test split.
        test: usize,
    },
    /// More measured samples than the test split holds.
    #[error("--samples {asked}: the test split holds only {test} samples; allowed: 1 to {test} (or raise data.test_fraction / data.max_test)")]
    TooManySamples {
        /// Asked for.
        asked: usize,
        /// Samples in the test split.
        test: usize,
    },
    /// A measure name that does not exist.
    #[error("--measure {0:?}: unknown measure; allowed: angle_bp, angle_gn, null_share, angle_target_gn, feedback_align")]
    UnknownMeasure(String),
    /// `feedback_align` for a rule without learned feedback.
    #[error("--measure feedback_align: rule {0} has no learned feedback; the measure exists for tp, dtp, dtp-drl and dtp-direct")]
    NoFeedback(&'static str),
    /// The run itself failed.
    #[error(transparent)]
    Run(#[from] RunError),
}

/// What to measure, as given on the command line.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Options {
    /// Probe every this many epochs (and at 0 and after the last).
    pub every: u16,
    /// Probe samples: the first this many of the test split.
    pub samples: usize,
    /// Measure names; empty for every measure the rule has.
    pub measures: Vec<String>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            every: 1,
            samples: 20,
            measures: Vec::new(),
        }
    }
}

/// Validated options.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Settings {
    /// Probe every this many epochs.
    pub every: u16,
    /// Probe samples.
    pub samples: usize,
    /// The measures, in report order.
    pub measures: Vec<Measure>,
}

impl Options {
    /// Checks the options against the rule and the size of the test split.
    pub fn validate(&self, rule: Rule, test_len: usize) -> Result<Settings, ProbeError> {
        if self.every == 0 {
            return Err(ProbeError::Every);
        }
        if self.samples == 0 {
            return Err(ProbeError::NoSamples { test: test_len });
        }
        if self.samples > test_len {
            return Err(ProbeError::TooManySamples {
                asked: self.samples,
                test: test_len,
            });
        }
        let mut measures = Vec::new();
        for name in self.measures.iter().flat_map(|s| s.split(',')) {
            let name = name.trim();
            let m = Measure::parse(name).ok_or_else(|| ProbeError::UnknownMeasure(name.into()))?;
            if m == Measure::FeedbackAlign && !rule.learns_feedback() {
                return Err(ProbeError::NoFeedback(rule.name()));
            }
            if !measures.contains(&m) {
                measures.push(m);
            }
        }
        if measures.is_empty() {
            measures = Measure::for_rule(rule);
        }
        measures.sort_by_key(|m| Measure::ALL.iter().position(|a| a == m));
        Ok(Settings {
            every: self.every,
            samples: self.samples,
            measures,
        })
    }
}

/// Which update of an arm a row measures.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Update {
    /// What the back end stored (`new − old`; the float arm's exact step).
    Stored,
    /// The fixed arm's step before its rounding into the weights ([`sample::Point::intended`]).
    Intended,
}

/// One line of `alignment.csv`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Row {
    /// Epochs done when measured (0: before training).
    pub epoch: u16,
    /// The arm.
    pub arm: Arm,
    /// The update measured: the stored one, or the fixed arm's intended one.
    pub update: Update,
    /// Weight layer, 1-based.
    pub layer: usize,
    /// The measure.
    pub measure: Measure,
    /// Mean over the measurement samples (NaN when no sample defined it).
    pub value: f64,
}

impl Row {
    /// The `arm` column: `fixed`, `float`, or `fixed-intended` for the intended update.
    pub fn label(&self) -> &'static str {
        label(self.arm, self.update)
    }
}

fn label(arm: Arm, update: Update) -> &'static str {
    match (arm, update) {
        (Arm::Fixed, Update::Intended) => "fixed-intended",
        (arm, _) => arm.name(),
    }
}

/// The measurement as an [`Observer`] of [`arms::run`]: collects [`Row`]s at its checkpoints.
#[derive(Clone, Debug)]
pub struct Prober {
    plan: Settings,
    last_epoch: u16,
    rows: Vec<Row>,
    seconds: f64,
}

impl Prober {
    /// A prober for a run of `epochs` epochs.
    pub fn new(plan: Settings, epochs: u16) -> Prober {
        Prober {
            plan,
            last_epoch: epochs,
            rows: Vec::new(),
            seconds: 0.0,
        }
    }

    /// Whether epoch `e` is probed: 0, every multiple of `every`, and the last.
    pub fn due(&self, epoch: u16) -> bool {
        epoch.is_multiple_of(self.plan.every.max(1)) || epoch == self.last_epoch
    }

    /// The rows so far.
    pub fn rows(&self) -> &[Row] {
        &self.rows
    }

    /// Wall-clock seconds spent probing.
    pub fn seconds(&self) -> f64 {
        self.seconds
    }
}

impl Observer for Prober {
    fn checkpoint<B: Backend + Clone>(&mut self, at: Checkpoint<'_, B>) {
        if !self.due(at.epoch) {
            return;
        }
        let t = Instant::now();
        let rows = measure_checkpoint(&at, &self.plan);
        self.rows.extend(rows);
        self.seconds += t.elapsed().as_secs_f64();
    }
}

/// The rows of one checkpoint.
/// The damping γ of the learned feedback's ideal `Jᵀ (J Jᵀ + γ I)⁻¹`, as derived in the
/// rules' documentation, from the core's folded rates: their `decay` for `dtp-drl` with the
/// output-noise regulariser (both terms of its loss carry σ²), `decay / σ²` with weight decay
/// (the data term carries σ², the decay does not). Both equal the spec's `rule.decay`
/// ([`crate::spec::feedback_rates`]) up to the rates' representation.
fn damping(rule: tidewise_core::rules::Rule, hyper: &tidewise_core::network::Hyper) -> f64 {
    let (lambda, sigma) = (f64::from(hyper.decay), f64::from(hyper.sigma));
    let output_noise = hyper.regulariser == tidewise_core::network::Regulariser::OutputNoise;
    if rule == tidewise_core::rules::Rule::DtpDrl && output_noise {
        lambda
    } else {
        lambda / (sigma * sigma)
    }
}

fn measure_checkpoint<B: Backend + Clone>(at: &Checkpoint<'_, B>, plan: &Settings) -> Vec<Row> {
    let mut be = at.backend.clone();
    let mut arena = vec![B::S::default(); at.plan.counts().total()];
    let Ok(mut copy) = Net::new(at.plan, at.hyper, &mut arena, &mut be) else {
        return Vec::new();
    };
    copy.k = at.net.k;
    copy.table.copy_from_slice(at.net.table);
    let beta = f64::from(at.hyper.beta);
    let rule = at.schedule.rule;
    let gamma = damping(rule, at.hyper);
    let of_update: Vec<Measure> = plan
        .measures
        .iter()
        .copied()
        .filter(|m| m.of_update())
        .collect();
    // (update, layer, measure) → (sum, count), in first-seen order.
    let mut sums: Vec<((Update, usize, Measure), f64, u32)> = Vec::new();
    let mut add = |update: Update, values: Vec<sample::Value>| {
        for (layer, m, v) in values {
            let key = (update, layer, m);
            let slot = match sums.iter().position(|(k, _, _)| *k == key) {
                Some(i) => i,
                None => {
                    sums.push((key, 0.0, 0));
                    sums.len() - 1
                }
            };
            if let Some(v) = v.filter(|v| v.is_finite()) {
                sums[slot].1 += v;
                sums[slot].2 += 1;
            }
        }
    };
    for s in 0..plan.samples.min(at.test.len()) {
        let label = usize::from(at.test.labels[s]);
        let point = sample::observe(
            at.net,
            &mut copy,
            &mut be,
            rule,
            beta,
            at.test.row(s),
            label,
        );
        add(
            Update::Stored,
            sample::measure(&point, &point.dw, gamma, &plan.measures),
        );
        if let Some(intended) = &point.intended {
            add(
                Update::Intended,
                sample::measure(&point, intended, gamma, &of_update),
            );
        }
    }
    let mut rows: Vec<Row> = sums
        .into_iter()
        .map(|((update, layer, measure), sum, n)| Row {
            epoch: at.epoch,
            arm: at.arm,
            update,
            layer,
            measure,
            value: if n == 0 { f64::NAN } else { sum / f64::from(n) },
        })
        .collect();
    rows.sort_by_key(|r| (r.update, order(r.measure), r.layer));
    rows
}

fn order(m: Measure) -> usize {
    Measure::ALL.iter().position(|&a| a == m).unwrap_or(0)
}

/// A probed run: the comparison `tidewise train` would report and the alignment rows.
#[derive(Clone, Debug)]
pub struct Probed {
    /// Both arms, exactly as without the measurement.
    pub comparison: Comparison,
    /// Alignment rows, float arm first, then the fixed arm, by epoch.
    pub rows: Vec<Row>,
    /// Wall-clock seconds spent in the measurement.
    pub align_seconds: f64,
}

/// Trains both arms of `spec` through [`arms::run`] with the measurement attached.
pub fn run(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    options: &Options,
    progress: Progress<'_>,
) -> Result<Probed, ProbeError> {
    let plan = options.validate(design.rule, prepared.test.len())?;
    let mut prober = Prober::new(plan, spec.run.epochs);
    let comparison = arms::run(spec, design, prepared, &mut prober, progress)?;
    Ok(Probed {
        comparison,
        align_seconds: prober.seconds,
        rows: prober.rows,
    })
}

/// `alignment.csv`: `epoch,arm,layer,measure,value`, one row per value.
pub fn alignment_csv(rows: &[Row]) -> String {
    let mut out = String::from("epoch,arm,layer,measure,value\n");
    for r in rows {
        out.push_str(&format!(
            "{},{},{},{},{}\n",
            r.epoch,
            r.label(),
            r.layer,
            r.measure.name(),
            r.value
        ));
    }
    out
}

/// `alignment.svg`: one panel per measure; each layer in its own colour, the fixed arm solid
/// and the float arm dashed.
pub fn alignment_svg(title: &str, rows: &[Row]) -> Result<String, String> {
    let mut panels = Vec::new();
    for m in Measure::ALL {
        let of_m: Vec<&Row> = rows.iter().filter(|r| r.measure == m).collect();
        if of_m.is_empty() {
            continue;
        }
        let mut layers: Vec<usize> = of_m.iter().map(|r| r.layer).collect();
        layers.sort_unstable();
        layers.dedup();
        let mut series = Vec::new();
        for &l in &layers {
            for arm in [Arm::Fixed, Arm::Float] {
                let points: Vec<(f64, f64)> = of_m
                    .iter()
                    .filter(|r| r.layer == l && r.arm == arm && r.update == Update::Stored)
                    .map(|r| (f64::from(r.epoch), r.value))
                    .collect();
                if points.is_empty() {
                    continue;
                }
                series.push(Series {
                    name: format!("layer {l} {}", arm.name()),
                    color: plot::PALETTE[(l - 1) % plot::PALETTE.len()],
                    dashed: arm == Arm::Float,
                    points,
                });
            }
        }
        panels.push(Panel {
            title: m.name().to_string(),
            x_label: "epoch".into(),
            y_label: m.unit().into(),
            series,
            log_y: false,
        });
    }
    plot::render(title, &panels, 2)
}

/// The values of the last probed epoch as a text table: one line per arm and layer.
pub fn table(rows: &[Row]) -> String {
    let Some(last) = rows.iter().map(|r| r.epoch).max() else {
        return String::new();
    };
    let mut measures: Vec<Measure> = rows.iter().map(|r| r.measure).collect();
    measures.sort_by_key(|&m| order(m));
    measures.dedup();
    let mut out = format!("alignment after epoch {last} (mean over the measured samples)\n");
    out.push_str(&format!("{:<14} {:>5}", "arm", "layer"));
    for m in &measures {
        out.push_str(&format!(" {:>15}", m.name()));
    }
    out.push('\n');
    let mut keys: Vec<(Arm, Update, usize)> = rows
        .iter()
        .filter(|r| r.epoch == last)
        .map(|r| (r.arm, r.update, r.layer))
        .collect();
    keys.sort_by_key(|&(a, u, l)| (a == Arm::Float, u, l));
    keys.dedup();
    for (arm, update, layer) in keys {
        let label = label(arm, update);
        out.push_str(&format!("{label:<14} {layer:>5}"));
        for &m in &measures {
            let v = rows.iter().find(|r| {
                r.epoch == last
                    && r.arm == arm
                    && r.update == update
                    && r.layer == layer
                    && r.measure == m
            });
            match v {
                Some(r) if r.value.is_finite() => out.push_str(&format!(" {:>15.4}", r.value)),
                _ => out.push_str(&format!(" {:>15}", "-")),
            }
        }
        out.push('\n');
    }
    out
}
