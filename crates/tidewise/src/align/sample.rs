//! One measured sample: the rule's update on a copy of the network, the operating point decoded
//! to reals, and the measures computed from them in `f64`.

use nalgebra::{DMatrix, DVector};
use tidewise_core::backend::Backend;
use tidewise_core::class::{Class, Tag};
use tidewise_core::network::Net;
use tidewise_core::rng::Stream;
use tidewise_core::rules::{shared, Feedback, Rule};
use tidewise_core::train::{train_sample, Schedule};

use super::linalg::{angle_deg, damped_pinv, gn_step_kron, null_share_kron, pinv, vec_rows};
use super::Measure;

/// One sample's operating point and the rule's forward-weight update, as reals. Vectors are
/// indexed by layer: `h[0..=L]`; `fp`, `w`, `d`, `dw` hold an empty entry at 0.
#[derive(Clone, Debug)]
pub struct Point {
    /// Activations `h_0 ..= h_L`.
    pub h: Vec<DVector<f64>>,
    /// Activation derivatives `f'(a_l)` the network used (its piecewise-linear forms).
    pub fp: Vec<DVector<f64>>,
    /// Forward weights `W_l` (`n_l × n_{l−1}`) before the update.
    pub w: Vec<DMatrix<f64>>,
    /// The rule's target displacements `d_l = τ_l − h_l`.
    pub d: Vec<DVector<f64>>,
    /// The rule's update `ΔW_l` of the forward weights: what the back end stored.
    pub dw: Vec<DMatrix<f64>>,
    /// In the fixed arm, the intended update beside the stored one: `η δ_l h_{l−1}ᵀ` in
    /// `f64` from the words the update kernel read (the layer's rate, the local error and
    /// the layer input), before any rounding into the weights. It differs from the exact
    /// increment only by the step register's rounding of `η δ` (half an LSB of
    /// `fixed.step` times `|h|`, or less). `None` in the float arm, whose `dw` is this.
    pub intended: Option<Vec<DMatrix<f64>>>,
    /// `y − h_L` for the one-hot label `y`: the negative gradient of `½‖h_L − y‖²` at `h_L`.
    pub residual: DVector<f64>,
    /// The output-target step β (`τ_L − h_L = β (y − h_L)`).
    pub beta: f64,
    /// The rule's learned feedback from the output to each hidden layer `i`, linearised at
    /// this sample (`n_i × n_L`, index `1..L`); empty for rules without learned feedback.
    pub feedback: Vec<DMatrix<f64>>,
}

fn decode_vec<B: Backend>(be: &B, c: Tag, v: &[B::S]) -> DVector<f64> {
    DVector::from_iterator(v.len(), v.iter().map(|&x| f64::from(be.decode(c, x))))
}

fn decode_mat<B: Backend>(be: &B, c: Tag, v: &[B::S], rows: usize, cols: usize) -> DMatrix<f64> {
    DMatrix::from_row_iterator(rows, cols, v.iter().map(|&x| f64::from(be.decode(c, x))))
}

