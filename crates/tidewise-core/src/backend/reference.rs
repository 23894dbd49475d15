//! The scalar reference of the fixed-point back end: [`super::FixedCore`] with none of the
//! fast kernels' shortcuts, so every kernel runs its straightforward, element-by-element form.
//! It defines the results the fast back end ([`super::Fixed`]) must reproduce bit for bit
//! (results, threshold positions and counters). Compiled with the `reference` feature only
//! (tests and benches), so no firmware carries both.

use super::fixed::{FixedCore, Kernels};

/// The reference kernels: every shortcut of [`Kernels`] declined.
#[derive(Clone, Copy, Debug, Default)]
pub struct Scalar;

impl Kernels for Scalar {}

/// The scalar reference fixed back end: the same construction and interface as
/// [`super::Fixed`].
pub type FixedRef<W> = FixedCore<W, Scalar>;
