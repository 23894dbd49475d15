//! Network shapes and the storage plan: where every tensor lives in one caller-provided
//! arena, and what each tensor class costs in bits and bytes.

use crate::activation::Activation;
use crate::class::MAX_LAYERS;
use crate::part::Part;
use crate::rule::{Feedback, Rule};

/// Layer sizes: input, hidden layers, output. At most [`MAX_LAYERS`] weight layers.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub struct Shape {
    sizes: [u16; MAX_LAYERS + 1],
    len: u8,
}

/// Why a network could not be planned or built.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PlanError {
    /// Fewer than 2 or more than `MAX_LAYERS + 1` sizes were given.
    Layers(usize),
    /// A layer size is zero or above 65535: `(position, size)`.
    Size(usize, usize),
    /// The arena holds fewer values than the plan needs: `(needed, available)`.
    Arena(usize, usize),
}

impl core::fmt::Display for PlanError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match *self {
            PlanError::Layers(n) => write!(
                f,
                "a network needs 2 to {} layer sizes (input, hidden..., output); got {n}",
                MAX_LAYERS + 1
            ),
            PlanError::Size(i, n) => write!(
                f,
                "layer size {n} at position {i} is outside the allowed 1 to 65535"
            ),
            PlanError::Arena(need, have) => write!(
                f,
                "storage holds {have} values but this network needs {need}"
            ),
        }
    }
}

impl Shape {
    /// A shape from its layer sizes.
    pub fn new(sizes: &[usize]) -> Result<Shape, PlanError> {
        if sizes.len() < 2 || sizes.len() > MAX_LAYERS + 1 {
            return Err(PlanError::Layers(sizes.len()));
        }
        let mut s = [0u16; MAX_LAYERS + 1];
        for (i, (&n, slot)) in sizes.iter().zip(s.iter_mut()).enumerate() {
            *slot = u16::try_from(n)
                .ok()
                .filter(|&v| v > 0)
                .ok_or(PlanError::Size(i, n))?;
        }
        Ok(Shape {
            sizes: s,
            len: sizes.len() as u8,
        })
    }

    /// The layer sizes.
    pub fn sizes(&self) -> &[u16] {
        self.sizes.part(..usize::from(self.len))
    }
    /// Number of weight layers L.
    pub fn layers(&self) -> usize {
        usize::from(self.len) - 1
    }
    /// Size of layer `l` (0 = input, L = output).
    #[inline]
    pub fn n(&self, l: usize) -> usize {
        self.sizes.get(l).map_or(0, |&n| usize::from(n))
    }
    /// Input size.
    pub fn inputs(&self) -> usize {
        self.n(0)
    }
    /// Output size.
    pub fn outputs(&self) -> usize {
        self.n(self.layers())
    }
    /// Widest layer.
    pub fn widest(&self) -> usize {
        self.sizes()
            .iter()
            .map(|&n| usize::from(n))
            .max()
            .unwrap_or(0)
    }
}

/// Which tensors a network holds, and where: a pure function of the shape, rule and activations.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct Plan {
    /// Layer sizes.
    pub shape: Shape,
    /// Learning rule (decides the feedback tensors).
    pub rule: Rule,
    /// Activation of the hidden layers.
    pub hidden: Activation,
    /// Activation of the output layer.
    pub output: Activation,
}

/// Value counts per tensor class (multiply by a container size for bytes, a word for bits).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct Counts {
    /// Forward weights.
    pub forward_weights: usize,
    /// Forward biases.
    pub biases: usize,
    /// Feedback weights and feedback biases.
    pub feedback_weights: usize,
    /// Activations, pre-activations' derivatives, targets and local errors.
    pub activations: usize,
    /// Working buffers of target propagation and feedback training.
    pub scratch: usize,
    /// Activation lookup tables.
    pub table: usize,
}

impl Counts {
    /// All values.
    pub fn total(&self) -> usize {
        self.forward_weights
            + self.biases
            + self.feedback_weights
            + self.activations
            + self.scratch
            + self.table
    }
}

