//! The fixed and the float arm of one design, trained side by side.
//!
//! Both arms start from the same initial weights (the fixed arm's are the float draws, or the
//! values of the `net.init` file, rounded into its formats), see the same sample order and the
//! same feedback noise; only the fixed arm draws stochastic-rounding bits. Every other
//! command (sweeps, bit-width search, alignment, boards) runs designs through [`run`].

use std::sync::Arc;
use std::time::Instant;

use serde::Serialize;
use tidewise_core::backend::{container_bits, Backend, Fixed, Float};
use tidewise_core::class::{Class, Counters, Tag};
use tidewise_core::network::{Hyper, Net};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::streams;
use tidewise_core::train::{self, Samples, Schedule, Streams};

use crate::data::{self, Dataset, Scaling};
use crate::spec::{Design, Spec};
use crate::weights::{InitFile, Loaded, WeightsError};

/// Which arm.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Arm {
    /// The fixed-point design.
    Fixed,
    /// The `f32` reference.
    Float,
}

impl Arm {
    /// `fixed` or `float`.
    pub fn name(self) -> &'static str {
        match self {
            Arm::Fixed => "fixed",
            Arm::Float => "float",
        }
    }
}

/// Why a run could not be made or finished.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    /// The data could not be loaded.
    #[error(transparent)]
    Data(#[from] data::DataError),
    /// The spec and the data disagree.
    #[error("{0}")]
    Mismatch(String),
    /// The design cannot be built.
    #[error("{0}")]
    Design(String),
    /// The `net.init` file cannot be read or does not fit the network.
    #[error(transparent)]
    Weights(Box<WeightsError>),
    /// The float arm produced a NaN or an infinity.
    #[error("float arm produced a non-finite value in epoch {epoch}, sample {step} of the epoch, layer {layer}, tensor {tensor}: lower rule.lr or rule.beta, or scale the data down")]
    NonFinite {
        /// 1-based epoch.
        epoch: u16,
        /// Sample within the epoch.
        step: u32,
        /// 1-based weight layer.
        layer: usize,
        /// Tensor class name.
        tensor: &'static str,
    },
}

impl From<WeightsError> for RunError {
    fn from(e: WeightsError) -> RunError {
        RunError::Weights(Box::new(e))
    }
}

/// The data of a run, split and scaled.
#[derive(Clone, Debug)]
pub struct Prepared {
    /// Training split.
    pub train: Dataset,
    /// Test split.
    pub test: Dataset,
    /// Warnings about the data (constant features and the like).
    pub warnings: Vec<String>,
    /// The initial parameters of `net.init`, read and checked (matched to a network per run).
    pub init: Option<Arc<InitFile>>,
}

/// Loads, splits, subsets and scales the data of `spec`.
pub fn prepare(spec: &Spec) -> Result<Prepared, RunError> {
    let d = &spec.data;
    let all = match d.source.as_str() {
        "digits" => data::digits()?,
        "pump" => data::pump(d.split_seed, d.samples),
        "csv" => {
            let (path, label) = (d.path.as_deref(), d.label.as_deref());
            match (path, label) {
                (Some(p), Some(l)) => data::load_csv(p, l)?,
                _ => {
                    return Err(RunError::Mismatch(
                        "data.source = \"csv\" needs data.path and data.label".into(),
                    ))
                }
            }
        }
        "idx" => match (d.images.as_deref(), d.labels.as_deref()) {
            (Some(i), Some(l)) => data::load_idx(i, l)?,
            _ => {
                return Err(RunError::Mismatch(
                    "data.source = \"idx\" needs data.images and data.labels".into(),
                ))
            }
        },
        other => return Err(RunError::Mismatch(format!("unknown data.source {other:?}"))),
    };
    let (mut train, mut test) = data::split(&all, d.test_fraction, d.split_seed)?;
    truncate(&mut train, d.max_train);
    truncate(&mut test, d.max_test);
    let scaling = Scaling::try_fit(&train, d.scale)?;
    let mut warnings = Vec::new();
    let constant: Vec<usize> = (0..train.n_features)
        .filter(|&j| scaling.max[j] <= scaling.min[j])
        .collect();
    if constant.len() == train.n_features {
        warnings.push(format!(
            "every feature is constant in the training split ({} features): the network sees the same input for every sample and can learn only the class prior",
            train.n_features
        ));
    } else if !constant.is_empty() {
        warnings.push(format!(
            "{} of {} features are constant in the training split and are scaled to 0 (first: feature {})",
            constant.len(),
            train.n_features,
            constant[0]
        ));
    }
    scaling.try_apply(&mut train)?;
    scaling.try_apply(&mut test)?;
    let init = match &spec.net.init {
        Some(path) => Some(Arc::new(InitFile::read(path)?)),
        None => None,
    };
    Ok(Prepared {
        train,
        test,
        warnings,
        init,
    })
}

