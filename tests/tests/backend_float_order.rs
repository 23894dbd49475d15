//! The float back end's order of operations, as its documentation states it, and the error
//! bound any order of a dot product's additions must meet.
//!
//! * A contiguous dot product keeps 32 partial sums (term `i` into sum `i mod 32`, each from
//!   `+0` in increasing `i`), halves them pairwise (16, 8, 4, 2, 1) and adds the bias last.
//!   The test forms that order itself, element by element in plain `f32` (no fused
//!   multiply-add), and requires the same bits: the order, not the target's vector units,
//!   decides the result.
//! * `dot_columns` (the transposed product of a backward pass) must give, bit for bit, one
//!   strided `dot` per column, which adds its terms in increasing order; `dot_rows` (a layer's
//!   linear map, four rows at a time) one contiguous `dot` per row.
//! * Against the exact value (formed in `f64`, where every product of two `f32` is exact and
//!   the sums of these short vectors lose far less than the bound), a dot product of `n`
//!   terms computed in any order of its additions is off by at most `γ_n Σ |a_i b_i|`,
//!   `γ_n = n u / (1 − n u)`, `u = 2^-24` ("Accuracy and Stability of Numerical Algorithms",
//!   2nd edition, SIAM, 2002, §3.1, that the bound holds for every order recalled from
//!   memory; the unit roundoff of `f32` from "IEEE Standard for Floating-Point Arithmetic",
//!   IEEE Std 754-2019; docs/references.md [15], [16]).
//! * The update counters: an increment `f32` absorbs (`1 + 2^-25` rounds to nearest, back
//!   to 1, IEEE Std 754-2019, docs/references.md [15]) is lost, a zero increment is not
//!   attempted, and a non-finite weight is reported with its layer and class.

use tidewise_core::backend::{Backend, Float};
use tidewise_core::class::{Class, Tag};
use tidewise_core::rng::Stream;

/// Seeded reals in [-1, 1), some scaled far up or down so rounding matters.
fn reals(g: &mut Stream, n: usize) -> Vec<f32> {
    (0..n)
        .map(|_| {
            let v = g.next_u32() as f32 / 2_147_483_648.0 - 1.0;
            match g.below(4) {
                0 => v * 1024.0,
                1 => v / 1024.0,
                _ => v,
            }
        })
        .collect()
}

/// The documented order, written out independently of the back end.
fn documented(a: &[f32], b: &[f32], bias: Option<f32>) -> f32 {
    let mut s = [0f32; 32];
    for i in 0..a.len().min(b.len()) {
        s[i % 32] += a[i] * b[i];
    }
    for w in [16, 8, 4, 2, 1] {
        for k in 0..w {
            s[k] += s[k + w];
        }
    }
    match bias {
        Some(c) => s[0] + c,
        None => s[0],
    }
}

fn dot(be: &mut Float, a: &[f32], stride: usize, b: &[f32], bias: Option<f32>) -> f32 {
    let t = Tag::act(1);
    be.dot(
        t,
        Tag::weights(1),
        a,
        stride,
        Tag::act(0),
        b,
        bias.map(|v| (t, v)),
    )
}

#[test]
fn contiguous_dot_follows_the_documented_order() {
    let mut g = Stream::new(11, 0);
    let mut be = Float::new();
    for n in (0..=100).chain([255, 256, 257, 784]) {
        let (a, b) = (reals(&mut g, n), reals(&mut g, n));
        let bias = reals(&mut g, 1)[0];
        for bias in [None, Some(bias)] {
            let got = dot(&mut be, &a, 1, &b, bias);
            let want = documented(&a, &b, bias);
            assert_eq!(got.to_bits(), want.to_bits(), "n = {n}, bias {bias:?}");
        }
    }
    assert_eq!(be.fault(), None);
}

#[test]
fn dot_is_within_the_error_bound_of_any_order() {
    let u = 2f64.powi(-24);
    let mut g = Stream::new(12, 0);
    let mut be = Float::new();
    for n in [1, 7, 31, 32, 33, 64, 100, 256, 1000] {
        let (a, b) = (reals(&mut g, n), reals(&mut g, n));
        let exact: f64 = a
            .iter()
            .zip(&b)
            .map(|(&x, &y)| f64::from(x) * f64::from(y))
            .sum();
        let abs: f64 = a
            .iter()
            .zip(&b)
            .map(|(&x, &y)| (f64::from(x) * f64::from(y)).abs())
            .sum();
        let gamma = n as f64 * u / (1.0 - n as f64 * u);
        let got = f64::from(dot(&mut be, &a, 1, &b, None));
        assert!(
            (got - exact).abs() <= gamma * abs,
            "n = {n}: |{got} - {exact}| > {}",
            gamma * abs
        );
    }
}

