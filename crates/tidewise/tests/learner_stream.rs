//! The core's streaming learner (`tidewise_core::learner`) fed one sample at a time, in the
//! order the host shuffles, ends with the same raw weights as the host's fixed arm and float
//! arm (`arms::run`): one path for the packed jobs, the boards and the C interface. The data
//! are a subset of the UCI optical digits (Optical Recognition of Handwritten Digits, UCI
//! Machine Learning Repository, 1998; docs/references.md [32]); rules: dtp-direct (learned feedback, with a warm-up
//! epoch) and bp (no feedback). Also the learner's refusals of bad input.

use tidewise::arms::{self, DataEncoder, NoObserver};
use tidewise::spec;
use tidewise_core::backend::{Backend, Fixed, Float};
use tidewise_core::learner::{arena_words, param_words, Config, Learner, LearnerError};
use tidewise_core::train::{shuffle, Samples};

const SMALL: &str = "[data]\nsource = \"digits\"\nmax_train = 48\nmax_test = 24\n\
                     [net]\nhidden = [6]\n[rule]\nwarmup_epochs = 1\n[run]\nepochs = 3\nseed = 5\n";

struct Setup {
    spec: spec::Spec,
    design: spec::Design,
    prepared: arms::Prepared,
    cfg: Config,
}

