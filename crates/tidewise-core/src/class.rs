//! Tensor classes, the tags that name an operand's class and layer, and the event counters
//! kept per layer and class.
//!
//! A value carries no format of its own: the [`Tag`] a kernel writes it under decides it
//! (its class, and for the per-layer classes its layer). The same classes name the memory
//! figures of a design.

/// What a stored or computed value is, which decides its format in the fixed back end.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize,
)]
#[repr(u8)]
pub enum Class {
    /// Forward weights W.
    Forward = 0,
    /// Forward biases b.
    Bias = 1,
    /// Feedback weights and biases (inverses G, random B, direct Q).
    Feedback = 2,
    /// Activations, pre-activations, targets, displacements and local errors.
    Act = 3,
    /// Multiply-accumulate register (its word and overflow; its fraction is the products').
    Acc = 4,
    /// Learning rates and decay factors.
    Rate = 5,
    /// The per-neuron update step η·δ, held in a register while a row is updated.
    Step = 6,
    /// Noise injected for feedback training.
    Noise = 7,
}

/// Number of classes.
pub const CLASSES: usize = 8;

impl Class {
    /// Every class, in index order.
    pub const ALL: [Class; CLASSES] = [
        Class::Forward,
        Class::Bias,
        Class::Feedback,
        Class::Act,
        Class::Acc,
        Class::Rate,
        Class::Step,
        Class::Noise,
    ];

    /// Index into per-class tables.
    pub const fn index(self) -> usize {
        self as usize
    }

    /// The snake-case name used in specs and reports.
    pub const fn name(self) -> &'static str {
        match self {
            Class::Forward => "forward_weights",
            Class::Bias => "biases",
            Class::Feedback => "feedback_weights",
            Class::Act => "activations",
            Class::Acc => "accumulator",
            Class::Rate => "rate",
            Class::Step => "step",
            Class::Noise => "noise",
        }
    }
}

/// Largest number of weight layers a network may have.
pub const MAX_LAYERS: usize = 8;

/// Layers a tensor can belong to: 0 (the input) to [`MAX_LAYERS`].
pub const LAYER_ROWS: usize = MAX_LAYERS + 1;

/// An operand or destination of the arithmetic seam: its class and the layer it belongs to.
///
/// Layers are numbered as in the equations: `W_l`, `b_l` for l = 1..=L, activations `h_l`
/// (and everything else of layer l: pre-activation, `f'(a_l)`, `d_l`, `δ_l`, targets, noisy
/// copies, reconstructions) for l = 0..=L, 0 being the input; the feedback matrix of hidden
/// layer `i` is tagged `i`. [`Tag::global`] names a value that belongs to no layer: the
/// constants (0, 1, ½, ¼, tanh knots and table, β, the rates, the noise amplitude) and the
/// registers (accumulator, step). A back end resolves a tag to a format; the fixed one looks
/// it up in a `[layer][class]` table, where a class without per-layer formats has its class
/// format in every row and the global row holds every class format.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Tag {
    /// The tensor class.
    pub class: Class,
    /// The layer, 0..=[`MAX_LAYERS`], or [`Tag::GLOBAL`].
    pub layer: u8,
}

impl Tag {
    /// The `layer` of a value that belongs to no layer.
    pub const GLOBAL: u8 = LAYER_ROWS as u8;

