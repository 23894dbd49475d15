//! The learning rules against outside references: finite differences, Gauss-Newton targets
//! and the damped pseudo-inverse, computed with `nalgebra` (a general-purpose library).

use nalgebra::{DMatrix, DVector};
use tidewise_core::activation::Activation;
use tidewise_core::backend::Float;
use tidewise_core::class::Tag;
use tidewise_core::kernels::{forward, output_target};
use tidewise_core::network::{Hyper, Net};
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::Stream;
use tidewise_core::rules::{displacements, train_feedback, Rule};
use tidewise_core::train::{init_params, train_sample, Schedule};

fn hyper(lr: f32, beta: f32) -> Hyper {
    Hyper {
        lr,
        lr_feedback: 0.01,
        beta,
        sigma: 0.1,
        decay: 0.0,
        feedback_steps: 0,
        lr_fan_in: 0,
        regulariser: Default::default(),
    }
}

fn input(n: usize, seed: u64) -> Vec<f32> {
    let mut s = Stream::new(seed, 99);
    (0..n)
        .map(|_| (s.next_u32() >> 8) as f32 / 16_777_216.0 * 2.0 - 1.0)
        .collect()
}

fn loss(net: &mut Net<'_, f32>, be: &mut Float, x: &[f32], label: usize) -> f64 {
    forward(net, be, x);
    output_target(net, be, label).0
}

/// The BP update equals −η β ∂L/∂W, checked against a central finite difference of the
/// loss (a fact of the trade: the central difference has O(h²) error for smooth losses).
#[test]
fn bp_gradient_matches_central_differences() {
    let plan = Plan::new(
        Shape::new(&[5, 7, 4, 3]).unwrap(),
        Rule::Bp,
        Activation::Tanh,
        Activation::Identity,
    );
    let h = hyper(1.0, 1.0);
    let mut be = Float::new();
    let mut arena = vec![0f32; plan.counts().total()];
    let mut net = Net::new(plan, &h, &mut arena, &mut be).unwrap();
    init_params(&mut net, &mut be, 3);
    let x = input(5, 1);
    let label = 2;
    let before: Vec<f32> = net.w.to_vec();
    let biases: Vec<f32> = net.b.to_vec();
    let sched = Schedule {
        rule: Rule::Bp,
        feedback_steps: 0,
    };
    let mut noise = Stream::new(1, 3);
    train_sample(&mut net, &mut be, &sched, &x, label, &mut noise, false);
    let update: Vec<f64> = net
        .w
        .iter()
        .zip(&before)
        .map(|(a, b)| f64::from(a - b))
        .collect();
    net.w.copy_from_slice(&before);
    net.b.copy_from_slice(&biases);
    let (mut num, mut den) = (0f64, 0f64);
    let step = 1e-3f32;
    for k in 0..before.len() {
        net.w[k] = before[k] + step;
        let lp = loss(&mut net, &mut be, &x, label);
        net.w[k] = before[k] - step;
        let lm = loss(&mut net, &mut be, &x, label);
        net.w[k] = before[k];
        let fd = -(lp - lm) / (2.0 * f64::from(step));
        num += (update[k] - fd).powi(2);
        den += fd * fd;
    }
    let rel = (num / den).sqrt();
    assert!(den > 1e-6, "degenerate gradient");
    assert!(
        rel < 0.02,
        "BP update differs from the finite-difference gradient by {rel}"
    );
}

