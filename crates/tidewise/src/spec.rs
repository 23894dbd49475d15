//! Experiment specs: TOML with sections `[data]`, `[net]`, `[rule]`, `[fixed]`, `[run]`,
//! `--with key=value` overrides by dotted path, and one validation step that turns a spec
//! into the core's configuration or says precisely what is wrong.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use tidewise_core::activation::Activation;
use tidewise_core::backend::{ClassSpec, FixedConfig, LayerFormats};
use tidewise_core::class::{Class, CLASSES, LAYER_ROWS, MAX_LAYERS};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::network::{Hyper, Regulariser};
use tidewise_core::round::Rounding;
use tidewise_core::rules::Rule;

/// A whole experiment. Every key has a default except where noted; unknown keys are errors.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Spec {
    /// Where the samples come from.
    pub data: DataSpec,
    /// The network.
    #[serde(default)]
    pub net: NetSpec,
    /// The learning rule and its hyper-parameters.
    #[serde(default)]
    pub rule: RuleSpec,
    /// The fixed-point design.
    #[serde(default)]
    pub fixed: FixedSpec,
    /// Epochs and seed.
    #[serde(default)]
    pub run: RunSpec,
}

/// `[data]`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DataSpec {
    /// `digits` (UCI optical digits), `pump` (the invented demo generator), `csv` or `idx`.
    pub source: String,
    /// CSV file (for `csv`), relative to the spec's folder.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub path: Option<PathBuf>,
    /// Label column of the CSV.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
    /// IDX image file (for `idx`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub images: Option<PathBuf>,
    /// IDX label file (for `idx`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub labels: Option<PathBuf>,
    /// Samples the `pump` generator makes.
    #[serde(default = "default_pump_samples")]
    pub samples: usize,
    /// Share of each class held out for testing.
    #[serde(default = "default_test_fraction")]
    pub test_fraction: f32,
    /// Seed of the split (and of the `pump` generator).
    #[serde(default = "default_split_seed")]
    pub split_seed: u64,
    /// Features are scaled per feature to `[0, scale]` by the training split's min and max.
    #[serde(default = "default_scale")]
    pub scale: f32,
    /// Use at most this many training samples (0: all); boards need small subsets.
    #[serde(default)]
    pub max_train: usize,
    /// Use at most this many test samples (0: all).
    #[serde(default)]
    pub max_test: usize,
}

/// `[net]`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NetSpec {
    /// Hidden layer sizes; the input and output sizes come from the data.
    #[serde(default = "default_hidden")]
    pub hidden: Vec<usize>,
    /// Hidden activation: identity, hard-tanh, leaky-relu, sigmoid or tanh.
    #[serde(default = "default_activation")]
    pub activation: String,
    /// Output activation.
    #[serde(default = "default_output")]
    pub output: String,
    /// Expected input size; checked against the data's feature count when given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub inputs: Option<usize>,
    /// Output size; at least the data's class count when given (default: the class count).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub outputs: Option<usize>,
    /// NPZ file of initial parameters (see `weights`), relative to the spec's folder.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub init: Option<PathBuf>,
}

/// `[rule]`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RuleSpec {
    /// bp, fa, dfa, tp, dtp, dtp-drl or dtp-direct.
    #[serde(default = "default_rule")]
    pub name: String,
    /// Forward learning rate η.
    #[serde(default = "default_lr")]
    pub lr: f32,
    /// Feedback learning rate. For `dtp-drl` and `dtp-direct` it is the rate of the
    /// difference reconstruction loss normalised by σ² (see [`feedback_rates`]), default
    /// 10⁻⁴; for `tp` and `dtp` the rate of the layer-wise reconstruction loss, default 0.01
    /// ([`RuleSpec::feedback_lr`]). Left out of the canonical form when not given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub feedback_lr: Option<f32>,
    /// Output-target step β.
    #[serde(default = "default_beta")]
    pub beta: f32,
    /// Noise scale σ of feedback training.
    #[serde(default = "default_sigma")]
    pub sigma: f32,
    /// Regulariser weight λ of the difference reconstruction loss (normalised by σ²), the
    /// damping of its fixed point `Jᵀ(JJᵀ + λI)⁻¹`.
    #[serde(default = "default_decay")]
    pub decay: f32,
    /// Feedback steps per forward step.
    #[serde(default = "default_feedback_steps")]
    pub feedback_steps: u8,
    /// Feedback-only epochs before forward learning starts.
    #[serde(default = "default_warmup")]
    pub warmup_epochs: u16,
    /// Reference fan-in of the per-layer forward rate: a weight layer of fan-in `n` learns
    /// with `lr / 2^round(log2(n / lr_fan_in))` when `n` is above it (a shift in fixed
    /// point); 0 turns the scaling off. Left out of the canonical form at its default, so
    /// the hashes of specs that do not set it stay as they were.
    #[serde(
        default = "default_lr_fan_in",
        skip_serializing_if = "is_default_lr_fan_in"
    )]
    pub lr_fan_in: i64,
    /// Regulariser of `dtp-drl`'s difference reconstruction loss: `output-noise` (a second
    /// pass with noise at the output, pulled back to the layer) or `decay` (weight decay on
    /// the feedback weights); weight `decay`. Left out of the canonical form at its default.
    #[serde(
        default = "default_feedback_regulariser",
        skip_serializing_if = "is_default_feedback_regulariser"
    )]
    pub feedback_regulariser: String,
}

/// A format for every layer (a string), or one format per layer (an array of strings).
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
#[serde(untagged)]
pub enum Formats {
    /// One format for every layer.
    One(String),
    /// One format per layer, in the order of the network's sizes.
    PerLayer(Vec<String>),
}

