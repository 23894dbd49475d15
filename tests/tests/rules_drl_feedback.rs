//! `dtp-drl` feedback on a network with two hidden layers, forward weights frozen: the
//! composed Jacobian of the learned inverses the loop uses for hidden layer `i`,
//! `∂g_{i+1}/∂h_{i+1} ⋯ ∂g_L/∂h_L`, must converge to the damped pseudo-inverse
//! `J_iᵀ (J_i J_iᵀ + γ I)⁻¹` of the forward Jacobian `J_i = ∂h_L/∂h_i`, computed here with
//! `nalgebra` (a general-purpose library).
//!
//! Source: "A Theoretical Framework for Target Propagation", NeurIPS 2020 (recalled from
//! memory: the difference reconstruction loss, minimised layer by layer with the others
//! held, makes the feedback of every hidden layer approximate the damped pseudo-inverse of
//! the output's Jacobian with respect to that layer, so that the propagated targets
//! approximate Gauss-Newton targets). The damping γ follows from the loss as derived in the
//! rule's documentation.

use nalgebra::{DMatrix, DVector};
use tidewise_core::activation::Activation;
use tidewise_core::backend::Float;
use tidewise_core::kernels::forward;
use tidewise_core::network::{Hyper, Net, Regulariser};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::Stream;
use tidewise_core::rules::shared::inverse;
use tidewise_core::rules::{train_feedback, Rule};
use tidewise_core::train::init_params;

const SIZES: [usize; 4] = [3, 7, 6, 4];

/// `∂h_L/∂h_i` at the current forward pass: `D_L W_L ⋯ D_{i+1} W_{i+1}`, the slopes from
/// the stored derivatives.
fn forward_jacobian(net: &Net<'_, f32>, i: usize) -> DMatrix<f64> {
    let plan = net.plan;
    let mut j = DMatrix::<f64>::identity(plan.n(i), plan.n(i));
    for l in i + 1..=plan.layers() {
        let w = DMatrix::from_row_slice(plan.n(l), plan.n(l - 1), &net.w[plan.w_range(l)])
            .map(f64::from);
        let d = DVector::from_iterator(
            plan.n(l),
            net.fp[plan.node_range(l)].iter().map(|&v| f64::from(v)),
        );
        j = DMatrix::from_diagonal(&d) * w * j;
    }
    j
}

/// The Jacobian of the learned inverse `g_k(v) = f_{k−1}(G v + c)` (feedback of hidden
/// layer `k − 1`) at `v = h_k`: `diag(f'_{k−1}(G h_k + c)) G`, the slopes from the core's
/// own activation (the same 17-point tanh table as the forward slopes in `J`).
fn inverse_jacobian(net: &Net<'_, f32>, k: usize) -> DMatrix<f64> {
    let plan = net.plan;
    let (rows, cols) = (plan.n(k - 1), plan.n(k));
    let g = DMatrix::from_row_slice(rows, cols, &net.fw[plan.fb_range(k - 1)]).map(f64::from);
    let (mut out, mut fp) = (vec![0f32; rows], vec![0f32; rows]);
    let mut be = Float::new();
    inverse(
        &plan,
        net.fw,
        net.fb,
        net.table,
        &net.k.act,
        &mut be,
        k - 1,
        &net.h[plan.h_range(k)],
        &mut out,
        Some(&mut fp),
    );
    let d = DVector::from_iterator(rows, fp.iter().map(|&v| f64::from(v)));
    DMatrix::from_diagonal(&d) * g
}

/// The feedback the loop uses for hidden layer `i`: `∂g_{i+1} ⋯ ∂g_L`.
fn composed_feedback(net: &Net<'_, f32>, i: usize) -> DMatrix<f64> {
    let plan = net.plan;
    let mut m = DMatrix::<f64>::identity(plan.n(i), plan.n(i));
    for k in i + 1..=plan.layers() {
        m *= inverse_jacobian(net, k);
    }
    m
}

/// Trains only the feedback of a frozen tanh network for `steps` steps at one input and
/// returns, per hidden layer, the relative Frobenius error of the composed feedback
/// (averaged over the last quarter of the steps) to `J_iᵀ (J_i J_iᵀ + γ I)⁻¹`.
fn drl_feedback_error(act: Activation, h: &Hyper, gamma: f64, steps: usize, seed: u64) -> Vec<f64> {
    let plan = Plan::new(
        Shape::new(&SIZES).unwrap(),
        Rule::DtpDrl,
        act,
        Activation::Identity,
    );
    let mut be = Float::new();
    let mut arena = vec![0f32; plan.counts().total()];
    let mut net = Net::new(plan, h, &mut arena, &mut be).unwrap();
    init_params(&mut net, &mut be, seed);
    let mut s = Stream::new(seed, 99);
    let x: Vec<f32> = (0..SIZES[0])
        .map(|_| (s.next_u32() >> 8) as f32 / 16_777_216.0 * 2.0 - 1.0)
        .collect();
    forward(&mut net, &mut be, &x);
    let top = plan.layers();
    let mut noise = Stream::new(seed, 3);
    let tail = steps / 4;
    let mut avg: Vec<DMatrix<f64>> = (1..top)
        .map(|i| DMatrix::zeros(plan.n(i), plan.n(top)))
        .collect();
    for step in 0..steps {
        train_feedback(Rule::DtpDrl, &mut net, &mut be, &mut noise);
        if step >= steps - tail {
            for (i, a) in (1..top).zip(avg.iter_mut()) {
                *a += composed_feedback(&net, i) / tail as f64;
            }
        }
    }
    (1..top)
        .zip(&avg)
        .map(|(i, q)| {
            let j = forward_jacobian(&net, i);
            let n = plan.n(top);
            let ideal = j.transpose()
                * (&j * j.transpose() + DMatrix::identity(n, n) * gamma)
                    .try_inverse()
                    .unwrap();
            (q - &ideal).norm() / ideal.norm()
        })
        .collect()
}

