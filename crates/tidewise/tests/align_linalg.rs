//! The measurement's Gauss-Newton step and null-space share against nalgebra's least-squares solve.
//!
//! Reference: `nalgebra::SVD::solve` (a general-purpose linear-algebra library from
//! crates.io), which solves `J x = e` through the SVD, dropping singular values at or below
//! its `eps`: the minimum-norm least-squares solution. Fact of the trade: the Moore-Penrose
//! pseudo-inverse gives that solution ("A generalized inverse for matrices", Proceedings of
//! the Cambridge Philosophical Society 51, 1955; recalled from memory; docs/references.md [26]), and the
//! pseudo-inverse of a Kronecker product is the Kronecker product of the pseudo-inverses.

use nalgebra::{DMatrix, DVector, SVD};
use tidewise::align::linalg::{
    gn_step_generic, gn_step_kron, kron_jacobian, null_share_generic, null_share_kron, pinv, rcond,
    unvec, vec_rows,
};
use tidewise_core::rng::Stream;

fn uniform(rng: &mut Stream) -> f64 {
    f64::from(rng.next_u32()) / f64::from(u32::MAX) * 2.0 - 1.0
}

fn random_matrix(rng: &mut Stream, rows: usize, cols: usize) -> DMatrix<f64> {
    DMatrix::from_fn(rows, cols, |_, _| uniform(rng))
}

fn random_vector(rng: &mut Stream, n: usize) -> DVector<f64> {
    DVector::from_fn(n, |_, _| uniform(rng))
}

/// `J_a` for the cases: full rank wide, square, tall, a dead unit (zero column) and
/// repeated output rows (rank below the output count).
fn cases(rng: &mut Stream) -> Vec<(DMatrix<f64>, usize)> {
    let mut out = Vec::new();
    for &(m, n, k) in &[(3, 5, 4), (4, 4, 3), (6, 3, 2), (2, 7, 5), (5, 9, 6)] {
        out.push((random_matrix(rng, m, n), k));
    }
    let mut dead = random_matrix(rng, 3, 6);
    dead.column_mut(2).fill(0.0);
    out.push((dead, 4));
    let mut repeated = random_matrix(rng, 4, 6);
    let r0 = repeated.row(0).clone_owned();
    repeated.row_mut(3).copy_from(&r0);
    out.push((repeated, 3));
    out
}

/// nalgebra's SVD of `j`, checked by recomposing it: nalgebra now and then returns a wrong
/// decomposition (dimforge/nalgebra issue #1172), so when the direct one fails the check the
/// SVD of `jᵀ` is taken and transposed into an SVD of `j`. Counts the direct failures.
fn reference_svd(j: &DMatrix<f64>, failures: &mut u32) -> SVD<f64, nalgebra::Dyn, nalgebra::Dyn> {
    let ok = |svd: &SVD<f64, nalgebra::Dyn, nalgebra::Dyn>| {
        let r = svd.clone().recompose().expect("U and V were computed");
        (r - j).norm() <= 1e-11 * j.norm()
    };
    let direct = j.clone().svd(true, true);
    if ok(&direct) {
        return direct;
    }
    *failures += 1;
    let t = j.transpose().svd(true, true);
    let flipped = SVD {
        u: t.v_t.map(|v| v.transpose()),
        v_t: t.u.map(|u| u.transpose()),
        singular_values: t.singular_values,
    };
    assert!(
        ok(&flipped),
        "neither SVD of J_W nor of its transpose recomposes it"
    );
    flipped
}

fn rel(a: &DVector<f64>, b: &DVector<f64>) -> f64 {
    (a - b).norm() / b.norm().max(1e-300)
}

