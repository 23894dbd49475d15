//! What the search varies: knobs and design points.
//!
//! A knob is what one searched format applies to: a whole tensor class (all layers at one
//! format), or, with `--per-layer`, one layer of a class ([`Knob::LayerWeights`],
//! [`Knob::LayerActivations`]). [`Point`] holds one format per class and the per-layer
//! overrides; [`Point::apply`] writes both into the design, and the search in `search.rs`
//! walks whatever list of knobs it is given.
//!
//! Layers are numbered as the spec's arrays and the core's tags number them: weights and
//! biases 1 to L (L weight layers), activations 0 (the input) to L.

use std::fmt;

use serde::{Serialize, Serializer};
use serde_json::{json, Value};
use tidewise_core::backend::LayerFormats;
use tidewise_core::class::{Class, LAYER_ROWS};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::round::Rounding;

use crate::spec::Design;

/// A searched (or held) class, or one layer of a class.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
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
    /// The forward weights of one layer (1 to L).
    LayerWeights(u8),
    /// The biases of one layer (1 to L; held only, never searched per layer).
    LayerBiases(u8),
    /// The activations of one layer (0, the input, to L).
    LayerActivations(u8),
}

/// The searched classes, in report order.
pub const KNOBS: [Knob; 5] = [
    Knob::ForwardWeights,
    Knob::Biases,
    Knob::FeedbackWeights,
    Knob::Activations,
    Knob::Accumulator,
];

/// The classes that take one format per layer.
pub const LAYERED: [Knob; 3] = [Knob::ForwardWeights, Knob::Biases, Knob::Activations];

const W_NAMES: [&str; LAYER_ROWS] = [
    "forward_weights.0",
    "forward_weights.1",
    "forward_weights.2",
    "forward_weights.3",
    "forward_weights.4",
    "forward_weights.5",
    "forward_weights.6",
    "forward_weights.7",
    "forward_weights.8",
];
const B_NAMES: [&str; LAYER_ROWS] = [
    "biases.0", "biases.1", "biases.2", "biases.3", "biases.4", "biases.5", "biases.6", "biases.7",
    "biases.8",
];
const A_NAMES: [&str; LAYER_ROWS] = [
    "activations.0",
    "activations.1",
    "activations.2",
    "activations.3",
    "activations.4",
    "activations.5",
    "activations.6",
    "activations.7",
    "activations.8",
];

impl Knob {
    /// The spec's name of the class, `CLASS.LAYER` for one layer.
    pub fn name(self) -> &'static str {
        let at = |names: &[&'static str; LAYER_ROWS], l: u8| {
            names.get(usize::from(l)).copied().unwrap_or("layer?")
        };
        match self {
            Knob::ForwardWeights => "forward_weights",
            Knob::Biases => "biases",
            Knob::FeedbackWeights => "feedback_weights",
            Knob::Activations => "activations",
            Knob::Accumulator => "accumulator",
            Knob::LayerWeights(l) => at(&W_NAMES, l),
            Knob::LayerBiases(l) => at(&B_NAMES, l),
            Knob::LayerActivations(l) => at(&A_NAMES, l),
        }
    }
    /// The knob of a spec name: a class (`forward_weights`) or one layer of a class that
    /// takes per-layer formats (`forward_weights.2`; any layer number below the core's row
    /// count, checked against the network by [`Knob::check_layer`]).
    pub fn parse(name: &str) -> Option<Knob> {
        match name.split_once('.') {
            None => KNOBS.into_iter().find(|k| k.name() == name),
            Some((class, layer)) => {
                let l: u8 = layer.parse().ok()?;
                if usize::from(l) >= LAYER_ROWS {
                    return None;
                }
                match Knob::parse(class)? {
                    Knob::ForwardWeights => Some(Knob::LayerWeights(l)),
                    Knob::Biases => Some(Knob::LayerBiases(l)),
                    Knob::Activations => Some(Knob::LayerActivations(l)),
                    _ => None,
                }
            }
        }
    }
    /// The core's class.
    pub fn class(self) -> Class {
        match self.base() {
            Knob::ForwardWeights => Class::Forward,
            Knob::Biases => Class::Bias,
            Knob::FeedbackWeights => Class::Feedback,
            Knob::Activations => Class::Act,
            _ => Class::Acc,
        }
    }
    /// The whole-class knob of a layer knob (itself for a class).
    pub fn base(self) -> Knob {
        match self {
            Knob::LayerWeights(_) => Knob::ForwardWeights,
            Knob::LayerBiases(_) => Knob::Biases,
            Knob::LayerActivations(_) => Knob::Activations,
            k => k,
        }
    }
    /// The layer of a layer knob.
    pub fn layer(self) -> Option<u8> {
        match self {
            Knob::LayerWeights(l) | Knob::LayerBiases(l) | Knob::LayerActivations(l) => Some(l),
            _ => None,
        }
    }
    /// The knob of class `base` at layer `l` (`None` for a class without per-layer formats).
    pub fn at_layer(base: Knob, l: u8) -> Option<Knob> {
        match base {
            Knob::ForwardWeights => Some(Knob::LayerWeights(l)),
            Knob::Biases => Some(Knob::LayerBiases(l)),
            Knob::Activations => Some(Knob::LayerActivations(l)),
            _ => None,
        }
    }
    /// The layers class `base` has in a network of `weight_layers` weight layers.
    pub fn layers_of(base: Knob, weight_layers: u8) -> std::ops::RangeInclusive<u8> {
        match base {
            Knob::Activations => 0..=weight_layers,
            _ => 1..=weight_layers,
        }
    }
    /// Checks a layer knob's layer against a network of `weight_layers` weight layers,
    /// naming the layers allowed.
    pub fn check_layer(self, weight_layers: u8) -> Result<(), String> {
        let Some(l) = self.layer() else {
            return Ok(());
        };
        let range = Knob::layers_of(self.base(), weight_layers);
        if range.contains(&l) {
            Ok(())
        } else {
            Err(format!(
                "layer {l} of {}: the network has {weight_layers} weight layer(s); allowed: {}.{} to {}.{}",
                self.base().name(),
                self.base().name(),
                range.start(),
                self.base().name(),
                range.end()
            ))
        }
    }
}