    /// A value of `class` that belongs to no layer (a constant or a register).
    pub const fn global(class: Class) -> Tag {
        Tag {
            class,
            layer: Tag::GLOBAL,
        }
    }
    /// A value of `class` belonging to layer `l` (clamped to [`MAX_LAYERS`]).
    pub const fn at(class: Class, l: usize) -> Tag {
        Tag {
            class,
            layer: if l < LAYER_ROWS {
                l as u8
            } else {
                MAX_LAYERS as u8
            },
        }
    }
    /// An activation-class value of layer `l` (0 = input): `h_l`, `a_l`, `f'(a_l)`, `d_l`,
    /// `δ_l`, targets, noisy copies and reconstructions of layer `l`.
    pub const fn act(l: usize) -> Tag {
        Tag::at(Class::Act, l)
    }
    /// The forward weights `W_l` (l = 1..=L).
    pub const fn weights(l: usize) -> Tag {
        Tag::at(Class::Forward, l)
    }
    /// The forward biases `b_l` (l = 1..=L).
    pub const fn bias(l: usize) -> Tag {
        Tag::at(Class::Bias, l)
    }
    /// The feedback weights and biases of hidden layer `i` (1..L).
    pub const fn feedback(i: usize) -> Tag {
        Tag::at(Class::Feedback, i)
    }
    /// Whether the tag belongs to no layer.
    pub const fn is_global(self) -> bool {
        self.layer >= Tag::GLOBAL
    }
    /// Row of a `[row][class]` table of `LAYER_ROWS + 1` rows: the layer, or the last row
    /// for a global tag.
    #[inline(always)]
    pub const fn row(self) -> usize {
        let l = self.layer as usize;
        if l < LAYER_ROWS {
            l
        } else {
            LAYER_ROWS
        }
    }
}

impl From<Class> for Tag {
    /// The global tag of a class.
    fn from(c: Class) -> Tag {
        Tag::global(c)
    }
}

/// Event counts per layer and class.
///
/// * `saturations`: results that fell outside their format and were clamped or wrapped;
/// * `lost`: updates whose exact value was non-zero but left the stored weight unchanged
///   (rounded away, not clamped) — the main way low-precision learning stalls;
/// * `updates`: weight updates attempted, only those whose exact increment is non-zero (an
///   update of zero cannot be lost), the denominator of the other two.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Counters {
    /// Saturation (or wrap) events.
    pub saturations: [[u32; CLASSES]; MAX_LAYERS],
    /// Updates lost to rounding.
    pub lost: [[u32; CLASSES]; MAX_LAYERS],
    /// Updates attempted (exact increment non-zero).
    pub updates: [[u32; CLASSES]; MAX_LAYERS],
}

fn total(table: &[[u32; CLASSES]; MAX_LAYERS]) -> u64 {
    table.iter().flatten().map(|&v| u64::from(v)).sum()
}

impl Counters {
    /// Adds one saturation in `layer`, `class` (counts stop at `u32::MAX`).
    #[inline]
    pub fn saturated(&mut self, layer: usize, class: Class) {
        if let Some(v) = self
            .saturations
            .get_mut(layer)
            .and_then(|r| r.get_mut(class.index()))
        {
            *v = v.saturating_add(1);
        }
    }

    /// Adds `lost` lost and `updates` attempted updates in `layer`, `class`.
    #[inline]
    pub fn updated(&mut self, layer: usize, class: Class, updates: u32, lost: u32) {
        let i = class.index();
        if let (Some(u), Some(l)) = (
            self.updates.get_mut(layer).and_then(|r| r.get_mut(i)),
            self.lost.get_mut(layer).and_then(|r| r.get_mut(i)),
        ) {
            *u = u.saturating_add(updates);
            *l = l.saturating_add(lost);
        }
    }

    /// All saturations.
    pub fn total_saturations(&self) -> u64 {
        total(&self.saturations)
    }
    /// All lost updates.
    pub fn total_lost(&self) -> u64 {
        total(&self.lost)
    }
    /// All attempted updates.
    pub fn total_updates(&self) -> u64 {
        total(&self.updates)
    }
    /// Saturations of one class over all layers.
    pub fn class_saturations(&self, class: Class) -> u64 {
        self.saturations
            .iter()
            .map(|r| u64::from(r[class.index()]))
            .sum()
    }
    /// Lost updates of one class over all layers.
    pub fn class_lost(&self, class: Class) -> u64 {
        self.lost.iter().map(|r| u64::from(r[class.index()])).sum()
    }
}
