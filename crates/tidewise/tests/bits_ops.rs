//! The operation counter against hand counts of one training step of a 2-3-2 network
//! (tanh hidden layer, identity output), for bp and for dtp-direct with K = 1.
//!
//! The counting rules are those of the `energy` module docs: a dot-product term is a MAC
//! (one multiply, one accumulator add; a bias is the accumulator's start value); a weight-row
//! update of n elements is one η·δ multiply plus n (step × input) multiplies and n additions
//! at the weight's word, and reads and writes each element; a decay row is n (rate × weight)
//! multiplies and n subtractions; a tanh on the table's interior is 2 subtractions, 1
//! multiply, 1 addition; a noise value is one (noise × draw) multiply.
//! The equations are those of the rules' sources: "Learning representations by
//! back-propagating errors", Nature 323, 1986 (bp); "A Theoretical Framework for Target
//! Propagation", NeurIPS 2020 (dtp-direct's direct feedback and its difference
//! reconstruction loss); docs/references.md [1], [5].

use tidewise::energy::{self, OpCounts, Operand, Phase, PhaseCounts};
use tidewise_core::activation::Activation;
use tidewise_core::class::Class;
use tidewise_core::plan::{Plan, Shape};

const F: Operand = Operand::Class(Class::Forward);
const B: Operand = Operand::Class(Class::Bias);
const Q: Operand = Operand::Class(Class::Feedback);
const A: Operand = Operand::Class(Class::Act);
const ACC: Operand = Operand::Class(Class::Acc);
const RATE: Operand = Operand::Class(Class::Rate);
const STEP: Operand = Operand::Class(Class::Step);
const NOISE: Operand = Operand::Class(Class::Noise);

fn count(rule: &str) -> (Plan, OpCounts, tidewise::spec::Design) {
    let spec =
        format!("[data]\nsource = \"pump\"\n[rule]\nname = \"{rule}\"\nfeedback_steps = 1\n");
    let (_, design) = tidewise::spec::parse(&spec, &[]).unwrap();
    let plan = Plan::new(
        Shape::new(&[2, 3, 2]).unwrap(),
        design.rule,
        Activation::Tanh,
        Activation::Identity,
    );
    let ops = energy::ops_per_sample(&plan, &design).unwrap();
    (plan, ops, design)
}

fn entries(t: &[[u64; energy::OPERANDS]; energy::OPERANDS]) -> u64 {
    PhaseCounts::entries(t).len() as u64
}

/// bp on 2-3-2, by hand:
/// * forward: layer 1, 3 rows × 2 = 6 MACs (W·h), layer 2, 2 × 3 = 6 MACs; 12 W reads, 5
///   bias reads; tanh on 3 neurons: 6 subs, 3 adds, 3 multiplies (activation class);
/// * output target: 2 subs (y − h), 2 multiplies (β·e);
/// * feedback: none (K = 0 for bp);
/// * targets: δ_2 = 2 multiplies; d_1 = W_2ᵀ δ_2: 3 × 2 = 6 MACs (W·δ), 6 W reads;
///   δ_1 = 3 multiplies;
/// * update: layer 1: 3 rows of 2 plus 3 biases: 6 η·δ multiplies (rate × act), 6 + 3 = 9
///   step × input multiplies, 6 W adds and 3 bias adds, 6 W and 3 bias reads and writes;
///   layer 2: 2 rows of 3 plus 2 biases: 4 η·δ, 6 + 2 = 8 step × input, 6 W adds, 2 bias
///   adds, 6 W and 2 bias reads and writes.
///
/// Totals: 18 MACs (forward × act) and 18 accumulator adds; 10 act × act multiplies, 10
/// rate × act, 17 step × act; 11 act adds, 12 weight adds, 5 bias adds; reads: 30 W, 10
/// bias; writes: 12 W, 5 bias.
#[test]
fn bp_matches_the_hand_count() {
    let (plan, ops, design) = count("bp");
    let t = ops.total();
    assert_eq!(PhaseCounts::get(&t.mac, F, A), 18);
    assert_eq!(t.macs(), 18);
    assert_eq!(PhaseCounts::get(&t.add, ACC, ACC), 18);
    assert_eq!(PhaseCounts::get(&t.mul, A, A), 10);
    assert_eq!(PhaseCounts::get(&t.mul, RATE, A), 10);
    assert_eq!(PhaseCounts::get(&t.mul, STEP, A), 17);
    assert_eq!(t.multiplies(), 18 + 10 + 10 + 17);
    assert_eq!(PhaseCounts::get(&t.add, A, A), 11);
    assert_eq!(PhaseCounts::get(&t.add, F, F), 12);
    assert_eq!(PhaseCounts::get(&t.add, B, B), 5);
    assert_eq!(t.additions(), 18 + 11 + 12 + 5);
    assert_eq!(entries(&t.mul), 3, "no other multiply kinds");
    assert_eq!(entries(&t.add), 4, "no other addition kinds");
    assert_eq!(t.reads[Class::Forward.index()], 30);
    assert_eq!(t.reads[Class::Bias.index()], 10);
    assert_eq!(t.reads[Class::Feedback.index()], 0);
    assert_eq!(t.writes[Class::Forward.index()], 12);
    assert_eq!(t.writes[Class::Bias.index()], 5);
    // Per phase.
    let fw = ops.phase(Phase::Forward);
    assert_eq!((fw.macs(), fw.reads[Class::Forward.index()]), (12, 12));
    assert_eq!(ops.phase(Phase::Feedback).macs(), 0);
    assert_eq!(ops.phase(Phase::Targets).macs(), 6);
    assert_eq!(PhaseCounts::get(&ops.phase(Phase::Update).mul, STEP, A), 17);
    // The same total as the core's own train_sample.
    assert_eq!(energy::ops_of_train_sample(&plan, &design).unwrap(), t);
}

