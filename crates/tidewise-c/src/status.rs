//! The status code every C call returns.

use tidewise_core::learner::LearnerError;

/// What a call did. `TW_OK` is 0; every other value is a refusal, and a refused call has
/// changed nothing (out-parameters aside: a too-small buffer still reports the size needed).
#[repr(C)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TwStatus {
    /// Done.
    TwOk = 0,
    /// A pointer argument that must not be NULL was NULL.
    TwNullPointer = 1,
    /// A pointer is not aligned for its type (an `int32_t`, `uint32_t` or handle pointer).
    TwMisaligned = 2,
    /// The learner buffer is too small: the bytes needed were written to `size_needed`.
    TwBufferTooSmall = 3,
    /// The layer sizes are no network (fewer than two, a size of 0, or too many layers).
    TwBadSizes = 4,
    /// A format is refused: word or fraction bits out of range, an accumulator too narrow
    /// for the products, or words wider than 32 bits.
    TwBadFormat = 5,
    /// A code (rule, activation, rounding, overflow) is not one of the `TW_*` constants.
    TwBadCode = 6,
    /// A label is not a class: labels run from 0 to classes - 1.
    TwLabelOutOfRange = 7,
    /// An array has the wrong number of values for this network.
    TwWrongLength = 8,
    /// A raw word does not fit its format's word (samples) or the learner's container
    /// (parameters).
    TwValueOutOfRange = 9,
    /// The handle is not a learner made by `tw_learner_new`.
    TwBadHandle = 10,
}

impl From<LearnerError> for TwStatus {
    fn from(e: LearnerError) -> TwStatus {
        match e {
            LearnerError::Sizes(_) => TwStatus::TwBadSizes,
            LearnerError::Buffer { .. } => TwStatus::TwBufferTooSmall,
            LearnerError::Config(_) | LearnerError::Container { .. } => TwStatus::TwBadFormat,
            LearnerError::Sample { .. } | LearnerError::Output { .. } => TwStatus::TwWrongLength,
            LearnerError::Label { .. } => TwStatus::TwLabelOutOfRange,
        }
    }
}

impl TwStatus {
    /// A NUL-terminated English sentence for the status.
    pub const fn text(self) -> &'static [u8] {
        match self {
            TwStatus::TwOk => b"ok\0",
            TwStatus::TwNullPointer => b"a pointer argument was NULL\0",
            TwStatus::TwMisaligned => b"a pointer is not aligned for its type\0",
            TwStatus::TwBufferTooSmall => {
                b"the learner buffer is too small (size_needed holds the bytes needed)\0"
            }
            TwStatus::TwBadSizes => b"the layer sizes are no network\0",
            TwStatus::TwBadFormat => b"a fixed-point format is refused\0",
            TwStatus::TwBadCode => b"a rule, activation, rounding or overflow code is unknown\0",
            TwStatus::TwLabelOutOfRange => b"the label is not a class (0 to classes - 1)\0",
            TwStatus::TwWrongLength => b"an array has the wrong length for this network\0",
            TwStatus::TwValueOutOfRange => b"a raw word does not fit its format\0",
            TwStatus::TwBadHandle => b"the handle is not a learner made by tw_learner_new\0",
        }
    }
}