impl Plan {
    /// A plan for `shape` trained by `rule`.
    pub fn new(shape: Shape, rule: Rule, hidden: Activation, output: Activation) -> Plan {
        Plan {
            shape,
            rule,
            hidden,
            output,
        }
    }

    /// Number of weight layers.
    #[inline]
    pub fn layers(&self) -> usize {
        self.shape.layers()
    }
    /// Size of layer `l`.
    #[inline]
    pub fn n(&self, l: usize) -> usize {
        self.shape.n(l)
    }
    /// Activation of weight layer `l` (1-based: the layer producing `h_l`).
    #[inline]
    pub fn act(&self, l: usize) -> Activation {
        if l == self.layers() {
            self.output
        } else {
            self.hidden
        }
    }

    /// Forward weights of layer `l` (1..=L): `n(l)` rows of `n(l-1)`, row-major.
    pub fn w_range(&self, l: usize) -> core::ops::Range<usize> {
        let start: usize = (1..l).map(|k| self.n(k) * self.n(k - 1)).sum();
        start..start + self.n(l) * self.n(l - 1)
    }
    /// Values of one per-neuron tensor of layer `l` (1..=L) in a buffer over layers 1..=L.
    pub fn node_range(&self, l: usize) -> core::ops::Range<usize> {
        let start: usize = (1..l).map(|k| self.n(k)).sum();
        start..start + self.n(l)
    }
    /// `h_l` (0..=L) in the activation buffer.
    pub fn h_range(&self, l: usize) -> core::ops::Range<usize> {
        let start: usize = (0..l).map(|k| self.n(k)).sum();
        start..start + self.n(l)
    }
    /// Columns of the feedback matrix of hidden layer `i` (its rows are `n(i)`).
    pub fn fb_cols(&self, i: usize) -> usize {
        match self.rule.feedback() {
            Feedback::None => 0,
            Feedback::NextLayer | Feedback::Inverse => self.n(i + 1),
            Feedback::Direct => self.shape.outputs(),
        }
    }
    /// Feedback matrix of hidden layer `i` (1..L).
    pub fn fb_range(&self, i: usize) -> core::ops::Range<usize> {
        let start: usize = (1..i).map(|k| self.n(k) * self.fb_cols(k)).sum();
        start..start + self.n(i) * self.fb_cols(i)
    }
    /// Feedback bias of hidden layer `i` (empty unless the feedback is a learned inverse).
    pub fn fbb_range(&self, i: usize) -> core::ops::Range<usize> {
        if self.rule.feedback() == Feedback::Inverse {
            self.node_range(i)
        } else {
            0..0
        }
    }

    /// Sum of layer sizes 0..=L.
    fn all_nodes(&self) -> usize {
        self.shape.sizes().iter().map(|&n| usize::from(n)).sum()
    }

    /// Value counts per class.
    pub fn counts(&self) -> Counts {
        let l = self.layers();
        let nodes_1 = self.all_nodes() - self.n(0);
        let hidden = 1..l;
        let fb: usize = hidden.clone().map(|i| self.n(i) * self.fb_cols(i)).sum();
        let fbb: usize = hidden.map(|i| self.fbb_range(i).len()).sum();
        let scratch = if self.rule.feedback() == Feedback::None {
            0
        } else {
            2 * self.all_nodes() + SCRATCH_VECTORS * self.shape.widest()
        };
        Counts {
            forward_weights: self.w_range(l).end,
            biases: nodes_1,
            feedback_weights: fb + fbb,
            // h over 0..=L; f'(a), displacement d and local error δ over 1..=L.
            activations: self.all_nodes() + 3 * nodes_1,
            scratch,
            table: self.hidden.table_len().max(self.output.table_len()),
        }
    }
}

/// Widest-layer vectors the rules use as working space.
pub const SCRATCH_VECTORS: usize = 4;
