//! The description of a fixed-point design: class formats, per-layer overrides, the
//! accumulator, and what it takes to store them.

use crate::class::{Class, Tag, CLASSES, LAYER_ROWS};
use crate::format::{Format, Overflow};
use crate::round::Rounding;

/// The format and rounding of one tensor class.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct ClassSpec {
    /// The class's format.
    pub format: Format,
    /// How results written into the class are rounded.
    pub rounding: Rounding,
}

/// Per-layer formats that override the class format of forward weights, biases and
/// activations: entry `l` of a class is the format of layer `l` (weights and biases
/// l = 1..=L, entry 0 unused; activations l = 0..=L, 0 being the input), `None` the class
/// format. Rounding stays per class.
///
/// Feedback weights, rate, step, noise and the accumulator have no per-layer formats: the
/// feedback matrices are one memory in the designs this models (and a rule's feedback spans
/// layers: a direct matrix maps the output to a hidden layer), and the rate, step, noise and
/// accumulator are single registers of the datapath shared by every layer.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct LayerFormats {
    /// `W_l` at index `l`.
    pub forward_weights: [Option<Format>; LAYER_ROWS],
    /// `b_l` at index `l`.
    pub biases: [Option<Format>; LAYER_ROWS],
    /// Activations of layer `l` at index `l`.
    pub activations: [Option<Format>; LAYER_ROWS],
}

impl LayerFormats {
    /// No overrides: every layer uses its class format.
    pub const NONE: LayerFormats = LayerFormats {
        forward_weights: [None; LAYER_ROWS],
        biases: [None; LAYER_ROWS],
        activations: [None; LAYER_ROWS],
    };

    /// The classes that may have per-layer formats.
    pub const CLASSES: [Class; 3] = [Class::Forward, Class::Bias, Class::Act];

    /// The overrides of class `c` (`None` for a class without per-layer formats).
    pub fn of(&self, c: Class) -> Option<&[Option<Format>; LAYER_ROWS]> {
        match c {
            Class::Forward => Some(&self.forward_weights),
            Class::Bias => Some(&self.biases),
            Class::Act => Some(&self.activations),
            _ => None,
        }
    }

    /// The overrides of class `c`, to change them.
    pub fn of_mut(&mut self, c: Class) -> Option<&mut [Option<Format>; LAYER_ROWS]> {
        match c {
            Class::Forward => Some(&mut self.forward_weights),
            Class::Bias => Some(&mut self.biases),
            Class::Act => Some(&mut self.activations),
            _ => None,
        }
    }

    /// The override of class `c` in layer `l`, if any.
    pub fn get(&self, c: Class, l: usize) -> Option<Format> {
        self.of(c).and_then(|v| v.get(l).copied().flatten())
    }

    /// Whether no layer overrides its class format.
    pub fn is_empty(&self) -> bool {
        Self::CLASSES
            .iter()
            .filter_map(|&c| self.of(c))
            .all(|v| v.iter().all(Option::is_none))
    }

    /// Every override, as `(class, layer, format)`.
    pub fn entries(&self) -> impl Iterator<Item = (Class, usize, Format)> + '_ {
        Self::CLASSES.into_iter().flat_map(move |c| {
            self.of(c)
                .into_iter()
                .flat_map(|v| v.iter().enumerate())
                .filter_map(move |(l, f)| f.map(|f| (c, l, f)))
        })
    }
}

/// Everything the fixed back end needs to know about a design.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct FixedConfig {
    /// Per class, indexed by [`Class::index`]. The [`Class::Acc`] entry is not used for
    /// values: the accumulator's fraction is always that of the products it sums.
    pub classes: [ClassSpec; CLASSES],
    /// Accumulator word, 2 to 64 bits.
    pub acc_bits: u8,
    /// Accumulator overflow policy.
    pub acc_overflow: Overflow,
    /// Per-layer overrides of the class formats (none: a uniform design).
    pub layers: LayerFormats,
}

impl FixedConfig {
    /// A design with one format per class and no per-layer overrides.
    pub const fn uniform(
        classes: [ClassSpec; CLASSES],
        acc_bits: u8,
        acc_overflow: Overflow,
    ) -> FixedConfig {
        FixedConfig {
            classes,
            acc_bits,
            acc_overflow,
            layers: LayerFormats::NONE,
        }
    }

    /// The format and rounding of values tagged `t`: the layer's override when there is one,
    /// else the class's.
    pub fn spec(&self, t: Tag) -> ClassSpec {
        let class = self.classes[t.class.index()];
        let layer = if t.is_global() {
            None
        } else {
            self.layers.get(t.class, usize::from(t.layer))
        };
        match layer {
            Some(format) => ClassSpec { format, ..class },
            None => class,
        }
    }

    /// The format of values tagged `t`.
    pub fn format(&self, t: Tag) -> Format {
        self.spec(t).format
    }

    /// The widest word of class `c` over its class format and every layer override.
    pub fn widest_word(&self, c: Class) -> u8 {
        let own = self.classes[c.index()].format.word();
        self.layers
            .of(c)
            .into_iter()
            .flatten()
            .flatten()
            .map(|f| f.word())
            .fold(own, u8::max)
    }

    /// The `[row][class]` table of every tag's spec (rows: layers 0..=MAX_LAYERS, then the
    /// global row).
    pub fn table(&self) -> [[ClassSpec; CLASSES]; LAYER_ROWS + 1] {
        let mut t = [self.classes; LAYER_ROWS + 1];
        for (c, l, format) in self.layers.entries() {
            if let Some(slot) = t.get_mut(l).and_then(|r| r.get_mut(c.index())) {
                slot.format = format;
            }
        }
        t
    }
}

/// Why a fixed back end could not be made.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ConfigError {
    /// A stored class's word does not fit the container: `(class, word bits, container bits)`.
    Container(Class, u8, u32),
    /// A layer's format does not fit the container: `(class, layer, word bits, container bits)`.
    LayerContainer(Class, usize, u8, u32),
    /// The accumulator width is outside 2..=64 bits.
    AccBits(u8),
}

impl core::fmt::Display for ConfigError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match *self {
            ConfigError::Container(c, w, b) => write!(
                f,
                "{} format has a {w}-bit word but the storage container has {b} bits",
                c.name()
            ),
            ConfigError::LayerContainer(c, l, w, b) => write!(
                f,
                "{} format of layer {l} has a {w}-bit word but the storage container has {b} bits",
                c.name()
            ),
            ConfigError::AccBits(b) => {
                write!(
                    f,
                    "accumulator of {b} bits is outside the allowed 2 to 64 bits"
                )
            }
        }
    }
}

/// Classes whose values are stored in the container `W`.
pub(super) const STORED: [Class; 6] = [
    Class::Forward,
    Class::Bias,
    Class::Feedback,
    Class::Act,
    Class::Rate,
    Class::Noise,
];

/// The widest container the stored formats need, over every class and layer: 8, 16 or 32 bits.
pub fn container_bits(cfg: &FixedConfig) -> u32 {
    let word = STORED
        .iter()
        .map(|&c| cfg.widest_word(c))
        .max()
        .unwrap_or(8);
    (crate::format::container_bytes(word) * 8) as u32
}