impl From<&str> for Formats {
    fn from(s: &str) -> Formats {
        Formats::One(s.to_string())
    }
}

impl std::fmt::Display for Formats {
    /// The format, or the per-layer formats joined by `|` (e.g. `Q1.6|Q0.7`).
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Formats::One(s) => f.write_str(s),
            Formats::PerLayer(v) => f.write_str(&v.join("|")),
        }
    }
}

impl<'de> Deserialize<'de> for Formats {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Formats, D::Error> {
        struct Visit;
        impl<'de> serde::de::Visitor<'de> for Visit {
            type Value = Formats;
            fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str("a format string such as \"Q2.13\" or an array of them, one per layer")
            }
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<Formats, E> {
                Ok(Formats::One(v.to_string()))
            }
            fn visit_seq<A: serde::de::SeqAccess<'de>>(
                self,
                mut a: A,
            ) -> Result<Formats, A::Error> {
                let mut out = Vec::new();
                while let Some(v) = a.next_element::<toml::Value>()? {
                    match v {
                        toml::Value::String(s) => out.push(s),
                        other => {
                            return Err(serde::de::Error::custom(format!(
                                "per-layer format [{}] is {other}, expected a format string such as \"Q1.6\"",
                                out.len()
                            )))
                        }
                    }
                }
                Ok(Formats::PerLayer(out))
            }
        }
        d.deserialize_any(Visit)
    }
}

/// `[fixed]`: one format per tensor class, in Q notation or a TR 18037 preset; forward
/// weights, biases and activations may instead give one format per layer.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FixedSpec {
    /// Forward weights: one format, or one per weight layer (L entries).
    #[serde(default = "default_weights")]
    pub forward_weights: Formats,
    /// Forward biases: one format, or one per weight layer (L entries).
    #[serde(default = "default_biases")]
    pub biases: Formats,
    /// Feedback weights and biases.
    #[serde(default = "default_feedback")]
    pub feedback_weights: String,
    /// Activations, targets and local errors: one format, or one per layer of the network's
    /// sizes (L + 1 entries: input, each hidden layer, output).
    #[serde(default = "default_activations")]
    pub activations: Formats,
    /// Accumulator width in bits (2 to 64); its fraction is that of the products.
    #[serde(default = "default_acc")]
    pub accumulator: u8,
    /// `saturate` or `wrap`, for the accumulator.
    #[serde(default = "default_overflow")]
    pub accumulator_overflow: String,
    /// Learning-rate representation: `shift` (each rate rounded to a power of two and applied
    /// as a shift) or a multiplier format such as `Q0.15`.
    #[serde(default = "default_rate")]
    pub rate: String,
    /// The η·δ step register.
    #[serde(default = "default_step")]
    pub step: String,
    /// Feedback-training noise.
    #[serde(default = "default_noise")]
    pub noise: String,
    /// `nearest`, `floor` or `stochastic`, for every class.
    #[serde(default = "default_rounding")]
    pub rounding: String,
    /// `saturate` or `wrap`, for every stored class.
    #[serde(default = "default_overflow")]
    pub overflow: String,
}

/// `[run]`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RunSpec {
    /// Training epochs (warm-up epochs included).
    #[serde(default = "default_epochs")]
    pub epochs: u16,
    /// Seed of initialisation, sample order, noise and stochastic rounding.
    #[serde(default = "default_seed")]
    pub seed: u64,
}

fn default_pump_samples() -> usize {
    1200
}
fn default_test_fraction() -> f32 {
    0.2
}
fn default_split_seed() -> u64 {
    7
}
fn default_scale() -> f32 {
    1.0
}
fn default_hidden() -> Vec<usize> {
    vec![64]
}
fn default_activation() -> String {
    "tanh".into()
}
fn default_output() -> String {
    "identity".into()
}
fn default_rule() -> String {
    "dtp-direct".into()
}
fn default_lr() -> f32 {
    0.02
}
/// The default feedback rate of the layer-wise reconstruction loss (`tp`, `dtp`).
const FEEDBACK_LR_LAYERWISE: f32 = 0.01;
/// The default rate of the σ²-normalised difference reconstruction loss (`dtp-drl`,
/// `dtp-direct`): at the default σ = 0.1 it is the step the rules took before the loss was
/// normalised (10⁻⁴ / σ² = 0.01 as the data term's rate), so their results there are
/// unchanged.
const FEEDBACK_LR_NORMALISED: f32 = 1e-4;
fn default_beta() -> f32 {
    1.0
}
fn default_sigma() -> f32 {
    0.1
}
fn default_decay() -> f32 {
    // With the loss normalised by σ², λ is the damping itself; 1 is the damping λ/σ² the
    // rules had at the default σ = 0.1 before the normalisation.
    1.0
}
fn default_feedback_steps() -> u8 {
    1
}
/// Layers up to this fan-in (and √2 times it) keep the rate: the digits (64 inputs) and the
/// pump (16) learn as before; a 784- or 1024-input layer learns at η/16.
pub const DEFAULT_LR_FAN_IN: i64 = 64;
fn default_lr_fan_in() -> i64 {
    DEFAULT_LR_FAN_IN
}
fn default_feedback_regulariser() -> String {
    Regulariser::default().name().to_string()
}
fn is_default_feedback_regulariser(v: &String) -> bool {
    *v == default_feedback_regulariser()
}
fn is_default_lr_fan_in(v: &i64) -> bool {
    *v == DEFAULT_LR_FAN_IN
}
fn default_warmup() -> u16 {
    2
}
fn default_weights() -> Formats {
    "Q2.13".into()
}
fn default_feedback() -> String {
    "Q2.13".into()
}
fn default_biases() -> Formats {
    "Q3.12".into()
}
fn default_activations() -> Formats {
    "Q3.12".into()
}
fn default_noise() -> String {
    "Q3.12".into()
}
fn default_acc() -> u8 {
    32
}
fn default_overflow() -> String {
    "saturate".into()
}
fn default_rate() -> String {
    "Q0.15".into()
}
fn default_step() -> String {
    "Q3.28".into()
}
fn default_rounding() -> String {
    "stochastic".into()
}
fn default_epochs() -> u16 {
    30
}
fn default_seed() -> u64 {
    1
}