/// Runs the rule's step for sample `(x, label)` on `copy` (a network with `src`'s plan and
/// constants, parameters overwritten from `src` here) with the back end `be` (a clone of the
/// run's), and decodes the result.
///
/// The step is the training step without its feedback-training steps (they draw from the
/// run's noise stream, which the measurement must not touch, and move the feedback by one small
/// step): forward, output target, the rule's displacements, the delta rule. The update is
/// `new − old` of the stored weights in the fixed arm, so rounding and lost updates count;
/// in the float arm it is the rule's `η δ_l h_{l−1}ᵀ` itself, since `new − old` of `f32`
/// weights would add a cancellation error of about `ulp(w)/|Δw|` (1e-5 relative) that is no
/// property of the rule.
pub fn observe<B: Backend>(
    src: &Net<'_, B::S>,
    copy: &mut Net<'_, B::S>,
    be: &mut B,
    rule: Rule,
    beta: f64,
    x: &[B::S],
    label: usize,
) -> Point {
    let plan = src.plan;
    let top = plan.layers();
    copy.copy_params_from(src);
    let schedule = Schedule {
        rule,
        feedback_steps: 0,
    };
    // Never drawn from: the schedule has no feedback steps.
    let mut unused = Stream::new(0, 0);
    train_sample(copy, be, &schedule, x, label, &mut unused, false);

    let h: Vec<_> = (0..=top)
        .map(|l| decode_vec(be, Tag::act(l), &copy.h[plan.h_range(l)]))
        .collect();
    let node = |buf: &[B::S], be: &B| -> Vec<DVector<f64>> {
        core::iter::once(DVector::zeros(0))
            .chain((1..=top).map(|l| decode_vec(be, Tag::act(l), &buf[plan.node_range(l)])))
            .collect()
    };
    let fp = node(copy.fp, be);
    let d = node(copy.d, be);
    let delta = node(copy.delta, be);
    let mut w = vec![DMatrix::zeros(0, 0)];
    let mut dw = vec![DMatrix::zeros(0, 0)];
    let mut intended = vec![DMatrix::zeros(0, 0)];
    for l in 1..=top {
        // The layer's own rate (η / 2^s under `rule.lr_fan_in`), as `update_layer` applies it.
        let eta = f64::from(be.decode(Tag::global(Class::Rate), src.k.layer_lr(l)));
        let (rows, cols) = (plan.n(l), plan.n(l - 1));
        let old = decode_mat(be, Tag::weights(l), &src.w[plan.w_range(l)], rows, cols);
        let exact = (&delta[l] * eta) * h[l - 1].transpose();
        if be.is_fixed() {
            dw.push(decode_mat(be, Tag::weights(l), &copy.w[plan.w_range(l)], rows, cols) - &old);
            intended.push(exact);
        } else {
            dw.push(exact);
        }
        w.push(old);
    }
    let intended = be.is_fixed().then_some(intended);
    let n_out = plan.n(top);
    let residual = DVector::from_fn(n_out, |j, _| if j == label { 1.0 } else { 0.0 }) - &h[top];
    let feedback = if rule.learns_feedback() {
        linear_feedback(src, copy, be, rule)
    } else {
        Vec::new()
    };
    Point {
        h,
        fp,
        w,
        d,
        dw,
        intended,
        residual,
        beta,
        feedback,
    }
}

/// The learned feedback from the output to each hidden layer, linearised at the sample held
/// in `copy`: `Q_i` itself for direct feedback; for learned inverses
/// `g_{k}(v) = f_{k−1}(G_k v + c_k)` the product of their Jacobians
/// `diag(f'(G_k h_k + c_k)) G_k` from the output down to layer `i` (the map from an output
/// displacement to `d_i` under the difference correction, to first order). The derivatives
/// are the back end's own, from the core's inverse kernel on the cloned back end.
fn linear_feedback<B: Backend>(
    src: &Net<'_, B::S>,
    copy: &Net<'_, B::S>,
    be: &mut B,
    rule: Rule,
) -> Vec<DMatrix<f64>> {
    let plan = src.plan;
    let top = plan.layers();
    let mut out = vec![DMatrix::zeros(0, 0); top];
    match rule.feedback() {
        Feedback::Direct => {
            for (i, m) in out.iter_mut().enumerate().skip(1) {
                *m = decode_mat(
                    be,
                    Tag::feedback(i),
                    &src.fw[plan.fb_range(i)],
                    plan.n(i),
                    plan.n(top),
                );
            }
        }
        Feedback::Inverse => {
            let mut below: Option<DMatrix<f64>> = None;
            for i in (1..top).rev() {
                let n = plan.n(i);
                let mut g_out = vec![B::S::default(); n];
                let mut g_fp = vec![B::S::default(); n];
                shared::inverse(
                    &plan,
                    src.fw,
                    src.fb,
                    src.table,
                    &src.k.act,
                    be,
                    i,
                    &copy.h[plan.h_range(i + 1)],
                    &mut g_out,
                    Some(&mut g_fp),
                );
                let g = decode_mat(
                    be,
                    Tag::feedback(i),
                    &src.fw[plan.fb_range(i)],
                    n,
                    plan.n(i + 1),
                );
                let slope = decode_vec(be, Tag::act(i), &g_fp);
                let jac = DMatrix::from_diagonal(&slope) * g;
                let m = match below.take() {
                    Some(up) => jac * up,
                    None => jac,
                };
                out[i] = m.clone();
                below = Some(m);
            }
        }
        Feedback::None | Feedback::NextLayer => {}
    }
    out
}

/// One measure of one layer for one sample; `None` where it is undefined (a zero update
/// has no null-space share).
pub type Value = (usize, Measure, Option<f64>);