fn truncate(ds: &mut Dataset, max: usize) {
    if max > 0 && ds.len() > max {
        ds.labels.truncate(max);
        ds.features.truncate(max * ds.n_features);
    }
}

/// The network plan of a spec for its data: input and output sizes from the data.
pub fn plan(spec: &Spec, design: &Design, prepared: &Prepared) -> Result<Plan, RunError> {
    let (inputs, classes) = (prepared.train.n_features, prepared.train.n_classes);
    if let Some(n) = spec.net.inputs {
        if n != inputs {
            return Err(RunError::Mismatch(format!(
                "net.inputs = {n} but the data has {inputs} features"
            )));
        }
    }
    if let Some(n) = spec.net.outputs {
        if n < classes {
            return Err(RunError::Mismatch(format!(
                "net.outputs = {n} but the data has labels up to {} ({classes} classes)",
                classes - 1
            )));
        }
    }
    let outputs = spec.net.outputs.unwrap_or(classes);
    let mut sizes = vec![inputs];
    sizes.extend(&spec.net.hidden);
    sizes.push(outputs);
    let shape = Shape::new(&sizes).map_err(|e| RunError::Design(format!("net: {e}")))?;
    Ok(Plan::new(shape, design.rule, design.hidden, design.output))
}

/// One epoch of one arm.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct EpochRow {
    /// 1-based epoch.
    pub epoch: u16,
    /// Mean training loss of the epoch (before each sample's update).
    pub train_loss: f64,
    /// Test accuracy after the epoch, a fraction.
    pub test_accuracy: f64,
    /// Saturation events in the epoch.
    pub saturations: u64,
    /// Updates lost to rounding in the epoch.
    pub lost_updates: u64,
    /// Weight updates attempted in the epoch.
    pub updates: u64,
    /// Wall-clock seconds of the epoch's training and evaluation.
    pub seconds: f64,
    /// Whether the epoch trained only the feedback (warm-up).
    pub warmup: bool,
}

/// The outcome of one arm.
#[derive(Clone, Debug, Serialize)]
pub struct ArmResult {
    /// Per-epoch rows.
    pub epochs: Vec<EpochRow>,
    /// Final test accuracy, a fraction.
    pub test_accuracy: f64,
    /// Test accuracy of the starting network, before the first epoch (evaluated on a copy of
    /// the back end, so the run's streams do not move).
    pub initial_test_accuracy: f64,
    /// Final epoch's training loss.
    pub train_loss: f64,
    /// Mean test loss `½‖h_L − y‖²` after the last epoch (see [`test_loss`]).
    pub test_loss: f64,
    /// Training samples per second (training time only).
    pub samples_per_second: f64,
    /// Updates lost to rounding, all epochs.
    pub lost_updates: u64,
    /// Saturation events, all epochs.
    pub saturations: u64,
    /// Weight updates attempted, all epochs.
    pub updates: u64,
    /// Saturations while encoding the data into the activation format.
    pub data_saturations: u64,
    /// FNV-1a digest of the final raw parameters.
    pub digest: String,
    /// Lost updates per weight layer (forward weights, all epochs).
    pub lost_by_layer: Vec<u64>,
    /// Saturations per class name, all epochs.
    pub saturations_by_class: Vec<(String, u64)>,
    /// Tensors loaded from `net.init`, with the values that saturated in this arm's formats.
    pub init: Vec<Loaded>,
}