impl Default for NetSpec {
    fn default() -> Self {
        NetSpec {
            hidden: default_hidden(),
            activation: default_activation(),
            output: default_output(),
            inputs: None,
            outputs: None,
            init: None,
        }
    }
}
impl RuleSpec {
    /// `rule.feedback_lr` as given, or the default for `rule`: 10⁻⁴ for the rules whose loss
    /// is normalised by σ² ([`Rule::normalises_feedback_loss`]), 0.01 for the others.
    pub fn feedback_lr(&self, rule: Rule) -> f32 {
        self.feedback_lr
            .unwrap_or(if rule.normalises_feedback_loss() {
                FEEDBACK_LR_NORMALISED
            } else {
                FEEDBACK_LR_LAYERWISE
            })
    }
}

impl Default for RuleSpec {
    fn default() -> Self {
        RuleSpec {
            name: default_rule(),
            lr: default_lr(),
            feedback_lr: None,
            beta: default_beta(),
            sigma: default_sigma(),
            decay: default_decay(),
            feedback_steps: default_feedback_steps(),
            warmup_epochs: default_warmup(),
            lr_fan_in: default_lr_fan_in(),
            feedback_regulariser: default_feedback_regulariser(),
        }
    }
}
impl Default for FixedSpec {
    fn default() -> Self {
        FixedSpec {
            forward_weights: default_weights(),
            biases: default_biases(),
            feedback_weights: default_feedback(),
            activations: default_activations(),
            accumulator: default_acc(),
            accumulator_overflow: default_overflow(),
            rate: default_rate(),
            step: default_step(),
            noise: default_noise(),
            rounding: default_rounding(),
            overflow: default_overflow(),
        }
    }
}
impl Default for RunSpec {
    fn default() -> Self {
        RunSpec {
            epochs: default_epochs(),
            seed: default_seed(),
        }
    }
}

/// Why a spec was refused.
#[derive(Debug, thiserror::Error)]
pub enum SpecError {
    /// The file could not be read.
    #[error("cannot read spec {path}: {source}")]
    Read {
        /// The file.
        path: PathBuf,
        /// The reason.
        source: std::io::Error,
    },
    /// TOML syntax or type error, with line and column.
    #[error("{origin}: line {line}, column {column}: {message}")]
    Toml {
        /// File name or `--with`.
        origin: String,
        /// 1-based line.
        line: usize,
        /// 1-based column.
        column: usize,
        /// What is wrong.
        message: String,
    },
    /// A key that is not part of the spec.
    #[error("{origin}: unknown key `{key}`{hint}")]
    UnknownKey {
        /// File name or `--with`.
        origin: String,
        /// The dotted key.
        key: String,
        /// ", did you mean `…`?" or the list of valid keys.
        hint: String,
    },
    /// A `--with` that is not `key=value`.
    #[error("--with {0:?}: expected KEY=VALUE with a dotted key such as rule.name=dtp")]
    WithSyntax(String),
    /// A value outside what is allowed.
    #[error("{key} = {value}: {allowed}")]
    Invalid {
        /// The dotted key.
        key: String,
        /// The value given.
        value: String,
        /// What is allowed.
        allowed: String,
    },
}

fn invalid(key: &str, value: impl std::fmt::Display, allowed: impl Into<String>) -> SpecError {
    SpecError::Invalid {
        key: key.to_string(),
        value: value.to_string(),
        allowed: allowed.into(),
    }
}

/// Every dotted key a spec accepts (for suggestions and for sweep grids).
pub fn known_keys() -> Vec<String> {
    let Ok(toml::Value::Table(t)) = toml::Value::try_from(Spec::example()) else {
        return Vec::new();
    };
    let mut keys = Vec::new();
    for (section, v) in t {
        if let toml::Value::Table(inner) = v {
            for k in inner.keys() {
                keys.push(format!("{section}.{k}"));
            }
        }
    }
    for extra in [
        "data.path",
        "data.label",
        "data.images",
        "data.labels",
        "net.inputs",
        "net.outputs",
        "net.init",
        "rule.lr_fan_in",
        "rule.feedback_regulariser",
        "rule.feedback_lr",
    ] {
        if !keys.iter().any(|k| k == extra) {
            keys.push(extra.to_string());
        }
    }
    keys.sort();
    keys
}

/// The nearest known key to `key`, if any is close.
fn suggest(key: &str) -> String {
    let keys = known_keys();
    let best = keys
        .iter()
        .map(|k| (strsim::levenshtein(k, key), k))
        .min_by_key(|(d, _)| *d);
    match best {
        Some((d, k)) if d <= 4 => format!(", did you mean `{k}`?"),
        _ => format!("; valid keys are {}", keys.join(", ")),
    }
}

/// 1-based line and column of a byte offset.
fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let before = &text[..offset.min(text.len())];
    let line = before.matches('\n').count() + 1;
    let column = before
        .rfind('\n')
        .map_or(before.len(), |i| before.len() - i - 1)
        + 1;
    (line, column)
}