impl Serialize for Knob {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.name())
    }
}

/// Per-layer overrides of the forward weights, biases and activations, indexed by layer.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
pub struct Layers {
    /// `W_l` at index `l`.
    pub forward: [Option<Format>; LAYER_ROWS],
    /// `b_l` at index `l`.
    pub bias: [Option<Format>; LAYER_ROWS],
    /// Activations of layer `l` at index `l`.
    pub act: [Option<Format>; LAYER_ROWS],
}

impl Layers {
    fn of(&self, base: Knob) -> Option<&[Option<Format>; LAYER_ROWS]> {
        match base {
            Knob::ForwardWeights => Some(&self.forward),
            Knob::Biases => Some(&self.bias),
            Knob::Activations => Some(&self.act),
            _ => None,
        }
    }
    fn of_mut(&mut self, base: Knob) -> Option<&mut [Option<Format>; LAYER_ROWS]> {
        match base {
            Knob::ForwardWeights => Some(&mut self.forward),
            Knob::Biases => Some(&mut self.bias),
            Knob::Activations => Some(&mut self.act),
            _ => None,
        }
    }
    /// Whether no layer has an override.
    pub fn is_empty(&self) -> bool {
        LAYERED
            .iter()
            .filter_map(|&k| self.of(k))
            .all(|v| v.iter().all(Option::is_none))
    }
    /// The override of layer knob `k`.
    pub fn get(&self, k: Knob) -> Option<Format> {
        let l = usize::from(k.layer()?);
        self.of(k.base())?.get(l).copied().flatten()
    }
    fn set(&mut self, k: Knob, f: Format) {
        if let (Some(l), Some(v)) = (k.layer(), self.of_mut(k.base())) {
            if let Some(slot) = v.get_mut(usize::from(l)) {
                *slot = Some(f);
            }
        }
    }
    /// The overrides of a design.
    pub fn of_design(l: &LayerFormats) -> Layers {
        Layers {
            forward: l.forward_weights,
            bias: l.biases,
            act: l.activations,
        }
    }
    fn to_core(self) -> LayerFormats {
        LayerFormats {
            forward_weights: self.forward,
            biases: self.bias,
            activations: self.act,
        }
    }
}

/// A fixed-arm design point: the searched formats, the per-layer overrides, the accumulator
/// width and the rounding of every class; everything else comes from the spec.
///
/// A layer without an override takes its class format. When a class has any override,
/// [`Point::apply`] and [`Point::spec_values`] give every layer of the class its format and
/// the class format becomes the widest-range of them, the rule the spec applies to an array
/// (so the recommended spec, read back, is the design that was run).
#[derive(Clone, Copy, Debug)]
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
    /// Per-layer overrides (empty: a uniform design).
    pub layers: Layers,
    /// The network's weight layers L: context for writing per-layer formats, not part of
    /// the point (equal points compare equal whatever it holds).
    pub weight_layers: u8,
}

