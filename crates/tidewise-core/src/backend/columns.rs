//! The transposed product of the fast fixed back end, all outputs at once: the exact column
//! sums `Σ_i a[i·stride + j] · b[i]` formed row by row along contiguous memory (a loop the
//! compiler vectorises across columns) instead of one strided walk per column.
//!
//! Each column's terms are added in the same order as the strided dot adds them, and with
//! the sum of their magnitudes beside it; the caller keeps only columns whose magnitudes
//! show that no partial sum can leave the accumulator, where the exact sum is the dot's.

use super::Word;

/// Columns summed per pass over the rows: enough to fill vector registers, few enough that
/// the partial sums stay in them.
const BLOCK: usize = 32;

/// Calls `f(j0, sums, magnitudes)` for each block of up to [`BLOCK`] columns starting at
/// column `j0`, for the `cols` columns of `a` (row-major, `stride` values a row, one row per
/// value of `b`): `sums[k]` is `Σ_i a[i·stride + j0 + k] · b[i]` and `magnitudes[k]` the sum
/// of the terms' magnitudes, or 0 when `TRACK` is off (the caller has bounded them another
/// way). The caller makes sure that `a` holds every term (`(b.len() − 1) · stride + cols`
/// values) and that the sums fit `i64`.
#[inline(always)]
pub(super) fn blocks<W: Word, const TRACK: bool>(
    a: &[W],
    stride: usize,
    b: &[W],
    cols: usize,
    mut f: impl FnMut(usize, &[i64], &[i64]),
) {
    let mut j0 = 0;
    while j0 < cols {
        let w = BLOCK.min(cols - j0);
        let (mut sums, mut mags) = ([0i64; BLOCK], [0i64; BLOCK]);
        for (row, &y) in a.chunks(stride.max(1)).zip(b) {
            // A zero term adds nothing to either sum.
            if y == W::default() {
                continue;
            }
            let row = row.get(j0..j0 + w).unwrap_or_default();
            for ((s, m), &x) in sums.iter_mut().zip(mags.iter_mut()).zip(row) {
                let p = x.product(y);
                *s += p;
                if TRACK {
                    *m += p.abs();
                }
            }
        }
        f(j0, &sums[..w], &mags[..w]);
        j0 += w;
    }
}
