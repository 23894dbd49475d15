//! Dense `f64` pieces of the measurement: pseudo-inverses, Gauss-Newton steps, null-space shares
//! and angles, in the generic form (an explicit `J_W`) and in the structured form a layer's
//! Jacobian has (`J_W = J_a ⊗ xᵀ`).
//!
//! **The structured form.** Layer `l` computes `a = W x + b`, `x = h_{l−1}`. With the weights
//! vectorised row by row, `∂h_L/∂W[r, c] = J_a[:, r] · x[c]`, so `J_W = J_a ⊗ xᵀ`
//! (`J_a = ∂h_L/∂a_l`, `m × n`; `J_W` is `m × n·k`). The pseudo-inverse of a Kronecker
//! product is the Kronecker product of the pseudo-inverses, and `(xᵀ)⁺ = x / ‖x‖²`, so
//!
//! * the Gauss-Newton step `J_W⁺ e` is `vec((J_a⁺ e) xᵀ) / ‖x‖²`;
//! * the projector onto the row space of `J_W` is `J_W⁺ J_W = (J_a⁺ J_a) ⊗ (x xᵀ / ‖x‖²)`,
//!   which maps `vec(ΔW)` to `vec(P_a ΔW x xᵀ) / ‖x‖²` with `P_a = J_a⁺ J_a`.
//!
//! Both need one SVD of the small `m × n` matrix `J_a` instead of one of the `m × n·k`
//! matrix `J_W`; the generic forms are kept to test them against.

use nalgebra::{DMatrix, DVector};

/// Iterations the SVD may take before it gives up (nalgebra's own default is unbounded).
const MAX_SWEEPS: usize = 10_000;

/// The SVD's convergence tolerance: nalgebra's default for `svd()`, 5 ε. (A tighter 1 ε
/// was seen to return wrong singular vectors for a rank-deficient 6 × 6 `J_W`, which the
/// comparison with `SVD::solve` in `tests/align_linalg.rs` caught.)
const SVD_EPS: f64 = 5.0 * f64::EPSILON;

/// The relative cut-off below which a singular value counts as zero: `max(m, n) · ε`
/// (the usual choice for a pseudo-inverse in double precision).
pub fn rcond(rows: usize, cols: usize) -> f64 {
    rows.max(cols).max(1) as f64 * f64::EPSILON
}

/// A thin SVD `J = U diag(s) Vᵀ` (`U`: `m × r`, `s`: `r`, `Vᵀ`: `r × n`), checked.
///
/// nalgebra's SVD now and then returns `Some` with singular values that do not recompose
/// the matrix (dimforge/nalgebra issue #1172, "SVD: Occasional failure to decompose"; seen
/// here on rank-deficient `J_W`). So every decomposition is checked,
/// `‖U S Vᵀ − J‖_F ≤ 1e-11 ‖J‖_F`, and on failure the SVD of `Jᵀ` is tried, then the
/// eigen-decomposition of the smaller Gram matrix (`J Jᵀ` or `Jᵀ J`, accurate to about
/// `ε κ²`, checked at `1e-8`). `None` when all three fail or `J` is not finite.
pub fn thin_svd(j: &DMatrix<f64>) -> Option<(DMatrix<f64>, DVector<f64>, DMatrix<f64>)> {
    let (m, n) = j.shape();
    if m == 0 || n == 0 || j.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let direct = j
        .clone()
        .try_svd(true, true, SVD_EPS, MAX_SWEEPS)
        .and_then(|d| Some((d.u?, d.singular_values, d.v_t?)));
    if let Some((u, s, v_t)) = direct.filter(|(u, s, v)| recomposes(j, u, s, v, 1e-11)) {
        return Some((u, s, v_t));
    }
    let flipped = j
        .transpose()
        .try_svd(true, true, SVD_EPS, MAX_SWEEPS)
        .and_then(|d| Some((d.v_t?.transpose(), d.singular_values, d.u?.transpose())));
    if let Some((u, s, v_t)) = flipped.filter(|(u, s, v)| recomposes(j, u, s, v, 1e-11)) {
        return Some((u, s, v_t));
    }
    gram_svd(j).filter(|(u, s, v)| recomposes(j, u, s, v, 1e-8))
}