impl PartialEq for Point {
    fn eq(&self, o: &Point) -> bool {
        self.key() == o.key()
    }
}
impl Eq for Point {}
impl std::hash::Hash for Point {
    fn hash<H: std::hash::Hasher>(&self, h: &mut H) {
        self.key().hash(h);
    }
}

/// A format as a spec value that means the same whatever the spec's `fixed.overflow`.
pub fn spec_format(f: Format) -> String {
    match f.overflow() {
        Overflow::Saturate => format!("{f}:sat"),
        Overflow::Wrap => f.to_string(),
    }
}

impl Point {
    #[allow(clippy::type_complexity)]
    fn key(&self) -> (Format, Format, Format, Format, u8, Rounding, Layers) {
        (
            self.forward,
            self.bias,
            self.feedback,
            self.act,
            self.acc,
            self.rounding,
            self.layers,
        )
    }

    /// The point of a design as the spec gives it, in a network of `weight_layers` weight
    /// layers (its per-layer formats kept as overrides).
    pub fn of(design: &Design, weight_layers: u8) -> Point {
        let f = |c: Class| design.fixed.classes[c.index()].format;
        Point {
            forward: f(Class::Forward),
            bias: f(Class::Bias),
            feedback: f(Class::Feedback),
            act: f(Class::Act),
            acc: design.fixed.acc_bits,
            rounding: design.fixed.classes[Class::Forward.index()].rounding,
            layers: Layers::of_design(&design.fixed.layers),
            weight_layers,
        }
    }

    fn class_format(&self, base: Knob) -> Option<Format> {
        match base {
            Knob::ForwardWeights => Some(self.forward),
            Knob::Biases => Some(self.bias),
            Knob::FeedbackWeights => Some(self.feedback),
            Knob::Activations => Some(self.act),
            _ => None,
        }
    }

    /// The format of `k` (`None` for the accumulator): a layer's override, else its class
    /// format.
    pub fn format(&self, k: Knob) -> Option<Format> {
        match k.layer() {
            Some(_) => self.layers.get(k).or(self.class_format(k.base())),
            None => self.class_format(k),
        }
    }

    /// Whether layer knob `k` has an override.
    pub fn overridden(&self, k: Knob) -> bool {
        self.layers.get(k).is_some()
    }

    /// Whether every layer of class `base` has an override (the class format then only
    /// follows them).
    pub fn all_overridden(&self, base: Knob) -> bool {
        Knob::layers_of(base, self.weight_layers)
            .all(|l| Knob::at_layer(base, l).is_some_and(|k| self.overridden(k)))
    }

    /// Word bits of `k`.
    pub fn word(&self, k: Knob) -> u8 {
        self.format(k).map_or(self.acc, |f| f.word())
    }