/// The output's Jacobians `J_{L,l} = ∂h_L/∂h_l` for `l = 1..=L` (index 0 empty), top down:
/// `J_{L,L} = I`, `J_{L,l} = J_{L,l+1} diag(f'(a_{l+1})) W_{l+1}`.
pub fn output_jacobians(p: &Point) -> Vec<DMatrix<f64>> {
    let top = p.h.len().saturating_sub(1);
    let mut j_out = vec![DMatrix::zeros(0, 0); top + 1];
    if top == 0 {
        return j_out;
    }
    let n_out = p.h[top].len();
    j_out[top] = DMatrix::identity(n_out, n_out);
    for l in (1..top).rev() {
        j_out[l] = scale_columns(&j_out[l + 1], &p.fp[l + 1]) * &p.w[l + 1];
    }
    j_out
}

/// `J_a = ∂h_L/∂a_l = J_{L,l} diag(f'(a_l))` of layer `l`, from [`output_jacobians`].
pub fn preactivation_jacobian(p: &Point, j_out: &[DMatrix<f64>], l: usize) -> DMatrix<f64> {
    scale_columns(&j_out[l], &p.fp[l])
}

/// The Gauss-Newton update of layer `l`: `J_W⁺ (τ_L − h_L)` as an `n_l × n_{l−1}` matrix,
/// through the structure `J_W = J_a ⊗ h_{l−1}ᵀ`.
pub fn gn_update(p: &Point, j_out: &[DMatrix<f64>], l: usize) -> Option<DMatrix<f64>> {
    let j_a = preactivation_jacobian(p, j_out, l);
    Some(gn_step_kron(
        &pinv(&j_a)?,
        &p.h[l - 1],
        &(&p.residual * p.beta),
    ))
}

/// The measures `which` of one sample, with `dw` as the update (the point's stored
/// [`Point::dw`] or its [`Point::intended`]). `gamma` is the damping of the feedback's fixed
/// point.
pub fn measure(p: &Point, dw: &[DMatrix<f64>], gamma: f64, which: &[Measure]) -> Vec<Value> {
    let top = p.h.len().saturating_sub(1);
    let wants = |m: Measure| which.contains(&m);
    let j_out = output_jacobians(p);
    let target_step = &p.residual * p.beta;
    let mut values = Vec::new();
    for l in 1..=top {
        let j_a = preactivation_jacobian(p, &j_out, l);
        let x = &p.h[l - 1];
        let Some(dw_l) = dw.get(l) else {
            continue;
        };
        let dw = vec_rows(dw_l);
        if wants(Measure::AngleBp) {
            let neg_grad = (j_a.transpose() * &p.residual) * x.transpose();
            values.push((
                l,
                Measure::AngleBp,
                Some(angle_deg(dw.as_slice(), vec_rows(&neg_grad).as_slice())),
            ));
        }
        if wants(Measure::AngleGn) || wants(Measure::NullShare) {
            let pa_inv = pinv(&j_a);
            if wants(Measure::AngleGn) {
                let v = pa_inv.as_ref().map(|pi| {
                    let gn = gn_step_kron(pi, x, &target_step);
                    angle_deg(dw.as_slice(), vec_rows(&gn).as_slice())
                });
                values.push((l, Measure::AngleGn, v));
            }
            if wants(Measure::NullShare) {
                let v = pa_inv.and_then(|pi| null_share_kron(&(pi * &j_a), x, dw_l));
                values.push((l, Measure::NullShare, v));
            }
        }
        if l == top {
            continue;
        }
        if wants(Measure::AngleTargetGn) {
            let v = pinv(&j_out[l])
                .map(|pi| angle_deg(p.d[l].as_slice(), (pi * &target_step).as_slice()));
            values.push((l, Measure::AngleTargetGn, v));
        }
        if wants(Measure::FeedbackAlign) {
            if let Some(m) = p.feedback.get(l).filter(|m| !m.is_empty()) {
                let v = damped_pinv(&j_out[l], gamma)
                    .map(|q| angle_deg(vec_rows(m).as_slice(), vec_rows(&q).as_slice()));
                values.push((l, Measure::FeedbackAlign, v));
            }
        }
    }
    values
}

/// `m · diag(s)`.
fn scale_columns(m: &DMatrix<f64>, s: &DVector<f64>) -> DMatrix<f64> {
    let mut out = m.clone();
    for (mut col, &f) in out.column_iter_mut().zip(s.iter()) {
        col *= f;
    }
    out
}
