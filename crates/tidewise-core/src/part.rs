//! Sub-slices that cannot panic. The arena ranges come from the network's [`Plan`], so on a
//! well-formed network every range is in bounds and these return exactly what indexing would;
//! a range that is not (which a checked plan never yields) gives an empty slice instead of a
//! panic. This keeps the decoder and the training loop free of panic paths, which the firmware
//! proves at link time (`ci/panic-proof.sh`, `boards/README.md`).
//!
//! [`Plan`]: crate::plan::Plan

use core::slice::SliceIndex;

/// Non-panicking sub-slicing of `[T]`.
pub(crate) trait Part<T> {
    /// `&self[i]`, or an empty slice if `i` is out of bounds.
    fn part<I: SliceIndex<[T], Output = [T]>>(&self, i: I) -> &[T];
    /// `&mut self[i]`, or an empty slice if `i` is out of bounds.
    fn part_mut<I: SliceIndex<[T], Output = [T]>>(&mut self, i: I) -> &mut [T];
}

impl<T> Part<T> for [T] {
    #[inline(always)]
    fn part<I: SliceIndex<[T], Output = [T]>>(&self, i: I) -> &[T] {
        self.get(i).unwrap_or_default()
    }
    #[inline(always)]
    fn part_mut<I: SliceIndex<[T], Output = [T]>>(&mut self, i: I) -> &mut [T] {
        self.get_mut(i).unwrap_or_default()
    }
}