impl ArmResult {
    /// The counters [`crate::memory::advice`] reads.
    pub fn counts(&self) -> crate::memory::RunCounts<'_> {
        crate::memory::RunCounts {
            data_saturations: self.data_saturations,
            updates: self.updates,
            lost_updates: self.lost_updates,
            saturations_by_class: &self.saturations_by_class,
        }
    }
}

/// Both arms and the design's memory figure.
#[derive(Clone, Debug, Serialize)]
pub struct Comparison {
    /// The fixed-point arm.
    pub fixed: ArmResult,
    /// The float arm.
    pub float: ArmResult,
    /// Memory of the fixed design.
    pub memory: crate::memory::Memory,
    /// What the run noticed and what to change.
    pub warnings: Vec<String>,
    /// FNV-1a (64-bit) of the `net.init` file both arms started from.
    pub init_fnv1a64: Option<String>,
}

impl Comparison {
    /// Float minus fixed final test accuracy, in percentage points.
    pub fn gap_points(&self) -> f64 {
        100.0 * (self.float.test_accuracy - self.fixed.test_accuracy)
    }
}

/// Everything an observer may look at between epochs; it must not change training.
pub struct Checkpoint<'a, B: Backend> {
    /// Which arm.
    pub arm: Arm,
    /// Epochs done (0: before training).
    pub epoch: u16,
    /// The plan.
    pub plan: Plan,
    /// Hyper-parameters.
    pub hyper: &'a Hyper,
    /// The schedule.
    pub schedule: &'a Schedule,
    /// The network as it is now (copy its parameters to compute without changing it).
    pub net: &'a Net<'a, B::S>,
    /// The back end (clone it to compute without disturbing the run's streams).
    pub backend: &'a B,
    /// The test split, encoded.
    pub test: Samples<'a, B::S>,
}