/// Finds keys of `value` that are not spec keys, so the error can name and suggest them.
fn unknown_keys(value: &toml::Table) -> Vec<String> {
    let known = known_keys();
    let sections: Vec<&str> = known
        .iter()
        .filter_map(|k| k.split_once('.').map(|(s, _)| s))
        .collect();
    let mut out = Vec::new();
    for (section, v) in value {
        match v {
            toml::Value::Table(inner) if sections.contains(&section.as_str()) => {
                for k in inner.keys() {
                    let dotted = format!("{section}.{k}");
                    if !known.contains(&dotted) {
                        out.push(dotted);
                    }
                }
            }
            _ if sections.contains(&section.as_str()) => {}
            _ => out.push(section.clone()),
        }
    }
    out
}

/// Parses TOML text into a table, with line/column on syntax errors.
fn parse_table(text: &str, origin: &str) -> Result<toml::Table, SpecError> {
    text.parse::<toml::Table>().map_err(|e| {
        let (line, column) = e.span().map_or((0, 0), |s| line_col(text, s.start));
        SpecError::Toml {
            origin: origin.to_string(),
            line,
            column,
            message: e.message().to_string(),
        }
    })
}

/// Sets `dotted` (e.g. `rule.name`) in `table` to `raw`, read as a TOML value when it parses
/// as one (numbers, booleans, arrays, quoted strings), else as a bare string.
pub fn set_key(table: &mut toml::Table, dotted: &str, raw: &str) -> Result<(), SpecError> {
    let value = match format!("v = {raw}").parse::<toml::Table>() {
        Ok(mut t) => t
            .remove("v")
            .unwrap_or(toml::Value::String(raw.to_string())),
        Err(_) => toml::Value::String(raw.to_string()),
    };
    let parts: Vec<&str> = dotted.split('.').collect();
    if parts.len() != 2 || parts.iter().any(|p| p.is_empty()) {
        return Err(SpecError::UnknownKey {
            origin: "--with".into(),
            key: dotted.to_string(),
            hint: suggest(dotted),
        });
    }
    if !known_keys().iter().any(|k| k == dotted) {
        return Err(SpecError::UnknownKey {
            origin: "--with".into(),
            key: dotted.to_string(),
            hint: suggest(dotted),
        });
    }
    let section = table
        .entry(parts[0].to_string())
        .or_insert_with(|| toml::Value::Table(toml::Table::new()));
    match section {
        toml::Value::Table(t) => {
            t.insert(parts[1].to_string(), value);
            Ok(())
        }
        _ => Err(invalid(parts[0], "a value", "must be a section")),
    }
}

/// Applies `KEY=VALUE` overrides to a table.
pub fn apply_sets(table: &mut toml::Table, sets: &[String]) -> Result<(), SpecError> {
    for s in sets {
        let (k, v) = s
            .split_once('=')
            .ok_or_else(|| SpecError::WithSyntax(s.clone()))?;
        set_key(table, k.trim(), v.trim())?;
    }
    Ok(())
}

/// Turns a table into a spec, naming unknown keys with a suggestion.
pub fn from_table(table: toml::Table, origin: &str) -> Result<Spec, SpecError> {
    if let Some(key) = unknown_keys(&table).into_iter().next() {
        return Err(SpecError::UnknownKey {
            origin: origin.to_string(),
            hint: suggest(&key),
            key,
        });
    }
    let text = toml::to_string(&table).unwrap_or_default();
    toml::from_str::<Spec>(&text).map_err(|e| {
        let (line, column) = e.span().map_or((0, 0), |s| line_col(&text, s.start));
        SpecError::Toml {
            origin: origin.to_string(),
            line,
            column,
            message: e.message().to_string(),
        }
    })
}