/// dtp-direct on 2-3-2 with K = 1, by hand:
/// * forward and output target: as bp (12 MACs W·h, 12 W and 5 bias reads; tanh 6 subs, 3
///   adds, 3 multiplies; target 2 subs, 2 multiplies);
/// * feedback (hidden layer 1): noise on 3 neurons: 3 noise × draw multiplies, 3 act adds;
///   the noisy pass through layer 2: 6 MACs (W·h), 6 W and 2 bias reads; Δ = h̃_2 − h_2: 2 subs;
///   reconstruction Q_1 Δ: 3 × 2 = 6 MACs (Q·act), 6 Q reads; per row of Q_1 (3 rows):
///   2 subs (ε, ε − rec), an update of 2 (1 η·δ, 2 step × act, 2 Q adds, 2 Q reads and
///   writes) and a decay of 2 (2 rate × Q multiplies, 2 Q subs, 2 Q reads and writes);
/// * targets: δ_2 = 2 multiplies; d_1 = Q_1 d_2: 6 MACs (Q·act), 6 Q reads; δ_1 = 3 multiplies;
/// * update: as bp (10 η·δ, 17 step × act, 12 W adds, 5 bias adds, W 12/12, bias 5/5).
///
/// Totals: MACs 18 (W·act) + 12 (Q·act), 30 accumulator adds; multiplies: act × act 10,
/// noise × draw 3, rate × act 3 + 10 = 13, step × act 6 + 17 = 23, rate × Q 6; adds: act
/// 9 + 2 + 3 + 2 + 6 = 22, Q 6 + 6 = 12, W 12, bias 5; reads W 12 + 6 + 12 = 30, bias
/// 5 + 2 + 5 = 12, Q 6 + 6 + 6 + 6 = 24; writes W 12, bias 5, Q 12.
#[test]
fn dtp_direct_matches_the_hand_count() {
    let (plan, ops, design) = count("dtp-direct");
    assert_eq!(ops.feedback_steps, 1);
    let t = ops.total();
    assert_eq!(PhaseCounts::get(&t.mac, F, A), 18);
    assert_eq!(PhaseCounts::get(&t.mac, Q, A), 12);
    assert_eq!(t.macs(), 30);
    assert_eq!(PhaseCounts::get(&t.add, ACC, ACC), 30);
    assert_eq!(PhaseCounts::get(&t.mul, A, A), 10);
    assert_eq!(PhaseCounts::get(&t.mul, NOISE, Operand::Draw), 3);
    assert_eq!(PhaseCounts::get(&t.mul, RATE, A), 13);
    assert_eq!(PhaseCounts::get(&t.mul, STEP, A), 23);
    assert_eq!(PhaseCounts::get(&t.mul, RATE, Q), 6);
    assert_eq!(t.multiplies(), 30 + 10 + 3 + 13 + 23 + 6);
    assert_eq!(PhaseCounts::get(&t.add, A, A), 22);
    assert_eq!(PhaseCounts::get(&t.add, Q, Q), 12);
    assert_eq!(PhaseCounts::get(&t.add, F, F), 12);
    assert_eq!(PhaseCounts::get(&t.add, B, B), 5);
    assert_eq!(t.additions(), 30 + 22 + 12 + 12 + 5);
    assert_eq!(t.reads[Class::Forward.index()], 30);
    assert_eq!(t.reads[Class::Bias.index()], 12);
    assert_eq!(t.reads[Class::Feedback.index()], 24);
    assert_eq!(t.writes[Class::Forward.index()], 12);
    assert_eq!(t.writes[Class::Bias.index()], 5);
    assert_eq!(t.writes[Class::Feedback.index()], 12);
    let fb = ops.phase(Phase::Feedback);
    assert_eq!(PhaseCounts::get(&fb.mac, Q, A), 6);
    assert_eq!(PhaseCounts::get(&fb.mac, F, A), 6);
    assert_eq!(fb.writes[Class::Feedback.index()], 12);
    assert_eq!(energy::ops_of_train_sample(&plan, &design).unwrap(), t);
}

/// K feedback steps repeat the feedback phase exactly K times (the schedule of
/// `train_sample`): with K = 3 the feedback phase is three times that of K = 1.
#[test]
fn feedback_steps_scale_the_feedback_phase() {
    let (_, one, _) = count("dtp-direct");
    let spec = "[data]\nsource = \"pump\"\n[rule]\nname = \"dtp-direct\"\nfeedback_steps = 3\n";
    let (_, design) = tidewise::spec::parse(spec, &[]).unwrap();
    let three = energy::ops_per_sample(&one.plan, &design).unwrap();
    let (a, b) = (one.phase(Phase::Feedback), three.phase(Phase::Feedback));
    assert_eq!(b.macs(), 3 * a.macs());
    assert_eq!(b.multiplies(), 3 * a.multiplies());
    assert_eq!(b.additions(), 3 * a.additions());
    assert_eq!(
        b.writes[Class::Feedback.index()],
        3 * a.writes[Class::Feedback.index()]
    );
    assert_eq!(three.phase(Phase::Update), one.phase(Phase::Update));
}
