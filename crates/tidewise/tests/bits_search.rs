//! The bit-width search on a small pump problem (the invented demo generator, few epochs):
//! its joint recommendation is within the tolerance when re-run independently through
//! `arms::run`, it costs fewer runs than the grid it avoids, one bit less than a class's
//! recommendation misses the tolerance, and worker threads do not change the answer.

use tidewise::arms::{self, NoObserver};
use tidewise::bits::{self, Knob, Options};

const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 240\n[net]\nhidden = [8]\n\
    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 4\n";

fn options(jobs: usize) -> Options {
    Options {
        tolerance: 2.0,
        seeds: 2,
        jobs,
        scan: false,
        ..Options::default()
    }
}

fn silent(_: &str) {}

#[test]
fn recommendation_is_within_tolerance_and_cheaper_than_the_grid() {
    let (spec, design) = tidewise::spec::parse(SPEC, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let opts = options(2);
    let rec = bits::search(&spec, &design, &prepared, &opts, &mut silent).unwrap();
    assert!(rec.within_tolerance, "{:?}", rec.joint_notes);
    assert!(rec.joint.mean <= opts.tolerance);

    // Independent confirmation: both arms of the recommended design through the public
    // two-arm path, seed by seed, give the same mean gap.
    let mut gaps = Vec::new();
    for &seed in &rec.seeds {
        let mut s = spec.clone();
        s.run.seed = seed;
        let cmp = arms::run(
            &s,
            &rec.design,
            &prepared,
            &mut NoObserver,
            &mut |_, _, _| {},
        )
        .unwrap();
        gaps.push(cmp.gap_points());
    }
    let mean = gaps.iter().sum::<f64>() / gaps.len() as f64;
    assert!(
        (mean - rec.joint.mean).abs() < 1e-9,
        "{mean} vs {}",
        rec.joint.mean
    );
    assert!(mean <= opts.tolerance);

    // Far fewer runs than the grids over the same candidates.
    let r = &rec.runs;
    assert!(r.search_fixed > 0);
    assert!((r.search_fixed as u64) < r.one_class_grid, "{r:?}");
    assert!(r.one_class_grid < r.full_grid, "{r:?}");
    assert_eq!(r.float, 2, "the float arm runs once per seed");

    // Every class is at most the spec's generous word and the design narrower overall.
    let fw = rec.class(Knob::ForwardWeights).unwrap();
    assert!(fw.searched && fw.word_bits <= 16);
    assert_eq!(
        i32::from(fw.word_bits),
        fw.int_bits + i32::from(fw.frac_bits) + 1
    );
    let acc = rec.class(Knob::Accumulator).unwrap();
    assert!(acc.word_bits <= 32);
}

#[test]
fn one_bit_less_than_a_recommendation_misses() {
    // The bisection's last failing point is one bit below the answer: re-run that point
    // independently (others at the spec's formats) and check it misses the tolerance.
    let (spec, design) = tidewise::spec::parse(SPEC, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let opts = options(2);
    let rec = bits::search(&spec, &design, &prepared, &opts, &mut silent).unwrap();
    let mut checked = 0;
    for k in [Knob::ForwardWeights, Knob::Biases, Knob::Activations] {
        let c = rec.class(k).unwrap();
        let lower = (c.int_bits + 2).max(2);
        // The joint step may have widened the class; look at the class's own search.
        let own: Vec<&bits::Step> = rec
            .steps
            .iter()
            .filter(|s| s.class == k.name() && s.stage == "width")
            .collect();
        let Some(best) = own.iter().filter(|s| s.pass).map(|s| s.word_bits).min() else {
            continue;
        };
        if i32::from(best) <= lower {
            continue;
        }
        let f = tidewise_core::format::Format::new(
            best - 1,
            u8::try_from(i32::from(best) - 2 - c.int_bits).unwrap(),
        )
        .unwrap();
        let point = rec.reference.with(k, f);
        let d = point.apply(&design);
        let mut gaps = Vec::new();
        for &seed in &rec.seeds {
            let mut s = spec.clone();
            s.run.seed = seed;
            let cmp = arms::run(&s, &d, &prepared, &mut NoObserver, &mut |_, _, _| {}).unwrap();
            gaps.push(cmp.gap_points());
        }
        let mean = gaps.iter().sum::<f64>() / gaps.len() as f64;
        assert!(mean > opts.tolerance, "{k:?} at {f}: gap {mean}");
        checked += 1;
    }
    assert!(checked > 0, "no class had a narrower neighbour to check");
}

#[test]
fn worker_threads_do_not_change_the_answer() {
    let (spec, design) = tidewise::spec::parse(SPEC, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let a = bits::search(&spec, &design, &prepared, &options(1), &mut silent).unwrap();
    let b = bits::search(&spec, &design, &prepared, &options(2), &mut silent).unwrap();
    assert_eq!(a.point, b.point);
    assert_eq!(a.joint, b.joint);
    assert_eq!(a.steps, b.steps);
    assert_eq!(a.runs, b.runs);
}

#[test]
fn bp_has_no_feedback_weights_to_size() {
    let (spec, design) = tidewise::spec::parse(SPEC, &["rule.name=bp".into()]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let opts = Options {
        seeds: 1,
        ..options(2)
    };
    let rec = bits::search(&spec, &design, &prepared, &opts, &mut silent).unwrap();
    let fb = rec.class(Knob::FeedbackWeights).unwrap();
    assert!(!fb.used && !fb.searched);
    assert!(rec.steps.iter().all(|s| s.class != "feedback_weights"));
}