fn recomposes(
    j: &DMatrix<f64>,
    u: &DMatrix<f64>,
    s: &DVector<f64>,
    v_t: &DMatrix<f64>,
    tol: f64,
) -> bool {
    let err = (u * DMatrix::from_diagonal(s) * v_t - j).norm();
    err.is_finite() && err <= tol * j.norm()
}

/// The SVD from the eigen-decomposition of the smaller Gram matrix: for `m ≤ n`,
/// `J Jᵀ = U Λ Uᵀ`, `s = √λ`, `Vᵀ = S⁻¹ Uᵀ J` (rows of dropped values zero); else the same
/// on `Jᵀ`.
fn gram_svd(j: &DMatrix<f64>) -> Option<(DMatrix<f64>, DVector<f64>, DMatrix<f64>)> {
    let (m, n) = j.shape();
    if m > n {
        let (u, s, v_t) = gram_svd(&j.transpose())?;
        return Some((v_t.transpose(), s, u.transpose()));
    }
    let eig = (j * j.transpose()).try_symmetric_eigen(SVD_EPS, MAX_SWEEPS)?;
    let s = eig.eigenvalues.map(|l| l.max(0.0).sqrt());
    let tol = rcond(m, n) * s.max();
    let mut v_t = eig.eigenvectors.transpose() * j;
    for (mut row, &sv) in v_t.row_iter_mut().zip(s.iter()) {
        row *= if sv > tol { 1.0 / sv } else { 0.0 };
    }
    Some((eig.eigenvectors, s, v_t))
}

/// `Jᵀ (J Jᵀ + γ I)⁻¹` through the SVD `J = U S Vᵀ` as `V S (S² + γ)⁻¹ Uᵀ`; `γ = 0` gives the
/// Moore-Penrose pseudo-inverse. Singular values at or below `rcond · σ_max` count as zero.
/// `None` when no decomposition passes its check (see [`thin_svd`]) or `γ` is negative or
/// not finite.
pub fn damped_pinv(j: &DMatrix<f64>, gamma: f64) -> Option<DMatrix<f64>> {
    let (m, n) = j.shape();
    if gamma.is_nan() || gamma < 0.0 || gamma.is_infinite() {
        return None;
    }
    if m == 0 || n == 0 {
        return Some(DMatrix::zeros(n, m));
    }
    let (u, s, v_t) = thin_svd(j)?;
    let tol = rcond(m, n) * s.max();
    let scale = s.map(|v| if v > tol { v / (v * v + gamma) } else { 0.0 });
    // V diag(scale) Uᵀ: scale the rows of Vᵀ, then transpose the product.
    let mut vs = v_t;
    for (mut row, &f) in vs.row_iter_mut().zip(scale.iter()) {
        row *= f;
    }
    Some(vs.transpose() * u.transpose())
}

/// The Moore-Penrose pseudo-inverse.
pub fn pinv(j: &DMatrix<f64>) -> Option<DMatrix<f64>> {
    damped_pinv(j, 0.0)
}

/// The explicit `J_W = J_a ⊗ xᵀ` (`m × n·k`), columns in row-major order of `W` (`r·k + c`).
pub fn kron_jacobian(j_a: &DMatrix<f64>, x: &DVector<f64>) -> DMatrix<f64> {
    let (m, n) = j_a.shape();
    let k = x.len();
    DMatrix::from_fn(m, n * k, |i, col| {
        j_a[(i, col / k.max(1))] * x[col % k.max(1)]
    })
}

/// A matrix `rows × cols` from a vector in row-major order (the layout of the weights).
pub fn unvec(v: &DVector<f64>, rows: usize, cols: usize) -> DMatrix<f64> {
    DMatrix::from_row_slice(rows, cols, v.as_slice())
}

/// A matrix as a vector in row-major order.
pub fn vec_rows(m: &DMatrix<f64>) -> DVector<f64> {
    DVector::from_iterator(m.len(), m.transpose().iter().copied())
}

/// The minimum-norm `ΔW` with `J_W vec(ΔW) = e` to least squares, generic form: `J_W⁺ e`.
pub fn gn_step_generic(j_w: &DMatrix<f64>, e: &DVector<f64>) -> Option<DVector<f64>> {
    Some(pinv(j_w)? * e)
}