    /// The same point with `k` at `f` (ignored for the accumulator). A class knob sets the
    /// class format: layers with overrides keep theirs.
    pub fn with(mut self, k: Knob, f: Format) -> Point {
        match k {
            Knob::ForwardWeights => self.forward = f,
            Knob::Biases => self.bias = f,
            Knob::FeedbackWeights => self.feedback = f,
            Knob::Activations => self.act = f,
            Knob::Accumulator => {}
            _ => self.layers.set(k, f),
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

    /// The formats of every layer of `base`, when the class has any override (else `None`:
    /// one format for all layers).
    fn per_layer(&self, base: Knob) -> Option<Vec<Format>> {
        let v = self.layers.of(base)?;
        if v.iter().all(Option::is_none) {
            return None;
        }
        let class = self.class_format(base)?;
        Some(
            Knob::layers_of(base, self.weight_layers)
                .map(|l| v.get(usize::from(l)).copied().flatten().unwrap_or(class))
                .collect(),
        )
    }

    /// The spec's class format of an array: the widest range, first of equals.
    fn widest(list: &[Format]) -> Option<Format> {
        let mut widest: Option<Format> = None;
        for &f in list {
            let wider = |w: Format| (f.int_bits(), f.frac()) > (w.int_bits(), w.frac());
            if widest.is_none_or(wider) {
                widest = Some(f);
            }
        }
        widest
    }

    /// `design` with this point's formats.
    pub fn apply(&self, design: &Design) -> Design {
        let mut d = design.clone();
        let set = |d: &mut Design, c: Class, f: Format| d.fixed.classes[c.index()].format = f;
        set(&mut d, Class::Forward, self.forward);
        set(&mut d, Class::Bias, self.bias);
        set(&mut d, Class::Feedback, self.feedback);
        set(&mut d, Class::Act, self.act);
        let mut layers = Layers::default();
        for base in LAYERED {
            let Some(list) = self.per_layer(base) else {
                continue;
            };
            for (l, &f) in Knob::layers_of(base, self.weight_layers).zip(&list) {
                if let Some(k) = Knob::at_layer(base, l) {
                    layers.set(k, f);
                }
            }
            if let Some(w) = Point::widest(&list) {
                set(&mut d, base.class(), w);
            }
        }
        d.fixed.layers = layers.to_core();
        d.fixed.acc_bits = self.acc;
        for c in d.fixed.classes.iter_mut() {
            c.rounding = self.rounding;
        }
        d
    }

    /// The largest fraction class `base` has on any layer (with overrides, the class format
    /// only follows the layers: see [`Point::apply`]).
    fn max_frac(&self, base: Knob) -> u8 {
        match self.per_layer(base) {
            Some(list) => list.iter().map(|f| f.frac()).max().unwrap_or(0),
            None => self.class_format(base).map_or(0, |f| f.frac()),
        }
    }

    /// The largest fraction of the products the accumulator sums: `(W·h, feedback·h)`.
    pub fn product_fracs(&self) -> (u8, u8) {
        let act = self.max_frac(Knob::Activations);
        (
            self.max_frac(Knob::ForwardWeights) + act,
            self.feedback.frac() + act,
        )
    }

    /// The spec keys and values that make this point (`fixed.*`), for specs and grids: a
    /// class with per-layer formats as an array, one entry per layer.
    pub fn spec_values(&self) -> Vec<(&'static str, toml::Value)> {
        let s = |f: Format| toml::Value::String(spec_format(f));
        let class = |base: Knob, f: Format| match self.per_layer(base) {
            Some(list) => toml::Value::Array(list.into_iter().map(s).collect()),
            None => s(f),
        };
        vec![
            (
                "fixed.forward_weights",
                class(Knob::ForwardWeights, self.forward),
            ),
            ("fixed.biases", class(Knob::Biases, self.bias)),
            ("fixed.feedback_weights", s(self.feedback)),
            ("fixed.activations", class(Knob::Activations, self.act)),
            (
                "fixed.accumulator",
                toml::Value::Integer(i64::from(self.acc)),
            ),
            (
                "fixed.rounding",
                toml::Value::String(self.rounding.name().into()),
            ),
        ]
    }

    /// The point as a JSON object (journal keys; `layers` only when there are overrides, so
    /// a uniform point's key is unchanged).
    pub fn to_json(&self) -> Value {
        let mut v = json!({
            "forward_weights": self.forward.to_string(),
            "biases": self.bias.to_string(),
            "feedback_weights": self.feedback.to_string(),
            "activations": self.act.to_string(),
            "accumulator": self.acc,
            "rounding": self.rounding.name(),
        });
        if !self.layers.is_empty() {
            let mut m = serde_json::Map::new();
            for base in LAYERED {
                for l in 0..LAYER_ROWS as u8 {
                    if let Some(k) = Knob::at_layer(base, l) {
                        if let Some(f) = self.layers.get(k) {
                            m.insert(k.name().into(), Value::String(f.to_string()));
                        }
                    }
                }
            }
            v["layers"] = Value::Object(m);
        }
        v
    }

    /// A point from [`Point::to_json`] (its `weight_layers` left 0: context only).
    pub fn from_json(v: &Value) -> Option<Point> {
        let f = |k: &str| Format::parse(v.get(k)?.as_str()?).ok();
        let mut layers = Layers::default();
        if let Some(m) = v.get("layers") {
            for (name, f) in m.as_object()? {
                let k = Knob::parse(name).filter(|k| k.layer().is_some())?;
                layers.set(k, Format::parse(f.as_str()?).ok()?);
            }
        }
        Some(Point {
            forward: f("forward_weights")?,
            bias: f("biases")?,
            feedback: f("feedback_weights")?,
            act: f("activations")?,
            acc: u8::try_from(v.get("accumulator")?.as_u64()?).ok()?,
            rounding: Rounding::parse(v.get("rounding")?.as_str()?)?,
            layers,
            weight_layers: 0,
        })
    }
}

impl fmt::Display for Point {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let show = |base: Knob, own: Format| match self.per_layer(base) {
            Some(list) => list
                .iter()
                .map(|f| f.to_string())
                .collect::<Vec<_>>()
                .join("|"),
            None => own.to_string(),
        };
        write!(
            f,
            "W {} / b {} / B {} / A {} / acc {} / {}",
            show(Knob::ForwardWeights, self.forward),
            show(Knob::Biases, self.bias),
            self.feedback,
            show(Knob::Activations, self.act),
            self.acc,
            self.rounding.name()
        )
    }
}