fn setup(rule: &str) -> Setup {
    let (spec, design) = spec::parse(SMALL, &[rule.to_string()]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let plan = arms::plan(&spec, &design, &prepared).unwrap();
    let cfg = Config {
        plan,
        hyper: design.hyper,
        feedback_steps: design.hyper.feedback_steps,
        fixed: design.fixed,
        seed: spec.run.seed,
    };
    Setup {
        spec,
        design,
        prepared,
        cfg,
    }
}

/// Streams the training split through `learner` epoch by epoch, sample by sample, in the
/// host's shuffled order, and infers the test split after each epoch as the host arm does
/// (its forward passes draw rounding bits); returns the final digest.
fn stream<B: Backend>(
    s: &Setup,
    learner: &mut Learner<'_, B>,
    train_x: &[B::S],
    test_x: &[B::S],
) -> u64 {
    let data = Samples {
        features: train_x,
        labels: &s.prepared.train.labels,
    };
    let warmup = if s.design.rule.learns_feedback() {
        s.spec.rule.warmup_epochs
    } else {
        0
    };
    let mut order: Vec<u32> = vec![0; data.len()];
    for epoch in 1..=s.spec.run.epochs {
        for (i, o) in order.iter_mut().enumerate() {
            *o = i as u32;
        }
        shuffle(&mut order, learner.order_stream());
        for &i in &order {
            let (x, label) = (data.row(i as usize), usize::from(data.labels[i as usize]));
            if epoch <= warmup {
                learner.learn_feedback(x, label).unwrap();
            } else {
                learner.learn(x, label).unwrap();
            }
        }
        let inputs = learner.inputs();
        for x in test_x.chunks_exact(inputs) {
            learner.infer(x).unwrap();
        }
    }
    learner.digest()
}

fn same_as_host(rule: &str) {
    let s = setup(rule);
    let host = arms::run(
        &s.spec,
        &s.design,
        &s.prepared,
        &mut NoObserver,
        &mut |_, _, _| {},
    )
    .unwrap();
    let seed = s.spec.run.seed;

    // Fixed: the host arm's 16-bit container and data encoder.
    let be = arms::fixed_backend::<i16>(&s.design, seed).unwrap();
    let mut enc = be.data_encoder(&s.design, seed);
    let train_x = arms::encode(&mut enc, &s.prepared.train);
    let test_x = arms::encode(&mut enc, &s.prepared.test);
    let mut arena = vec![0i16; arena_words(&s.cfg)];
    let mut learner: Learner<'_, Fixed<i16>> = Learner::new(&s.cfg, &mut arena).unwrap();
    let digest = stream(&s, &mut learner, &train_x, &test_x);
    assert_eq!(format!("{digest:016x}"), host.fixed.digest, "{rule}: fixed");

    // Float: the same learner code on the float back end.
    let train_f = arms::encode(&mut Float::new(), &s.prepared.train);
    let test_f = arms::encode(&mut Float::new(), &s.prepared.test);
    let mut arena = vec![0f32; arena_words(&s.cfg)];
    let mut learner = Learner::with_backend(&s.cfg, &mut arena, Float::new()).unwrap();
    let digest = stream(&s, &mut learner, &train_f, &test_f);
    assert_eq!(format!("{digest:016x}"), host.float.digest, "{rule}: float");
}

#[test]
fn learned_feedback_rule_streams_to_the_host_arms_weights() {
    same_as_host("rule.name=dtp-direct");
}

#[test]
fn rule_without_feedback_streams_to_the_host_arms_weights() {
    same_as_host("rule.name=bp");
}

#[test]
fn weights_read_out_and_written_back_give_the_same_network() {
    let s = setup("rule.name=dtp-direct");
    let mut arena = vec![0i16; arena_words(&s.cfg)];
    let mut a: Learner<'_, Fixed<i16>> = Learner::new(&s.cfg, &mut arena).unwrap();
    let x = vec![100i16; a.inputs()];
    a.learn(&x, 3).unwrap();
    let mut words = vec![0i16; param_words(&s.cfg.plan)];
    a.read_params(&mut words).unwrap();
    // A learner of another seed takes the words and then infers and digests the same.
    let mut other = s.cfg;
    other.seed = 99;
    let mut arena2 = vec![0i16; arena_words(&other)];
    let mut b: Learner<'_, Fixed<i16>> = Learner::new(&other, &mut arena2).unwrap();
    assert_ne!(a.digest(), b.digest());
    b.write_params(&words).unwrap();
    assert_eq!(a.digest(), b.digest());
    let mut back = vec![0i16; words.len()];
    b.read_params(&mut back).unwrap();
    assert_eq!(back, words);
    // Scores come out as one raw word per class (the forward pass rounds stochastically
    // from each learner's own stream, so the two need not agree word for word).
    let mut scores = vec![0i16; b.classes()];
    let class = b.scores(&x, &mut scores).unwrap();
    assert!(class < b.classes());
    assert!(b.scores(&x, &mut scores[1..]).is_err());
}

#[test]
fn bad_input_is_refused_with_the_figures() {
    let s = setup("rule.name=bp");
    let need = arena_words(&s.cfg);
    let mut small = vec![0i16; need - 1];
    let e = Learner::<Fixed<i16>>::new(&s.cfg, &mut small)
        .err()
        .unwrap();
    assert_eq!(
        e,
        LearnerError::Buffer {
            need,
            have: need - 1
        }
    );
    assert!(e.to_string().contains(&need.to_string()), "{e}");

    let mut arena = vec![0i16; need];
    let mut l: Learner<'_, Fixed<i16>> = Learner::new(&s.cfg, &mut arena).unwrap();
    let before = l.digest();
    let x = vec![0i16; l.inputs()];
    let e = l.learn(&x, 10).unwrap_err();
    assert_eq!(
        e,
        LearnerError::Label {
            label: 10,
            classes: 10
        }
    );
    assert!(e.to_string().contains("0 to 9"), "{e}");
    let e = l.learn(&x[1..], 0).unwrap_err();
    assert_eq!(
        e,
        LearnerError::Sample {
            len: 63,
            inputs: 64
        }
    );
    assert!(l.infer(&[]).is_err());
    let e = l.write_params(&[0; 3]).unwrap_err();
    assert_eq!(
        e,
        LearnerError::Output {
            len: 3,
            need: param_words(&s.cfg.plan)
        }
    );
    assert_eq!(l.digest(), before, "a refused call changes nothing");

    // Sizes that are no network, and formats wider than the container.
    let e = Config::new(
        &[64, 0, 10],
        s.cfg.plan.rule,
        s.cfg.plan.hidden,
        s.cfg.plan.output,
        s.cfg.hyper,
        1,
        s.cfg.fixed,
        1,
    )
    .unwrap_err();
    assert!(e.to_string().contains("layer size 0 at position 1"), "{e}");
    let mut arena8 = vec![0i8; need];
    let e = Learner::<Fixed<i8>>::new(&s.cfg, &mut arena8)
        .err()
        .unwrap();
    assert_eq!(e, LearnerError::Container { need: 16, have: 8 });
}