/// Reads the spec file at `path`, applies `sets` and validates it. Relative data paths are
/// resolved against the spec's folder.
pub fn load(path: &Path, sets: &[String]) -> Result<(Spec, Design), SpecError> {
    let text = std::fs::read_to_string(path).map_err(|source| SpecError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let origin = path.display().to_string();
    let mut table = parse_table(&text, &origin)?;
    // Unknown keys in the file itself are reported with the file's name.
    if let Some(key) = unknown_keys(&table).into_iter().next() {
        let at = text
            .find(key.rsplit('.').next().unwrap_or(&key))
            .unwrap_or(0);
        let (line, _) = line_col(&text, at);
        return Err(SpecError::UnknownKey {
            origin: format!("{origin}: line {line}"),
            hint: suggest(&key),
            key,
        });
    }
    apply_sets(&mut table, sets)?;
    let mut spec = from_table(table, &origin)?;
    let base = path.parent().unwrap_or(Path::new("."));
    for p in [
        &mut spec.data.path,
        &mut spec.data.images,
        &mut spec.data.labels,
        &mut spec.net.init,
    ]
    .into_iter()
    .flatten()
    {
        if p.is_relative() {
            *p = base.join(&*p);
        }
    }
    let design = spec.design()?;
    Ok((spec, design))
}

/// Parses spec text (no file): for tests, fuzzing and sweeps.
pub fn parse(text: &str, sets: &[String]) -> Result<(Spec, Design), SpecError> {
    let mut table = parse_table(text, "spec")?;
    apply_sets(&mut table, sets)?;
    let spec = from_table(table, "spec")?;
    let design = spec.design()?;
    Ok((spec, design))
}

/// The core's feedback constants `(Hyper::lr_feedback, Hyper::decay)` for the spec's
/// `rule.feedback_lr` (η), `rule.sigma` (σ) and `rule.decay` (λ); `round` maps a rate to
/// its representation (a power of two with `fixed.rate = "shift"`).
///
/// The core's difference-reconstruction rules (`dtp-drl`, `dtp-direct`) step on the plain
/// squared reconstruction error, whose terms are of order σ² (a noise σε against its
/// reconstruction `QΔ`, `Δ = Jσε`). The spec's loss is that error divided by σ², plus λ times
/// the regulariser, so its rate means the same at every σ and its fixed point is
/// `Jᵀ(JJᵀ + λI)⁻¹` whatever σ is:
///
/// - data term: rate `η / σ²`, the core's `lr_feedback` (one constant, one rounding);
/// - weight decay (`dtp-direct`, and `dtp-drl` with `decay`): the step `−η λ Q`, the core's
///   `lr_feedback · decay` = `η/σ² · σ² λ`;
/// - output noise (`dtp-drl`): its reconstruction error is of order σ² too, so rate
///   `η λ / σ²` = `lr_feedback · λ`.
///
/// Dividing by σ² this way costs the hardware nothing: it changes the rate constants, not the
/// datapath. `tp` and `dtp` reconstruct `h + σε` itself, an error of order one, and keep η.
pub fn feedback_rates(
    rule: Rule,
    regulariser: Regulariser,
    eta: f32,
    sigma: f32,
    lambda: f32,
    round: &dyn Fn(f32) -> f32,
) -> (f32, f32) {
    if !rule.normalises_feedback_loss() {
        let lr = round(eta);
        return (lr, lambda);
    }
    let s2 = f64::from(sigma) * f64::from(sigma);
    let lr = round((f64::from(eta) / s2.max(f64::MIN_POSITIVE)) as f32);
    let relative = match (rule, regulariser) {
        (Rule::DtpDrl, Regulariser::OutputNoise) => f64::from(lambda),
        _ => s2 * f64::from(lambda),
    };
    // The regulariser's constant is the core's product `lr_feedback · decay`: round the
    // product (one shifter), then express it relative to the data rate.
    let product = round((f64::from(lr) * relative) as f32);
    (lr, product / lr.max(f32::MIN_POSITIVE))
}

/// A validated spec in the core's terms.
#[derive(Clone, Debug, PartialEq)]
pub struct Design {
    /// The rule.
    pub rule: Rule,
    /// Hidden and output activations.
    pub hidden: Activation,
    /// Output activation.
    pub output: Activation,
    /// Hyper-parameters (rates already in their representation).
    pub hyper: Hyper,
    /// The fixed-point design.
    pub fixed: FixedConfig,
    /// Rates applied as shifts.
    pub rate_shift: bool,
}

fn parse_format(key: &str, text: &str, overflow: Overflow) -> Result<Format, SpecError> {
    let f = Format::parse(text).map_err(|e| invalid(key, format!("{text:?}"), e.to_string()))?;
    // An explicit suffix wins over the section-wide policy.
    Ok(if text.contains(':') {
        f
    } else {
        f.overflowing(overflow)
    })
}

/// Per-layer formats of one class, indexed by layer.
type PerLayer = [Option<Format>; LAYER_ROWS];

/// The class format and the per-layer overrides of a key that takes one format or one per
/// layer. Layers run from `first` (0 for activations, 1 for weights and biases) to `top`;
/// an array must have one entry per layer. The class format of an array (the global format
/// of the constants, for activations) is its entry with the widest range: the most integer
/// bits, then the most fraction bits, the first of equals.
fn layer_formats(
    key: &str,
    v: &Formats,
    first: usize,
    top: usize,
    overflow: Overflow,
) -> Result<(Format, Option<PerLayer>), SpecError> {
    let list = match v {
        Formats::One(text) => return Ok((parse_format(key, text, overflow)?, None)),
        Formats::PerLayer(list) => list,
    };
    let need = top + 1 - first;
    if list.len() != need {
        let what = if first == 0 {
            format!(
                "one per layer of the network's sizes (input, {} hidden, output)",
                top - 1
            )
        } else {
            format!("one per weight layer ({} hidden and the output)", top - 1)
        };
        return Err(invalid(
            key,
            format!("{list:?}"),
            format!(
                "has {} entries but the network needs {need}: {what}; or give one string for every layer",
                list.len()
            ),
        ));
    }
    let mut out = [None; LAYER_ROWS];
    let mut widest: Option<Format> = None;
    for (i, text) in list.iter().enumerate() {
        let l = first + i;
        let f = parse_format(&format!("{key}[{i}] (layer {l})"), text, overflow)?;
        if let Some(slot) = out.get_mut(l) {
            *slot = Some(f);
        }
        let wider = |w: Format| (f.int_bits(), f.frac()) > (w.int_bits(), w.frac());
        if widest.is_none_or(wider) {
            widest = Some(f);
        }
    }
    let class = widest.ok_or_else(|| invalid(key, "[]", "an empty array names no format"))?;
    Ok((class, Some(out)))
}

fn parse_overflow(key: &str, text: &str) -> Result<Overflow, SpecError> {
    match text {
        "saturate" | "sat" => Ok(Overflow::Saturate),
        "wrap" => Ok(Overflow::Wrap),
        _ => Err(invalid(key, format!("{text:?}"), "allowed: saturate, wrap")),
    }
}

/// The power of two nearest to `x > 0` on a log scale (the mantissa against √2), in exact bit
/// operations.
pub fn nearest_pow2(x: f32) -> f32 {
    if x.is_nan() || x <= 0.0 || !x.is_finite() {
        return 0.0;
    }
    let bits = x.to_bits();
    let exp = bits & 0x7f80_0000;
    let man = bits & 0x007f_ffff;
    // Compare the mantissa with √2 − 1 = 0.41421356 (0x3504F3 in units of 2^-23).
    let up = man > 0x3504f3;
    let e = if up { exp + 0x0080_0000 } else { exp };
    f32::from_bits(e)
}

impl Spec {
    /// A complete spec with every default (the digits data).
    pub fn example() -> Spec {
        Spec {
            data: DataSpec {
                source: "digits".into(),
                path: None,
                label: None,
                images: None,
                labels: None,
                samples: default_pump_samples(),
                test_fraction: default_test_fraction(),
                split_seed: default_split_seed(),
                scale: default_scale(),
                max_train: 0,
                max_test: 0,
            },
            net: NetSpec::default(),
            rule: RuleSpec::default(),
            fixed: FixedSpec::default(),
            run: RunSpec::default(),
        }
    }

    /// Validates the spec and converts it into the core's configuration.
    pub fn design(&self) -> Result<Design, SpecError> {
        let d = &self.data;
        if !["digits", "pump", "csv", "idx"].contains(&d.source.as_str()) {
            return Err(invalid(
                "data.source",
                format!("{:?}", d.source),
                "allowed: digits, pump, csv, idx",
            ));
        }
        if d.source == "csv" && (d.path.is_none() || d.label.is_none()) {
            return Err(invalid(
                "data.source",
                "\"csv\"",
                "needs data.path (the CSV file) and data.label (its label column)",
            ));
        }
        if d.source == "idx" && (d.images.is_none() || d.labels.is_none()) {
            return Err(invalid(
                "data.source",
                "\"idx\"",
                "needs data.images and data.labels (IDX files)",
            ));
        }
        if !(d.test_fraction > 0.0 && d.test_fraction < 1.0) {
            return Err(invalid(
                "data.test_fraction",
                d.test_fraction,
                "allowed: strictly between 0 and 1",
            ));
        }
        if !(d.scale > 0.0 && d.scale.is_finite()) {
            return Err(invalid(
                "data.scale",
                d.scale,
                "allowed: a positive finite number",
            ));
        }
        if d.source == "pump" && !(8..=1_000_000).contains(&d.samples) {
            return Err(invalid("data.samples", d.samples, "allowed: 8 to 1000000"));
        }
        let n = &self.net;
        if n.hidden.len() > MAX_LAYERS - 1 {
            return Err(invalid(
                "net.hidden",
                format!("{:?}", n.hidden),
                format!(
                    "at most {} hidden layers (a network has at most {MAX_LAYERS} weight layers)",
                    MAX_LAYERS - 1
                ),
            ));
        }
        if let Some(&bad) = n.hidden.iter().find(|&&h| h == 0 || h > 4096) {
            return Err(invalid(
                "net.hidden",
                bad,
                "each hidden size must be 1 to 4096",
            ));
        }
        let act = |key: &str, s: &str| {
            Activation::parse(s).ok_or_else(|| {
                invalid(
                    key,
                    format!("{s:?}"),
                    format!("allowed: {}", Activation::NAMES.join(", ")),
                )
            })
        };
        let hidden = act("net.activation", &n.activation)?;
        let output = act("net.output", &n.output)?;
        let r = &self.rule;
        let rule = Rule::parse(&r.name).ok_or_else(|| {
            invalid(
                "rule.name",
                format!("{:?}", r.name),
                format!("allowed: {}", Rule::NAMES.join(", ")),
            )
        })?;
        for (key, v, hi) in [
            ("rule.lr", r.lr, 10.0),
            ("rule.feedback_lr", r.feedback_lr(rule), 10.0),
            ("rule.beta", r.beta, 100.0),
            ("rule.sigma", r.sigma, 10.0),
            ("rule.decay", r.decay, 100.0),
        ] {
            if !(v >= 0.0 && v <= hi) {
                return Err(invalid(key, v, format!("allowed: 0 to {hi}")));
            }
        }
        if r.lr == 0.0 {
            return Err(invalid("rule.lr", 0, "allowed: greater than 0 (up to 10)"));
        }
        let lr_fan_in = u16::try_from(r.lr_fan_in).map_err(|_| {
            invalid(
                "rule.lr_fan_in",
                r.lr_fan_in,
                "allowed: 0 (no scaling) or a reference fan-in of 1 to 65535",
            )
        })?;
        if rule.learns_feedback() && r.sigma == 0.0 {
            return Err(invalid(
                "rule.sigma",
                r.sigma,
                format!(
                    "allowed: greater than 0 (up to 10) for {}, which learns feedback from noise",
                    r.name
                ),
            ));
        }
        if rule.learns_feedback() && r.feedback_steps == 0 {
            return Err(invalid(
                "rule.feedback_steps",
                0,
                format!("allowed: 1 to 16 for {}, which learns feedback", r.name),
            ));
        }
        let regulariser = Regulariser::parse(&r.feedback_regulariser).ok_or_else(|| {
            invalid(
                "rule.feedback_regulariser",
                format!("{:?}", r.feedback_regulariser),
                format!(
                    "allowed: {}",
                    Regulariser::ALL.map(Regulariser::name).join(", ")
                ),
            )
        })?;
        if r.feedback_steps > 16 {
            return Err(invalid(
                "rule.feedback_steps",
                r.feedback_steps,
                "allowed: 0 to 16",
            ));
        }
        let run = &self.run;
        if run.epochs == 0 || run.epochs > 10_000 {
            return Err(invalid("run.epochs", run.epochs, "allowed: 1 to 10000"));
        }
        if r.warmup_epochs >= run.epochs {
            return Err(invalid(
                "rule.warmup_epochs",
                r.warmup_epochs,
                format!("must be fewer than run.epochs ({})", run.epochs),
            ));
        }
        let f = &self.fixed;
        let overflow = parse_overflow("fixed.overflow", &f.overflow)?;
        let rounding = Rounding::parse(&f.rounding).ok_or_else(|| {
            invalid(
                "fixed.rounding",
                format!("{:?}", f.rounding),
                format!("allowed: {}", Rounding::NAMES.join(", ")),
            )
        })?;
        let acc_overflow = parse_overflow("fixed.accumulator_overflow", &f.accumulator_overflow)?;
        if !(2..=64).contains(&f.accumulator) {
            return Err(invalid(
                "fixed.accumulator",
                f.accumulator,
                "allowed: 2 to 64 bits",
            ));
        }
        let rate_shift = f.rate == "shift";
        let rate_format = if rate_shift {
            // Wide enough that every power-of-two rate is one raw bit: a shifter.
            Format::new(32, 30).map_err(|e| invalid("fixed.rate", "shift", e.to_string()))?
        } else {
            parse_format("fixed.rate", &f.rate, overflow)?
        };
        // Weight layers L: the hidden layers and the output.
        let weight_layers = n.hidden.len() + 1;
        let mut layers = LayerFormats::NONE;
        let mut per_layer = |c: Class, key: &str, v: &Formats, first: usize| {
            let (format, overrides) = layer_formats(key, v, first, weight_layers, overflow)?;
            if let (Some(o), Some(slot)) = (overrides, layers.of_mut(c)) {
                *slot = o;
            }
            Ok::<Format, SpecError>(format)
        };
        let act_format = per_layer(Class::Act, "fixed.activations", &f.activations, 0)?;
        let forward = per_layer(
            Class::Forward,
            "fixed.forward_weights",
            &f.forward_weights,
            1,
        )?;
        let bias = per_layer(Class::Bias, "fixed.biases", &f.biases, 1)?;
        let mut classes = [ClassSpec {
            format: act_format,
            rounding,
        }; CLASSES];
        let mut set = |c: Class, format: Format| {
            classes[c.index()] = ClassSpec { format, rounding };
        };
        set(Class::Forward, forward);
        set(Class::Bias, bias);
        set(
            Class::Feedback,
            parse_format("fixed.feedback_weights", &f.feedback_weights, overflow)?,
        );
        set(Class::Rate, rate_format);
        set(Class::Step, parse_format("fixed.step", &f.step, overflow)?);
        set(
            Class::Noise,
            parse_format("fixed.noise", &f.noise, overflow)?,
        );
        let shift = |x: f32| if rate_shift { nearest_pow2(x) } else { x };
        let (lr_feedback, decay) = feedback_rates(
            rule,
            regulariser,
            r.feedback_lr(rule),
            r.sigma,
            r.decay,
            &shift,
        );
        let hyper = Hyper {
            lr: shift(r.lr),
            lr_feedback,
            beta: r.beta,
            sigma: r.sigma,
            decay,
            feedback_steps: if rule.learns_feedback() {
                r.feedback_steps
            } else {
                0
            },
            lr_fan_in,
            regulariser,
        };
        Ok(Design {
            rule,
            hidden,
            output,
            hyper,
            fixed: FixedConfig {
                classes,
                acc_bits: f.accumulator,
                acc_overflow,
                layers,
            },
            rate_shift,
        })
    }

    /// The spec as a JSON value (for summaries and sweep records).
    pub fn to_json(&self) -> serde_json::Value {
        serde_json::to_value(self).unwrap_or(serde_json::Value::Null)
    }

    /// The spec as TOML text.
    pub fn to_toml(&self) -> String {
        toml::to_string(self).unwrap_or_default()
    }

    /// A stable 64-bit hash (FNV-1a) of the resolved spec's canonical JSON, as 16 hex digits.
    pub fn hash(&self) -> String {
        let text = canonical_json(&self.to_json());
        let mut h: u64 = 0xcbf2_9ce4_8422_2325;
        for b in text.bytes() {
            h ^= u64::from(b);
            h = h.wrapping_mul(0x0000_0100_0000_01b3);
        }
        format!("{h:016x}")
    }
}

/// JSON with object keys sorted at every level (serde_json's maps are sorted by default).
pub fn canonical_json(v: &serde_json::Value) -> String {
    let sorted: BTreeMap<String, serde_json::Value> = match v {
        serde_json::Value::Object(m) => m.iter().map(|(k, v)| (k.clone(), v.clone())).collect(),
        _ => return v.to_string(),
    };
    serde_json::to_string(&sorted).unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINI: &str = "[data]\nsource = \"pump\"\n";

    #[test]
    fn defaults_validate() {
        let (spec, d) = parse(MINI, &[]).unwrap();
        assert_eq!(spec.run.epochs, 30);
        assert_eq!(d.rule, Rule::DtpDirect);
    }

    #[test]
    fn feedback_learning_needs_noise_steps_and_non_negative_decay() {
        for (set, key, allowed) in [
            ("rule.sigma=0", "rule.sigma", "greater than 0"),
            ("rule.sigma=-0.5", "rule.sigma", "allowed: 0 to 10"),
            ("rule.decay=-0.01", "rule.decay", "allowed: 0 to 100"),
            ("rule.feedback_steps=0", "rule.feedback_steps", "1 to 16"),
            (
                "rule.feedback_regulariser=ridge",
                "rule.feedback_regulariser",
                "allowed: output-noise, decay",
            ),
        ] {
            let err = parse(MINI, &[set.into()]).unwrap_err().to_string();
            assert!(err.contains(key) && err.contains(allowed), "{set}: {err}");
        }
        // Rules without learned feedback do not use σ or feedback steps.
        parse(MINI, &["rule.name=bp".into(), "rule.sigma=0".into()]).unwrap();
        parse(
            MINI,
            &["rule.name=fa".into(), "rule.feedback_steps=0".into()],
        )
        .unwrap();
    }

    #[test]
    fn syntax_error_names_line_and_column() {
        let err = parse("[data]\nsource = \"pump\"\n[run]\nepochs = = 3\n", &[]).unwrap_err();
        let msg = err.to_string();
        assert!(msg.contains("line 4"), "{msg}");
        assert!(msg.contains("column"), "{msg}");
    }

    #[test]
    fn unknown_key_suggests_nearest() {
        let err = parse("[data]\nsource = \"pump\"\n[run]\nepoch = 3\n", &[]).unwrap_err();
        assert!(
            err.to_string().contains("did you mean `run.epochs`"),
            "{err}"
        );
        let err = parse(MINI, &["rule.nmae=dtp".into()]).unwrap_err();
        assert!(
            err.to_string().contains("did you mean `rule.name`"),
            "{err}"
        );
    }

    #[test]
    fn set_overrides_with_validation() {
        let (spec, d) = parse(MINI, &["rule.name=dtp".into(), "run.epochs=10".into()]).unwrap();
        assert_eq!((spec.run.epochs, d.rule), (10, Rule::Dtp));
        let err = parse(MINI, &["rule.name=backprop".into()]).unwrap_err();
        assert!(err.to_string().contains("allowed: bp, fa"), "{err}");
        let err = parse(MINI, &["fixed.forward_weights=Q40.3".into()]).unwrap_err();
        assert!(err.to_string().contains("44 bits"), "{err}");
        let err = parse(MINI, &["fixed.rounding=up".into()]).unwrap_err();
        assert!(
            err.to_string().contains("nearest, floor, stochastic"),
            "{err}"
        );
    }

    #[test]
    fn per_layer_formats_from_arrays() {
        let sets = [
            r#"fixed.forward_weights=["Q1.6","Q0.7"]"#.to_string(),
            r#"fixed.activations=["Q1.6", "Q2.5", "Q3.12"]"#.to_string(),
        ];
        let (spec, d) = parse(MINI, &sets).unwrap();
        assert_eq!(spec.fixed.forward_weights.to_string(), "Q1.6|Q0.7");
        let l = &d.fixed.layers;
        assert_eq!(l.get(Class::Forward, 1), Format::parse("Q1.6").ok());
        assert_eq!(l.get(Class::Forward, 2), Format::parse("Q0.7").ok());
        assert_eq!(l.get(Class::Forward, 0), None);
        assert_eq!(l.get(Class::Act, 0), Format::parse("Q1.6").ok());
        assert_eq!(l.get(Class::Bias, 1), None);
        // The class format of an array is its widest-range entry (the constants' format).
        assert_eq!(
            d.fixed.classes[Class::Act.index()].format.to_string(),
            "Q3.12"
        );
        assert_eq!(
            d.fixed.classes[Class::Forward.index()].format.to_string(),
            "Q1.6"
        );
        // A string keeps its spec hash: only arrays change the serialised spec.
        let (plain, _) = parse(MINI, &[]).unwrap();
        let (same, _) = parse(MINI, &["fixed.forward_weights=\"Q2.13\"".into()]).unwrap();
        assert_eq!(plain.hash(), same.hash());
        assert_ne!(plain.hash(), spec.hash());
    }

    #[test]
    fn per_layer_lengths_and_entries_are_checked() {
        // net.hidden = [64] by default: 2 weight layers, 3 activation layers.
        let err = parse(
            MINI,
            &[r#"fixed.forward_weights=["Q1.6","Q0.7","Q0.7"]"#.into()],
        )
        .unwrap_err()
        .to_string();
        assert!(
            err.contains("fixed.forward_weights")
                && err.contains("has 3 entries")
                && err.contains("needs 2"),
            "{err}"
        );
        let err = parse(MINI, &[r#"fixed.activations=["Q1.6","Q0.7"]"#.into()])
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("fixed.activations")
                && err.contains("has 2 entries")
                && err.contains("needs 3"),
            "{err}"
        );
        let err = parse(
            MINI,
            &[
                "net.hidden=[8, 4]".into(),
                r#"fixed.biases=["Q1.6","Qx","Q2.5"]"#.into(),
            ],
        )
        .unwrap_err()
        .to_string();
        assert!(
            err.contains("fixed.biases[1] (layer 2)") && err.contains("\"Qx\""),
            "{err}"
        );
        let err = parse(MINI, &["fixed.biases=[1, 2]".into()])
            .unwrap_err()
            .to_string();
        assert!(err.contains("per-layer format [0] is 1"), "{err}");
        // A wide layer widens the container for every stored word.
        let (_, d) = parse(MINI, &[r#"fixed.forward_weights=["Q1.6","Q3.20"]"#.into()]).unwrap();
        assert_eq!(tidewise_core::backend::container_bits(&d.fixed), 32);
    }

    #[test]
    fn nearest_power_of_two() {
        assert_eq!(nearest_pow2(0.01), 0.0078125);
        assert_eq!(nearest_pow2(0.02), 0.015625);
        // The boundary is the geometric mean: 2^-0.5 = 0.7071.
        assert_eq!(nearest_pow2(0.70), 0.5);
        assert_eq!(nearest_pow2(0.71), 1.0);
    }

    #[test]
    fn hash_is_stable_and_sensitive() {
        let (a, _) = parse(MINI, &[]).unwrap();
        let (b, _) = parse(MINI, &["run.seed=2".into()]).unwrap();
        assert_eq!(a.hash(), a.clone().hash());
        assert_ne!(a.hash(), b.hash());
    }
}