/// Jacobian ∂h_L/∂h_i of a float network at its current forward pass, from the stored
/// derivatives: J = D_L W_L ⋯ D_{i+1} W_{i+1}.
fn jacobian(net: &Net<'_, f32>, i: usize) -> DMatrix<f64> {
    let plan = net.plan;
    let top = plan.layers();
    let mut j = DMatrix::<f64>::identity(plan.n(i), plan.n(i));
    for l in i + 1..=top {
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

/// The theory behind `tp`, with the exact inverses computed here: with invertible layers
/// (square weights, leaky ReLU), TP with exact inverses gives hidden targets equal to the
/// Gauss-Newton targets h_i − J_i⁺ (h_L − τ_L) to first order in β. (The rule's learned
/// inverse f_i(G v + c) can hold an exact inverse only in a linear network:
/// `tp_rule_with_exact_inverses_gives_gauss_newton_targets` runs the rule itself there.)
/// Source: "A Theoretical Framework for Target Propagation", NeurIPS 2020 (docs/references.md
/// [5]).
#[test]
fn exact_inverse_targets_are_gauss_newton_to_first_order() {
    let n = 6;
    let plan = Plan::new(
        Shape::new(&[n, n, n, n]).unwrap(),
        Rule::Tp,
        Activation::LeakyRelu,
        Activation::LeakyRelu,
    );
    let mut errors = Vec::new();
    for beta in [0.01f32, 0.005, 0.002] {
        let h = hyper(0.1, beta);
        let mut be = Float::new();
        let mut arena = vec![0f32; plan.counts().total()];
        let mut net = Net::new(plan, &h, &mut arena, &mut be).unwrap();
        init_params(&mut net, &mut be, 11);
        // Keep the weights well conditioned: add the identity.
        for l in 1..=3 {
            let r = plan.w_range(l);
            for k in 0..n {
                net.w[r.start + k * n + k] += 1.0;
            }
        }
        let x = input(n, 4);
        forward(&mut net, &mut be, &x);
        output_target(&mut net, &mut be, 1);
        let top = plan.layers();
        let k = net.k.act;
        // Exact inverses: τ_{l-1} = W_l⁻¹ (f⁻¹(τ_l) − b_l).
        let h_top: Vec<f32> = net.h[plan.h_range(top)].to_vec();
        let d_top: Vec<f32> = net.d[plan.node_range(top)].to_vec();
        let mut tau: Vec<f32> = h_top.iter().zip(&d_top).map(|(a, b)| a + b).collect();
        let mut worst = 0f64;
        for l in (2..=top).rev() {
            let pre: Vec<f64> = tau
                .iter()
                .map(|&t| f64::from(plan.act(l).inverse(&mut be, &k, t, Tag::act(l)).unwrap()))
                .zip(&net.b[plan.node_range(l)])
                .map(|(a, &b)| a - f64::from(b))
                .collect();
            let w = DMatrix::from_row_slice(n, n, &net.w[plan.w_range(l)]).map(f64::from);
            let t = w.lu().solve(&DVector::from_vec(pre)).expect("invertible");
            tau = t.iter().map(|&v| v as f32).collect();
            let i = l - 1;
            // Gauss-Newton target of layer i, from the SVD pseudo-inverse.
            let j = jacobian(&net, i);
            let e = DVector::from_iterator(n, d_top.iter().map(|&dv| -f64::from(dv)));
            let pinv = j.pseudo_inverse(1e-12).unwrap();
            let gn_disp = -(pinv * e);
            let hi = &net.h[plan.h_range(i)];
            let tp_disp =
                DVector::from_iterator(n, tau.iter().zip(hi).map(|(&t, &h)| f64::from(t - h)));
            worst = worst.max((tp_disp - &gn_disp).norm() / gn_disp.norm());
        }
        errors.push(worst);
    }
    // For small β no target leaves its linear piece; within one piece of these
    // piecewise-linear layers the exact inverse is the
    // linearisation itself, so the two agree to f32 precision (the first-order term is all).
    assert!(
        errors.iter().all(|&e| e < 1e-3),
        "relative difference {errors:?}"
    );
}

/// DTP's difference correction: a zero output displacement gives zero hidden displacements
/// even with an imperfect inverse (derived from the correction in "Difference Target
/// Propagation", ECML PKDD 2015; docs/references.md [4]).
#[test]
fn difference_correction_cancels_imperfect_inverses() {
    let plan = Plan::new(
        Shape::new(&[4, 6, 5, 3]).unwrap(),
        Rule::Dtp,
        Activation::Tanh,
        Activation::Identity,
    );
    let h = hyper(0.1, 0.0);
    let mut be = Float::new();
    let mut arena = vec![0f32; plan.counts().total()];
    let mut net = Net::new(plan, &h, &mut arena, &mut be).unwrap();
    init_params(&mut net, &mut be, 5);
    forward(&mut net, &mut be, &input(4, 2));
    output_target(&mut net, &mut be, 0);
    displacements(Rule::Dtp, &mut net, &mut be);
    assert!(net.d.iter().all(|&d| d == 0.0), "{:?}", net.d);
    // Plain TP with the same imperfect inverse does not cancel.
    displacements(Rule::Tp, &mut net, &mut be);
    assert!(net.d[plan.node_range(1)].iter().any(|&d| d.abs() > 1e-3));
}

/// The `dtp-direct` feedback of a frozen linear 3-6-4 network (seeded start, one input)
/// after `steps` feedback-training steps with `h`: the mean of `Q` over the last `tail` steps,
/// and the output layer's weights `J` (the output's Jacobian with respect to the hidden layer).
fn frozen_direct_feedback(h: &Hyper, steps: usize, tail: usize) -> (DMatrix<f64>, DMatrix<f64>) {
    let plan = Plan::new(
        Shape::new(&[3, 6, 4]).unwrap(),
        Rule::DtpDirect,
        Activation::Identity,
        Activation::Identity,
    );
    let mut be = Float::new();
    let mut arena = vec![0f32; plan.counts().total()];
    let mut net = Net::new(plan, h, &mut arena, &mut be).unwrap();
    init_params(&mut net, &mut be, 8);
    forward(&mut net, &mut be, &input(3, 3));
    let mut noise = Stream::new(8, 3);
    let mut avg = vec![0f64; net.fw.len()];
    for s in 0..steps {
        train_feedback(Rule::DtpDirect, &mut net, &mut be, &mut noise);
        if s >= steps - tail {
            for (a, &q) in avg.iter_mut().zip(net.fw.iter()) {
                *a += f64::from(q) / tail as f64;
            }
        }
    }
    let j = DMatrix::from_row_slice(4, 6, &net.w[plan.w_range(2)]).map(f64::from);
    (DMatrix::from_row_slice(6, 4, &avg), j)
}

/// The relative Frobenius distance of `q` from `Jᵀ (J Jᵀ + γ I)⁻¹` (inverse from `nalgebra`).
fn from_damped_pinv(q: &DMatrix<f64>, j: &DMatrix<f64>, gamma: f64) -> f64 {
    let n = j.nrows();
    let target = j.transpose()
        * (j * j.transpose() + DMatrix::identity(n, n) * gamma)
            .try_inverse()
            .unwrap();
    (q - &target).norm() / target.norm()
}

/// `dtp-direct` feedback trained on a frozen linear network converges to the damped
/// pseudo-inverse Jᵀ (J Jᵀ + (λ/σ²) I)⁻¹ in the core's terms (derived in the rule's
/// documentation; source: "A Theoretical Framework for Target Propagation", NeurIPS 2020;
/// docs/references.md [5]).
#[test]
fn direct_feedback_converges_to_damped_pseudo_inverse() {
    let (sigma, lambda) = (0.2f32, 0.004f32);
    let mut h = hyper(0.1, 1.0);
    h.sigma = sigma;
    h.decay = lambda;
    h.lr_feedback = 0.05;
    let (q, j) = frozen_direct_feedback(&h, 60_000, 20_000);
    let gamma = f64::from(lambda) / f64::from(sigma).powi(2);
    let rel = from_damped_pinv(&q, &j, gamma);
    assert!(rel < 0.05, "relative Frobenius error {rel}");
}

/// The `tp` rule itself: in a linear network (identity activations, square invertible
/// weights) whose learned inverses are set to the exact inverses `G_{l} = W_l⁻¹`,
/// `c_l = −W_l⁻¹ b_l` (computed with `nalgebra`'s LU), the rule's hidden displacements must
/// equal the Gauss-Newton displacements `−J_i⁺ (h_L − τ_L)` (`J_i = W_L ⋯ W_{i+1}`, SVD
/// pseudo-inverse) for any β: a linear network is its own linearisation. Source: "A
/// Theoretical Framework for Target Propagation", NeurIPS 2020 (target propagation with exact
/// inverses gives Gauss-Newton targets; docs/references.md [5]).
#[test]
fn tp_rule_with_exact_inverses_gives_gauss_newton_targets() {
    let n = 5;
    let plan = Plan::new(
        Shape::new(&[n, n, n, n]).unwrap(),
        Rule::Tp,
        Activation::Identity,
        Activation::Identity,
    );
    let mut worst = 0f64;
    for (seed, beta) in [(11u64, 1.0f32), (12, 0.5), (13, 0.1)] {
        let h = hyper(0.1, beta);
        let mut be = Float::new();
        let mut arena = vec![0f32; plan.counts().total()];
        let mut net = Net::new(plan, &h, &mut arena, &mut be).unwrap();
        init_params(&mut net, &mut be, seed);
        let top = plan.layers();
        let w = |net: &Net<'_, f32>, l: usize| {
            DMatrix::from_row_slice(n, n, &net.w[plan.w_range(l)]).map(f64::from)
        };
        for l in 1..=top {
            let r = plan.w_range(l);
            for k in 0..n {
                net.w[r.start + k * n + k] += 1.0;
            }
            // Non-zero biases, so the inverse's bias is exercised too.
            for (k, b) in net.b[plan.node_range(l)].iter_mut().enumerate() {
                *b = 0.05 * (k as f32 - 2.0);
            }
        }
        // The learned inverse of layer i + 1 (feedback of hidden layer i), set exactly.
        for i in 1..top {
            let wi = w(&net, i + 1);
            let inv = wi.clone().lu().try_inverse().expect("invertible");
            let bias = DVector::from_iterator(
                n,
                net.b[plan.node_range(i + 1)].iter().map(|&v| f64::from(v)),
            );
            let c = -(&inv * bias);
            let fr = plan.fb_range(i);
            for (k, v) in net.fw[fr].iter_mut().enumerate() {
                *v = inv[(k / n, k % n)] as f32;
            }
            for (k, v) in net.fb[plan.fbb_range(i)].iter_mut().enumerate() {
                *v = c[k] as f32;
            }
        }
        let x = input(n, seed);
        forward(&mut net, &mut be, &x);
        output_target(&mut net, &mut be, 1);
        displacements(Rule::Tp, &mut net, &mut be);
        let d_top =
            DVector::from_iterator(n, net.d[plan.node_range(top)].iter().map(|&v| f64::from(v)));
        assert!(
            d_top.norm() > 0.05,
            "the output displacement is not trivial"
        );
        for i in 1..top {
            let j = jacobian(&net, i);
            let gn = j.pseudo_inverse(1e-12).unwrap() * &d_top;
            let tp =
                DVector::from_iterator(n, net.d[plan.node_range(i)].iter().map(|&v| f64::from(v)));
            worst = worst.max((&tp - &gn).norm() / gn.norm());
        }
    }
    // f32 arithmetic through two inverses of well-conditioned 5×5 matrices.
    assert!(
        worst < 1e-4,
        "tp displacements differ from Gauss-Newton by {worst}"
    );
}

/// The spec's difference reconstruction loss is normalised by σ² (`spec::feedback_rates`), so
/// neither its rate nor its fixed point depends on σ. On a frozen linear network the output's
/// response to the noise is exactly `Δ = J σ ε`, so the normalised steps
/// `η [(ε − Q Δ/σ)(Δ/σ)ᵀ − λ Q]` are the same for every σ: trained from the same start with
/// the same draws, the feedback after 3,000 steps must agree across σ = 0.05, 0.1, 0.2 up to
/// `f32` rounding (before the normalisation the step scaled with σ², 16× across this range),
/// and each must end at `Jᵀ (J Jᵀ + λ I)⁻¹` (damping λ = `rule.decay` itself; the pseudo-inverse
/// from `nalgebra`; source: "A Theoretical Framework for Target Propagation", NeurIPS 2020,
/// docs/references.md [5]).
#[test]
fn normalised_direct_feedback_does_not_depend_on_sigma() {
    use tidewise_core::network::Regulariser;
    let (eta, lambda) = (0.002f32, 0.1f32);
    let train = |sigma: f32, steps: usize| {
        let (lr_feedback, decay) = tidewise::spec::feedback_rates(
            Rule::DtpDirect,
            Regulariser::Decay,
            eta,
            sigma,
            lambda,
            &|x| x,
        );
        let mut h = hyper(0.1, 1.0);
        (h.sigma, h.decay, h.lr_feedback) = (sigma, decay, lr_feedback);
        frozen_direct_feedback(&h, steps, 1)
    };
    let early: Vec<DMatrix<f64>> = [0.05, 0.1, 0.2].map(|s| train(s, 3_000).0).into();
    for (s, q) in [0.05, 0.2].iter().zip([&early[0], &early[2]]) {
        let rel = (q - &early[1]).norm() / early[1].norm();
        assert!(
            rel < 1e-3,
            "σ = {s} against σ = 0.1: relative difference {rel}"
        );
    }
    let (q, j) = train(0.05, 60_000);
    let rel = from_damped_pinv(&q, &j, f64::from(lambda));
    assert!(rel < 0.05, "relative Frobenius error {rel}");
}
