//! The measurement's Jacobians against central finite differences of the network itself.
//!
//! Fact of the trade: the central difference `(h(W + εV) − h(W − εV)) / 2ε` equals the
//! directional derivative `J_W vec(V)` up to `O(ε²)` where the map is smooth (away from the
//! kinks of the piecewise-linear activations). Definition: when `J_W` has full row rank, the
//! Gauss-Newton step `V = J_W⁺ (τ_L − h_L)` moves the output by exactly `τ_L − h_L` to first
//! order, and the measurement's BP direction `J_Wᵀ (y − h_L)` is the negative gradient of
//! `½‖h_L − y‖²` (checked here against a finite difference of the loss).

use nalgebra::DVector;
use tidewise::align::linalg::vec_rows;
use tidewise::align::sample::{gn_update, observe, output_jacobians, preactivation_jacobian};
use tidewise_core::activation::Activation;
use tidewise_core::backend::Float;
use tidewise_core::kernels::forward;
use tidewise_core::network::{Hyper, Net};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::Stream;
use tidewise_core::rules::Rule;
use tidewise_core::train;

const HYPER: Hyper = Hyper {
    lr: 0.02,
    lr_feedback: 0.01,
    beta: 0.5,
    sigma: 0.1,
    decay: 0.01,
    feedback_steps: 1,
    lr_fan_in: 0,
    regulariser: tidewise_core::network::Regulariser::Decay,
};

/// The output with `W_l += eps · v`, and the activation slopes the pass used.
fn output_with(
    net: &mut Net<'_, f32>,
    be: &mut Float,
    x: &[f32],
    l: usize,
    v: &[f64],
    eps: f64,
) -> (DVector<f64>, Vec<f32>) {
    let r = net.plan.w_range(l);
    let saved: Vec<f32> = net.w[r.clone()].to_vec();
    for (w, &dv) in net.w[r.clone()].iter_mut().zip(v) {
        *w = (f64::from(*w) + eps * dv) as f32;
    }
    forward(net, be, x);
    let out = DVector::from_iterator(
        net.output().len(),
        net.output().iter().map(|&h| f64::from(h)),
    );
    net.w[r].copy_from_slice(&saved);
    (out, net.fp.to_vec())
}

#[test]
fn gauss_newton_step_moves_the_output_to_the_target() {
    for hidden in [Activation::Tanh, Activation::LeakyRelu, Activation::Sigmoid] {
        let shape = Shape::new(&[6, 9, 7, 3]).expect("shape");
        let plan = Plan::new(shape, Rule::DtpDirect, hidden, Activation::Identity);
        let mut be = Float::new();
        let mut arena = vec![0f32; plan.counts().total()];
        let net = train::setup(plan, &HYPER, &mut arena, &mut be, 5).expect("net");
        let mut copy_arena = vec![0f32; plan.counts().total()];
        let mut copy = Net::new(plan, &HYPER, &mut copy_arena, &mut be).expect("copy");
        let mut fd_arena = vec![0f32; plan.counts().total()];
        let mut fd = Net::new(plan, &HYPER, &mut fd_arena, &mut be).expect("copy");
        fd.copy_params_from(&net);
        let mut rng = Stream::new(9, 1);
        let (mut checked, mut skipped) = (0, 0);
        for sample in 0..8 {
            let x: Vec<f32> = (0..6)
                .map(|_| (rng.next_u32() >> 8) as f32 / 16_777_216.0)
                .collect();
            let label = sample % 3;
            let p = observe(
                &net,
                &mut copy,
                &mut be,
                Rule::DtpDirect,
                f64::from(HYPER.beta),
                &x,
                label,
            );
            let slopes: Vec<f32> = p.fp[1..]
                .iter()
                .flat_map(|v| v.iter().map(|&d| d as f32))
                .collect();
            let j_out = output_jacobians(&p);
            let target = &p.residual * p.beta;
            let loss = |o: &DVector<f64>| {
                0.5 * o
                    .iter()
                    .enumerate()
                    .map(|(j, &h)| {
                        let y = if j == label { 1.0 } else { 0.0 };
                        (h - y) * (h - y)
                    })
                    .sum::<f64>()
            };
            for l in 1..=3 {
                let v = vec_rows(&gn_update(&p, &j_out, l).expect("pseudo-inverse"));
                let eps = 1e-3 / v.amax().max(1e-12);
                let (plus, fp_plus) = output_with(&mut fd, &mut be, &x, l, v.as_slice(), eps);
                let (minus, fp_minus) = output_with(&mut fd, &mut be, &x, l, v.as_slice(), -eps);

                // The BP direction is the negative loss gradient: a directional difference.
                let j_a = preactivation_jacobian(&p, &j_out, l);
                let g = vec_rows(&((j_a.transpose() * &p.residual) * p.h[l - 1].transpose()));
                let e2 = 1e-3 / g.amax().max(1e-12);
                let (up, fp_up) = output_with(&mut fd, &mut be, &x, l, g.as_slice(), e2);
                let (down, fp_down) = output_with(&mut fd, &mut be, &x, l, g.as_slice(), -e2);

                // Finite differences hold only where no unit crossed a kink within ±ε.
                if [&fp_plus, &fp_minus, &fp_up, &fp_down]
                    .iter()
                    .any(|f| **f != slopes)
                {
                    skipped += 1;
                    continue;
                }
                let moved = (plus - minus) / (2.0 * eps);
                let err = (&moved - &target).norm() / target.norm();
                assert!(
                    err < 2e-3,
                    "{hidden:?} sample {sample} layer {l}: output moved {moved} for target {target} (error {err})"
                );
                let slope = (loss(&up) - loss(&down)) / (2.0 * e2);
                let expect = -g.norm_squared();
                assert!(
                    (slope - expect).abs() < 2e-3 * expect.abs(),
                    "{hidden:?} layer {l}: loss slope {slope} vs {expect}"
                );
                checked += 1;
            }
        }
        eprintln!("{hidden:?}: {checked} checked, {skipped} skipped at a kink");
        assert!(
            checked >= 16,
            "{hidden:?}: only {checked} checks ({skipped} crossed a kink)"
        );
    }
}