/// A hook called at every checkpoint of both arms.
pub trait Observer {
    /// Called before the first epoch (epoch 0) and after each epoch.
    fn checkpoint<B: Backend + Clone>(&mut self, at: Checkpoint<'_, B>);
}

/// An observer that does nothing.
pub struct NoObserver;
impl Observer for NoObserver {
    fn checkpoint<B: Backend + Clone>(&mut self, _at: Checkpoint<'_, B>) {}
}

/// Progress reports: `(arm, epochs done, epochs in all)`.
pub type Progress<'p> = &'p mut dyn FnMut(Arm, u16, u16);

/// Trains both arms of `spec` on `prepared`.
pub fn run<O: Observer>(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    observer: &mut O,
    progress: Progress<'_>,
) -> Result<Comparison, RunError> {
    let float = run_float(spec, design, prepared, observer, progress)?;
    beside(spec, design, prepared, float, observer, progress)
}

/// Trains the fixed arm of `spec` and sets it beside `float`, a float arm [`run_float`]
/// trained already for a spec that differs from `spec` at most in `[fixed]` with the same
/// [`Design::hyper`] (the float arm reads neither the formats nor anything else of them).
/// [`run`] is [`run_float`] followed by this; a sweep over formats trains each float arm once.
pub fn beside<O: Observer>(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    float: ArmResult,
    observer: &mut O,
    progress: Progress<'_>,
) -> Result<Comparison, RunError> {
    let plan = plan(spec, design, prepared)?;
    let cfg = design.fixed;
    let fixed = run_fixed(spec, design, prepared, observer, progress)?;
    let memory = crate::memory::Memory::of(&plan, &cfg);
    let mut warnings = prepared.warnings.clone();
    if let Some(file) = &prepared.init {
        warnings.extend(init_notes(file, &plan, &fixed.init, design)?);
    }
    warnings.extend(crate::memory::advice(spec, design, &fixed.counts()));
    Ok(Comparison {
        fixed,
        float,
        memory,
        warnings,
        init_fnv1a64: prepared.init.as_ref().map(|f| f.fnv1a64.clone()),
    })
}

/// What a run from `file` should tell: feedback drawn or ignored, values that saturated.
fn init_notes(
    file: &InitFile,
    plan: &Plan,
    loaded: &[Loaded],
    design: &Design,
) -> Result<Vec<String>, RunError> {
    let bound = file.bind(plan)?;
    let path = file.path.display();
    let mut notes = Vec::new();
    if !bound.drawn.is_empty() {
        notes.push(format!(
            "net.init {path} has no {}: drawn from the seed",
            bound.drawn.join(", ")
        ));
    }
    if !bound.ignored.is_empty() {
        notes.push(format!(
            "net.init {path}: {} ignored (rule {} has no such feedback)",
            bound.ignored.join(", "),
            plan.rule.name()
        ));
    }
    let saturated: u64 = loaded.iter().map(|l| l.saturated).sum();
    if saturated > 0 {
        let total: usize = loaded.iter().map(|l| l.values).sum();
        let each: Vec<String> = loaded
            .iter()
            .zip(&bound.loaded)
            .filter(|(l, _)| l.saturated > 0)
            .map(|(l, (t, _))| {
                let f = design.fixed.classes[t.kind.class().index()].format;
                format!(
                    "{} {} of {} into {f} [{}, {}]",
                    l.name,
                    l.saturated,
                    l.values,
                    f.min_value(),
                    f.max_value()
                )
            })
            .collect();
        notes.push(format!(
            "net.init {path}: {saturated} of {total} loaded values saturated in the fixed formats ({}): widen those formats' integer bits or scale the weights",
            each.join("; ")
        ));
    }
    Ok(notes)
}

/// Trains the float arm alone (it does not depend on the fixed formats, so a search over
/// formats can run it once per seed). [`run`] is this followed by [`run_fixed`].
pub fn run_float<O: Observer>(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    observer: &mut O,
    progress: Progress<'_>,
) -> Result<ArmResult, RunError> {
    let plan = plan(spec, design, prepared)?;
    run_arm(
        Float::new(),
        Arm::Float,
        spec,
        design,
        plan,
        prepared,
        observer,
        progress,
    )
}

/// Trains the fixed arm alone, in the container (`i8`, `i16` or `i32`) its formats need.
pub fn run_fixed<O: Observer>(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    observer: &mut O,
    progress: Progress<'_>,
) -> Result<ArmResult, RunError> {
    let plan = plan(spec, design, prepared)?;
    match container_bits(&design.fixed) {
        8 => run_arm(
            fixed_backend::<i8>(design, spec.run.seed)?,
            Arm::Fixed,
            spec,
            design,
            plan,
            prepared,
            observer,
            progress,
        ),
        16 => run_arm(
            fixed_backend::<i16>(design, spec.run.seed)?,
            Arm::Fixed,
            spec,
            design,
            plan,
            prepared,
            observer,
            progress,
        ),
        _ => run_arm(
            fixed_backend::<i32>(design, spec.run.seed)?,
            Arm::Fixed,
            spec,
            design,
            plan,
            prepared,
            observer,
            progress,
        ),
    }
}

/// The fixed back end of a design, training stream of `seed`.
pub fn fixed_backend<W: tidewise_core::backend::Word>(
    design: &Design,
    seed: u64,
) -> Result<Fixed<W>, RunError> {
    Fixed::<W>::new(design.fixed, seed).map_err(|e| RunError::Design(e.to_string()))
}

/// Encodes a data set into the input's activation format with `be` (the data stream's
/// encoder).
pub fn encode<B: Backend>(be: &mut B, ds: &Dataset) -> Vec<B::S> {
    ds.features
        .iter()
        .map(|&x| be.encode(Tag::act(0), x))
        .collect()
}

/// An encoder for the data of an arm: a copy of the arm's back end drawing from the data
/// stream, so encoding does not move the training stream.
pub trait DataEncoder: Backend + Sized {
    /// The encoder.
    fn data_encoder(&self, design: &Design, seed: u64) -> Self;
    /// The encoder of initial parameters loaded from a file (`streams::LOADED`).
    fn load_encoder(&self, design: &Design, seed: u64) -> Self;
}
impl DataEncoder for Float {
    fn data_encoder(&self, _: &Design, _: u64) -> Float {
        Float::new()
    }
    fn load_encoder(&self, _: &Design, _: u64) -> Float {
        Float::new()
    }
}
impl<W: tidewise_core::backend::Word> DataEncoder for Fixed<W> {
    fn data_encoder(&self, design: &Design, seed: u64) -> Fixed<W> {
        Fixed::<W>::on_stream(design.fixed, seed, streams::DATA).unwrap_or_else(|_| self.clone())
    }
    fn load_encoder(&self, design: &Design, seed: u64) -> Fixed<W> {
        Fixed::<W>::on_stream(design.fixed, seed, streams::LOADED).unwrap_or_else(|_| self.clone())
    }
}

/// Lays out the network of an arm and sets its initial parameters: `train::setup` (the seeded
/// draws, as a board does), then, with `net.init`, the file's values encoded by the arm's
/// loading encoder. The one start the host arms and the packed board jobs share.
pub fn start<'a, B: Backend + DataEncoder>(
    be: &mut B,
    design: &Design,
    plan: Plan,
    prepared: &Prepared,
    arena: &'a mut [B::S],
    seed: u64,
) -> Result<(Net<'a, B::S>, Vec<Loaded>), RunError> {
    let bound = match &prepared.init {
        Some(file) => Some(file.bind(&plan)?),
        None => None,
    };
    let mut net = train::setup(plan, &design.hyper, arena, be, seed)
        .map_err(|e| RunError::Design(e.to_string()))?;
    let loaded = match bound {
        Some(b) => b.apply(&mut net, &mut be.load_encoder(design, seed)),
        None => Vec::new(),
    };
    Ok((net, loaded))
}

#[allow(clippy::too_many_arguments)]
fn run_arm<B: Backend + Clone + DataEncoder, O: Observer>(
    mut be: B,
    arm: Arm,
    spec: &Spec,
    design: &Design,
    plan: Plan,
    prepared: &Prepared,
    observer: &mut O,
    progress: Progress<'_>,
) -> Result<ArmResult, RunError> {
    let seed = spec.run.seed;
    let mut enc = be.data_encoder(design, seed);
    let train_x = encode(&mut enc, &prepared.train);
    let test_x = encode(&mut enc, &prepared.test);
    let data_saturations = enc.counters().total_saturations();
    let train_set = Samples {
        features: &train_x,
        labels: &prepared.train.labels,
    };
    let test_set = Samples {
        features: &test_x,
        labels: &prepared.test.labels,
    };
    let mut arena = vec![B::S::default(); plan.counts().total()];
    let hyper = design.hyper;
    let schedule = Schedule {
        rule: design.rule,
        feedback_steps: hyper.feedback_steps,
    };
    let (mut net, init) = start(&mut be, design, plan, prepared, &mut arena, seed)?;
    let initial_correct = train::evaluate(&mut net, &mut be.clone(), test_set);
    let mut streams = Streams::new(seed);
    let mut order = vec![0u32; train_set.len()];
    let epochs = spec.run.epochs;
    let warmup = if design.rule.learns_feedback() {
        spec.rule.warmup_epochs
    } else {
        0
    };
    let mut rows = Vec::with_capacity(usize::from(epochs));
    let mut totals = Counters::default();
    let mut train_seconds = 0f64;
    let mut trained = 0u64;
    checkpoint(observer, arm, 0, &net, &hyper, &schedule, &be, test_set);
    for epoch in 1..=epochs {
        be.reset_counters();
        let feedback_only = epoch <= warmup;
        let t = Instant::now();
        let stats = train::train_epoch(
            &mut net,
            &mut be,
            &schedule,
            train_set,
            &mut order,
            &mut streams,
            feedback_only,
        )
        .map_err(|f| RunError::NonFinite {
            epoch,
            step: f.step,
            layer: f.layer + 1,
            tensor: f.class.name(),
        })?;
        let t_train = t.elapsed().as_secs_f64();
        let correct = train::evaluate(&mut net, &mut be, test_set);
        let seconds = t.elapsed().as_secs_f64();
        train_seconds += t_train;
        trained += u64::from(stats.samples);
        let c = *be.counters();
        add_counters(&mut totals, &c);
        rows.push(EpochRow {
            epoch,
            train_loss: stats.loss(),
            test_accuracy: f64::from(correct) / test_set.len().max(1) as f64,
            saturations: c.total_saturations(),
            lost_updates: c.total_lost(),
            updates: c.total_updates(),
            seconds,
            warmup: feedback_only,
        });
        checkpoint(observer, arm, epoch, &net, &hyper, &schedule, &be, test_set);
        progress(arm, epoch, epochs);
    }
    let last = rows.last().cloned();
    let test_loss = test_loss(&mut net, &be, test_set);
    let digest = format!("{:016x}", train::digest::<B>(&net));
    Ok(ArmResult {
        test_accuracy: last.as_ref().map_or(0.0, |r| r.test_accuracy),
        initial_test_accuracy: f64::from(initial_correct) / test_set.len().max(1) as f64,
        train_loss: last.as_ref().map_or(0.0, |r| r.train_loss),
        test_loss,
        samples_per_second: trained as f64 / train_seconds.max(1e-9),
        lost_updates: totals.total_lost(),
        saturations: totals.total_saturations(),
        updates: totals.total_updates(),
        data_saturations,
        digest,
        lost_by_layer: (0..plan.layers())
            .map(|l| u64::from(totals.lost[l][Class::Forward.index()]))
            .collect(),
        saturations_by_class: Class::ALL
            .iter()
            .map(|c| (c.name().to_string(), totals.class_saturations(*c)))
            .collect(),
        init,
        epochs: rows,
    })
}

/// The mean squared error `½‖h_L − y‖²` over `test` (one-hot labels), the outputs decoded
/// from the activation class and summed in `f64`. It runs on a copy of the back end, so the
/// run's rounding stream and counters are untouched; it overwrites only the network's
/// activation buffers, which the next sample's forward pass overwrites anyway. A smoother
/// measure than accuracy (every sample contributes by how far it is from its label, not
/// only by which side of the decision it falls), used to rank candidate designs.
pub fn test_loss<B: Backend + Clone>(
    net: &mut Net<'_, B::S>,
    be: &B,
    test: Samples<'_, B::S>,
) -> f64 {
    let mut be = be.clone();
    let mut sum = 0f64;
    let out = Tag::act(net.plan.layers());
    for i in 0..test.len() {
        tidewise_core::kernels::forward(net, &mut be, test.row(i));
        let label = usize::from(test.labels[i]);
        for (j, &h) in net.output().iter().enumerate() {
            let y = if j == label { 1.0 } else { 0.0 };
            let e = y - f64::from(be.decode(out, h));
            sum += 0.5 * e * e;
        }
    }
    sum / test.len().max(1) as f64
}

#[allow(clippy::too_many_arguments)]
fn checkpoint<B: Backend + Clone, O: Observer>(
    observer: &mut O,
    arm: Arm,
    epoch: u16,
    net: &Net<'_, B::S>,
    hyper: &Hyper,
    schedule: &Schedule,
    be: &B,
    test: Samples<'_, B::S>,
) {
    observer.checkpoint(Checkpoint {
        arm,
        epoch,
        plan: net.plan,
        hyper,
        schedule,
        net,
        backend: be,
        test,
    });
}

fn add_counters(total: &mut Counters, c: &Counters) {
    for (t, v) in [
        (&mut total.saturations, &c.saturations),
        (&mut total.lost, &c.lost),
        (&mut total.updates, &c.updates),
    ] {
        for (tr, vr) in t.iter_mut().zip(v) {
            for (a, b) in tr.iter_mut().zip(vr) {
                *a = a.saturating_add(*b);
            }
        }
    }
}