#[test]
fn gn_step_is_the_minimum_norm_least_squares_solution() {
    let mut rng = Stream::new(11, 1);
    let (mut checked, mut failures) = (0u32, 0u32);
    for round in 0..20 {
        for (j_a, k) in cases(&mut rng) {
            let x = random_vector(&mut rng, k);
            let e = random_vector(&mut rng, j_a.nrows());
            let j_w = kron_jacobian(&j_a, &x);
            let svd = reference_svd(&j_w, &mut failures);
            let eps = rcond(j_w.nrows(), j_w.ncols()) * svd.singular_values.max();
            let reference = svd.solve(&e, eps).expect("U and V were computed");
            checked += 1;

            let generic = gn_step_generic(&j_w, &e).expect("svd converges");
            let structured = vec_rows(&gn_step_kron(&pinv(&j_a).expect("svd converges"), &x, &e));
            assert!(
                rel(&generic, &reference) < 1e-9,
                "round {round}: generic step differs from SVD::solve by {}",
                rel(&generic, &reference)
            );
            assert!(
                rel(&structured, &reference) < 1e-9,
                "round {round}: structured step differs from SVD::solve by {} (J_a {}x{}, k {k})",
                rel(&structured, &reference),
                j_a.nrows(),
                j_a.ncols()
            );

            // The definition itself: moving along the null space keeps J_W x and adds norm.
            let p = pinv(&j_w).expect("svd converges");
            let r = random_vector(&mut rng, j_w.ncols());
            let z = &r - &p * (&j_w * &r);
            let moved = &structured + &z;
            assert!((&j_w * &moved - &j_w * &structured).norm() < 1e-9 * (1.0 + e.norm()));
            assert!(moved.norm() >= structured.norm() - 1e-12);
        }
    }
    eprintln!("{checked} problems; nalgebra's direct SVD of J_W failed its check on {failures}");
}

#[test]
fn structured_null_share_equals_the_explicit_projector() {
    let mut rng = Stream::new(12, 1);
    let mut failures = 0u32;
    for _ in 0..20 {
        for (j_a, k) in cases(&mut rng) {
            let n = j_a.ncols();
            let x = random_vector(&mut rng, k);
            let j_w = kron_jacobian(&j_a, &x);
            // A general (not rank-one) update, like a rounded fixed-point one.
            let dw = random_matrix(&mut rng, n, k);
            let v = vec_rows(&dw);
            // Reference: (I − J_W⁺ J_W) v with the projector built from nalgebra's solve.
            let svd = reference_svd(&j_w, &mut failures);
            let eps = rcond(j_w.nrows(), j_w.ncols()) * svd.singular_values.max();
            let row_part = svd.solve(&(&j_w * &v), eps).expect("U and V were computed");
            let reference = (&v - row_part).norm() / v.norm();

            let p_a = pinv(&j_a).expect("svd converges") * &j_a;
            let structured = null_share_kron(&p_a, &x, &dw).expect("non-zero update");
            let generic = null_share_generic(&j_w, &v).expect("non-zero update");
            assert!(
                (structured - reference).abs() < 1e-9,
                "{structured} vs {reference}"
            );
            assert!(
                (generic - reference).abs() < 1e-9,
                "{generic} vs {reference}"
            );
            // An update built as J_Wᵀ e lies in the row space: share 0.
            let e = random_vector(&mut rng, j_a.nrows());
            let along = unvec(&(j_w.transpose() * e), n, k);
            let share = null_share_kron(&p_a, &x, &along).expect("non-zero update");
            assert!(share < 1e-9, "J_Wᵀ e has null share {share}");
        }
    }
    eprintln!("nalgebra's direct SVD of J_W failed its check on {failures} problems");
}

#[test]
fn thin_svd_recovers_from_a_failing_decomposition() {
    // The all-ones 3 × 5 matrix: a rank-one reproducer reported in dimforge/nalgebra issue
    // #1172; its only non-zero singular value is √15 (fact of the trade: 1 1ᵀ has the
    // singular value √(m n)).
    let ones = DMatrix::from_element(3, 5, 1.0);
    let (u, s, v_t) = tidewise::align::linalg::thin_svd(&ones).expect("a checked SVD");
    assert!((&u * DMatrix::from_diagonal(&s) * &v_t - &ones).norm() < 1e-10);
    assert!(
        (s.max() - 15f64.sqrt()).abs() < 1e-10,
        "largest singular value {}",
        s.max()
    );
    let p = pinv(&ones).expect("a checked SVD");
    assert!((p - DMatrix::from_element(5, 3, 1.0 / 15.0)).norm() < 1e-12);
}