fn hyper(sigma: f32, decay: f32, lr_feedback: f32, regulariser: Regulariser) -> Hyper {
    Hyper {
        lr: 0.0,
        lr_feedback,
        beta: 1.0,
        sigma,
        decay,
        feedback_steps: 1,
        lr_fan_in: 0,
        regulariser,
    }
}

/// The damping of the fixed point, derived in the rule's documentation: `γ = λ` for the
/// output-noise regulariser (σ² cancels), `λ/σ²` for weight decay (the data term's 1/σ² is
/// folded into the rate, the decay's is not).
fn gamma(h: &Hyper) -> f64 {
    match h.regulariser {
        Regulariser::OutputNoise => f64::from(h.decay),
        Regulariser::Decay => f64::from(h.decay) / f64::from(h.sigma).powi(2),
    }
}

const SEEDS: [u64; 3] = [8, 9, 10];

/// Linear layers (identity activations), where the linearised theory is exact: with the
/// output-noise regulariser every hidden layer's composed feedback reaches
/// `J_iᵀ (J_i J_iᵀ + λ I)⁻¹`. Measured: below 1% on both layers for the three seeds
/// (0.4–0.9%), σ = 0.1, λ = 0.01, effective step η σ² = 0.01, 200 000 steps.
#[test]
fn output_noise_feedback_converges_to_damped_pseudo_inverse_on_every_layer() {
    let h = hyper(0.1, 0.01, 1.0, Regulariser::OutputNoise);
    for seed in SEEDS {
        let err = drl_feedback_error(Activation::Identity, &h, gamma(&h), 200_000, seed);
        eprintln!("output-noise, seed {seed}: relative Frobenius error per hidden layer {err:?}");
        assert!(err.iter().all(|&e| e < 0.10), "seed {seed}: {err:?}");
    }
}

/// Why output noise is the default: with plain weight decay on `G` the last hidden layer
/// (whose loop is one inverse) still reaches the damped pseudo-inverse, but the layer below
/// settles at `J_1ᵀ Bᵀ (B J_1 J_1ᵀ Bᵀ + γ I)⁻¹ B` (`B` the upper inverse's Jacobian), not
/// at the damped pseudo-inverse. Measured, same settings as above: layer 1 57–64% off,
/// layer 2 0.8–1.1%.
#[test]
fn weight_decay_misses_damped_pseudo_inverse_below_the_last_hidden_layer() {
    let h = hyper(0.1, 0.01, 1.0, Regulariser::Decay);
    for seed in SEEDS {
        let err = drl_feedback_error(Activation::Identity, &h, gamma(&h), 200_000, seed);
        eprintln!("decay, seed {seed}: relative Frobenius error per hidden layer {err:?}");
        assert!(err[0] > 0.3 && err[1] < 0.10, "seed {seed}: {err:?}");
    }
}

/// tanh layers (the 17-point table of the core, whose slope is piecewise constant), small
/// σ = 0.01 so the linearisation holds. The last hidden layer reaches the damped
/// pseudo-inverse on every seed (measured 0.4–0.6%). The first hidden layer does on seeds
/// 8 and 9 (0.3%) but not on seed 10 (27%, unchanged from 400 000 to 1 600 000 steps, and
/// 61% with σ = 0.002): a learned inverse whose pre-activation sits at a knot of the table
/// has no Jacobian there, and the slope jump makes the loss's gradient of order 1/σ
/// larger on the samples that cross it. It is measured and printed, not asserted.
#[test]
fn tanh_feedback_of_the_last_hidden_layer_converges_to_damped_pseudo_inverse() {
    let h = hyper(0.01, 0.01, 25.0, Regulariser::OutputNoise);
    for seed in SEEDS {
        let err = drl_feedback_error(Activation::Tanh, &h, gamma(&h), 400_000, seed);
        eprintln!("tanh, seed {seed}: relative Frobenius error per hidden layer {err:?}");
        assert!(err[1] < 0.10, "seed {seed}: {err:?}");
    }
}