/// The same step through the structure: `(J_a⁺ e) xᵀ / ‖x‖²` (`n × k`), given `J_a⁺`.
/// A zero input `x` makes `J_W` zero, whose pseudo-inverse is zero.
pub fn gn_step_kron(j_a_pinv: &DMatrix<f64>, x: &DVector<f64>, e: &DVector<f64>) -> DMatrix<f64> {
    let xx = x.norm_squared();
    let u = j_a_pinv * e;
    if xx == 0.0 {
        return DMatrix::zeros(u.len(), x.len());
    }
    (u / xx) * x.transpose()
}

/// The share of `‖v‖` in the null space of `J_W`, generic form:
/// `‖(I − J_W⁺ J_W) v‖ / ‖v‖`. `None` for a zero `v` (the share is undefined).
pub fn null_share_generic(j_w: &DMatrix<f64>, v: &DVector<f64>) -> Option<f64> {
    let nv = v.norm();
    if nv == 0.0 {
        return None;
    }
    let p = pinv(j_w)?;
    let row_part = &p * (j_w * v);
    Some((v - row_part).norm() / nv)
}

/// The same share through the structure, given `P_a = J_a⁺ J_a` (`n × n`) and `ΔW` (`n × k`).
pub fn null_share_kron(p_a: &DMatrix<f64>, x: &DVector<f64>, dw: &DMatrix<f64>) -> Option<f64> {
    let nv = dw.norm();
    if nv == 0.0 {
        return None;
    }
    let xx = x.norm_squared();
    if xx == 0.0 {
        return Some(1.0);
    }
    let row_part = (p_a * (dw * x) / xx) * x.transpose();
    Some((dw - row_part).norm() / nv)
}

/// The angle between `a` and `b` in degrees, from `2·atan2(‖â − b̂‖, ‖â + b̂‖)`, which stays
/// accurate near 0° and 180° where `acos` of the cosine does not. A zero vector has no
/// direction: its angle to anything is taken as 90° (no component along the other).
pub fn angle_deg(a: &[f64], b: &[f64]) -> f64 {
    let na = a.iter().map(|v| v * v).sum::<f64>().sqrt();
    let nb = b.iter().map(|v| v * v).sum::<f64>().sqrt();
    if na == 0.0 || nb == 0.0 || !na.is_finite() || !nb.is_finite() {
        return if na.is_finite() && nb.is_finite() {
            90.0
        } else {
            f64::NAN
        };
    }
    let (mut diff, mut sum) = (0f64, 0f64);
    for (&x, &y) in a.iter().zip(b) {
        let (x, y) = (x / na, y / nb);
        diff += (x - y) * (x - y);
        sum += (x + y) * (x + y);
    }
    (2.0 * diff.sqrt().atan2(sum.sqrt())).to_degrees()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn angle_of_known_pairs() {
        // Fact of the trade: orthogonal vectors are 90° apart, opposite ones 180°.
        assert!((angle_deg(&[1.0, 0.0], &[0.0, 3.0]) - 90.0).abs() < 1e-12);
        assert!((angle_deg(&[1.0, 1.0], &[-2.0, -2.0]) - 180.0).abs() < 1e-12);
        assert!((angle_deg(&[1.0, 0.0], &[1.0, 1.0]) - 45.0).abs() < 1e-12);
        assert_eq!(angle_deg(&[0.0, 0.0], &[1.0, 0.0]), 90.0);
    }

    #[test]
    fn damped_pinv_matches_worked_values() {
        // Worked values, derived by hand from Jᵀ(JJᵀ + γI)⁻¹: J = [1 1] gives [1/2, 1/2]ᵀ at
        // γ = 0 and [1/3, 1/3]ᵀ at γ = 1; J = [2] gives 1/2 at γ = 0 and 1/4 at γ = 4.
        let j = DMatrix::from_row_slice(1, 2, &[1.0, 1.0]);
        let p = pinv(&j).unwrap();
        assert!((p[(0, 0)] - 0.5).abs() < 1e-12 && (p[(1, 0)] - 0.5).abs() < 1e-12);
        let q = damped_pinv(&j, 1.0).unwrap();
        assert!((q[(0, 0)] - 1.0 / 3.0).abs() < 1e-12);
        let two = DMatrix::from_element(1, 1, 2.0);
        assert!((damped_pinv(&two, 4.0).unwrap()[(0, 0)] - 0.25).abs() < 1e-12);
        assert!(damped_pinv(&two, -1.0).is_none());
    }
}