#[test]
fn transposed_product_is_one_strided_dot_per_column() {
    let mut g = Stream::new(13, 0);
    // (rows, columns, outputs): square, fewer outputs than columns, a ragged last row,
    // one column (a contiguous dot), more outputs than columns (reaching the next row).
    for (rows, cols, outs, cut) in [
        (256, 256, 256, 0),
        (10, 256, 256, 0),
        (33, 40, 17, 0),
        (9, 12, 12, 5),
        (50, 1, 1, 0),
        (6, 4, 9, 0),
    ] {
        let mut a = reals(&mut g, rows * cols);
        a.truncate(rows * cols - cut);
        let b = reals(&mut g, rows);
        let mut be = Float::new();
        let mut out = vec![f32::NAN; outs];
        let t = Tag::act(1);
        be.dot_columns(t, Tag::weights(2), &a, cols, Tag::act(2), &b, &mut out);
        let mut each = Float::new();
        for (j, o) in out.iter().enumerate() {
            let want = dot(&mut each, a.get(j..).unwrap_or_default(), cols, &b, None);
            assert_eq!(o.to_bits(), want.to_bits(), "{rows}x{cols}, output {j}");
        }
    }
}

#[test]
fn linear_map_is_one_dot_per_row() {
    let mut g = Stream::new(14, 0);
    // (rows, columns, outputs): whole blocks of four rows, a partial block, fewer outputs
    // than rows, more outputs than rows, a ragged last row, short and long rows.
    for (rows, cols, outs, cut) in [
        (256, 64, 256, 0),
        (10, 256, 10, 0),
        (7, 33, 5, 0),
        (6, 31, 9, 0),
        (9, 40, 9, 3),
        (5, 1, 5, 0),
        (8, 100, 8, 0),
    ] {
        let mut m = reals(&mut g, rows * cols);
        m.truncate(rows * cols - cut);
        let x = reals(&mut g, cols);
        let bias = reals(&mut g, outs);
        for with_bias in [false, true] {
            let t = Tag::act(1);
            let b = with_bias.then_some((Tag::bias(1), bias.as_slice()));
            let mut be = Float::new();
            let mut out = vec![f32::NAN; outs];
            be.dot_rows(t, Tag::weights(1), &m, Tag::act(0), &x, b, &mut out);
            let mut each = Float::new();
            let full = m.len() / cols;
            for (r, o) in out.iter().enumerate() {
                if r >= full {
                    // No row to compute: left as it was.
                    assert!(o.is_nan(), "{rows}x{cols}, output {r}");
                    continue;
                }
                let row = &m[r * cols..][..cols];
                let want = dot(&mut each, row, 1, &x, with_bias.then(|| bias[r]));
                assert_eq!(o.to_bits(), want.to_bits(), "{rows}x{cols}, output {r}");
            }
        }
    }
}

#[test]
fn non_finite_transposed_product_is_reported() {
    let mut be = Float::new();
    be.set_layer(1);
    let a = [1.0, f32::MAX, 1.0, f32::MAX];
    let mut out = [0f32; 2];
    be.dot_columns(
        Tag::act(1),
        Tag::weights(2),
        &a,
        2,
        Tag::act(2),
        &[1.0, 1.0],
        &mut out,
    );
    assert_eq!(out[0], 2.0);
    assert_eq!(out[1], f32::INFINITY);
    assert_eq!(be.fault(), Some((1, Class::Act)));
}

#[test]
fn update_counts_attempted_and_lost_and_watches_for_non_finite() {
    let mut be = Float::new();
    be.set_layer(2);
    let wt = Tag::weights(3);
    // Increments 2^-25 (absorbed by 1), 0 (not attempted), 2^-20 (kept), across a row longer
    // than one vector so the counts are summed over lanes and the tail.
    let x: Vec<f32> = (0..70)
        .map(|j| match j % 3 {
            0 => 2f32.powi(-25),
            1 => 0.0,
            _ => 2f32.powi(-20),
        })
        .collect();
    let mut row = vec![1.0f32; 70];
    be.update(wt, &mut row, 1.0, Tag::act(3), 1.0, Tag::act(2), &x);
    let (attempted, lost) = (24 + 23, 24);
    assert_eq!(be.counters().total_updates(), attempted);
    assert_eq!(be.counters().total_lost(), lost);
    for (j, w) in row.iter().enumerate() {
        let want = if j % 3 == 2 {
            1.0 + 2f32.powi(-20)
        } else {
            1.0
        };
        assert_eq!(*w, want, "weight {j}");
    }
    assert_eq!(be.fault(), None);
    // An increment that overflows to infinity (IEEE Std 754-2019, clause 7.4).
    let mut row = vec![f32::MAX; 40];
    be.update(
        wt,
        &mut row,
        2.0,
        Tag::act(3),
        1.0,
        Tag::act(2),
        &[f32::MAX; 40],
    );
    assert_eq!(be.fault(), Some((2, Class::Forward)));
}
