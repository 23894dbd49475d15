//! What the search varies: knobs (tensor classes) and design points.
//!
//! A knob is what one searched format applies to. Today every knob is a whole tensor class
//! (all layers at one format). Per-layer search makes a knob a (class, layer) pair: it plugs
//! in here, as a `layer` on [`Knob`], with [`Point`] holding one format per knob and
//! [`Point::apply`] writing each into the design's per-layer formats; the search in
//! `search.rs` walks whatever list of knobs it is given and needs no other change.

use std::fmt;

use serde::Serialize;
use serde_json::{json, Value};
use tidewise_core::class::Class;
use tidewise_core::format::{Format, Overflow};
use tidewise_core::round::Rounding;

use crate::spec::Design;

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
    /// The knob of a spec name.
    pub fn parse(name: &str) -> Option<Knob> {
        KNOBS.into_iter().find(|k| k.name() == name)
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

/// A format as a spec value that means the same whatever the spec's `fixed.overflow`.
pub fn spec_format(f: Format) -> String {
    match f.overflow() {
        Overflow::Saturate => format!("{f}:sat"),
        Overflow::Wrap => f.to_string(),
    }
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

    /// The spec keys and values that make this point (`fixed.*`), for specs and grids.
    pub fn spec_values(&self) -> Vec<(&'static str, toml::Value)> {
        let s = |f: Format| toml::Value::String(spec_format(f));
        vec![
            ("fixed.forward_weights", s(self.forward)),
            ("fixed.biases", s(self.bias)),
            ("fixed.feedback_weights", s(self.feedback)),
            ("fixed.activations", s(self.act)),
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

    /// The point as a JSON object (journal keys).
    pub fn to_json(&self) -> Value {
        json!({
            "forward_weights": self.forward.to_string(),
            "biases": self.bias.to_string(),
            "feedback_weights": self.feedback.to_string(),
            "activations": self.act.to_string(),
            "accumulator": self.acc,
            "rounding": self.rounding.name(),
        })
    }

    /// A point from [`Point::to_json`].
    pub fn from_json(v: &Value) -> Option<Point> {
        let f = |k: &str| Format::parse(v.get(k)?.as_str()?).ok();
        Some(Point {
            forward: f("forward_weights")?,
            bias: f("biases")?,
            feedback: f("feedback_weights")?,
            act: f("activations")?,
            acc: u8::try_from(v.get("accumulator")?.as_u64()?).ok()?,
            rounding: Rounding::parse(v.get("rounding")?.as_str()?)?,
        })
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
