//! The bit-width search on small problems (the invented pump generator, few epochs; a
//! subset of the UCI digits): the accepted design's mean gap on 16 further seeds that the
//! command never used is within the tolerance (re-run independently through `arms::run`),
//! search and confirmation replicates never overlap, held classes stay held, the answer
//! does not depend on worker threads, and small test sets get a split per replicate.
//!
//! Outside data: the UCI "Optical Recognition of Handwritten Digits" (1998) via the
//! `smartcore` crate.

use std::collections::BTreeSet;

use tidewise::arms::{self, NoObserver};
use tidewise::bits::{self, Executor, Hold, Knob, Options, Recommendation, Splits};

const PUMP: &str = "[data]\nsource = \"pump\"\nsamples = 600\n[net]\nhidden = [8]\n\
    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 10\n";
const DIGITS: &str = "[data]\nsource = \"digits\"\nmax_train = 400\n[net]\nhidden = [16]\n\
    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 5\n";

fn options(jobs: usize) -> Options {
    Options {
        tolerance: 2.0,
        search_seeds: 3,
        confirm_seeds: 12,
        rounds: 3,
        jobs,
        scan: false,
        ..Options::default()
    }
}

fn silent(_: &str) {}

fn run(text: &str, sets: &[&str], opts: &Options) -> (tidewise::spec::Spec, Recommendation) {
    let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
    let (spec, design) = if text == "demo" {
        let path =
            std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/pump.toml");
        tidewise::spec::load(&path, &sets).unwrap()
    } else {
        tidewise::spec::parse(text, &sets).unwrap()
    };
    let prepared = arms::prepare(&spec).unwrap();
    let rec = bits::search(
        &spec,
        &design,
        &prepared,
        opts,
        Executor::Local,
        None,
        &mut silent,
    )
    .unwrap();
    (spec, rec)
}

/// Every seed the command trained with.
fn used_seeds(rec: &Recommendation) -> BTreeSet<u64> {
    rec.run_log.iter().map(|u| u.rep.seed).collect()
}

/// The mean paired gap of the recommended design on 16 seeds the command never used, through
/// the public two-arm path.
fn recheck(spec: &tidewise::spec::Spec, rec: &Recommendation) -> f64 {
    let used = used_seeds(rec);
    let seeds: Vec<u64> = (90_000..).filter(|s| !used.contains(s)).take(16).collect();
    let prepared = arms::prepare(spec).unwrap();
    let gaps: Vec<f64> = seeds
        .iter()
        .map(|&seed| {
            let mut s = spec.clone();
            s.run.seed = seed;
            arms::run(
                &s,
                &rec.design,
                &prepared,
                &mut NoObserver,
                &mut |_, _, _| {},
            )
            .unwrap()
            .gap_points()
        })
        .collect();
    gaps.iter().sum::<f64>() / gaps.len() as f64
}

#[test]
fn accepted_pump_design_holds_on_fresh_seeds() {
    // The invented pump demo as shipped (demo-data/pump.toml), fewer epochs.
    let opts = options(2);
    let (spec, rec) = run("demo", &["run.epochs=10"], &opts);
    assert!(rec.accepted, "{:#?}", rec.notes);
    let r = rec.decision().unwrap();
    assert!(r.bound.upper <= opts.tolerance + 1e-9 && r.accepted);
    assert_eq!(r.bound.n, 12);
    // Confirmation replicates were never used by the search.
    let search: BTreeSet<u64> = rec
        .run_log
        .iter()
        .filter(|u| u.purpose == bits::Purpose::Search)
        .map(|u| u.rep.seed)
        .collect();
    for round in &rec.rounds {
        assert!(round.replicates.iter().all(|x| !search.contains(&x.seed)));
    }
    // The bound is the one-sided t bound of the confirmation's own paired gaps.
    let gaps: Vec<f64> = rec
        .run_log
        .iter()
        .filter(|u| u.purpose == bits::Purpose::Confirm && r.replicates.contains(&u.rep))
        .map(|u| u.gap())
        .collect();
    assert_eq!(gaps.len(), 12);
    assert_eq!(bits::Bound::of(&gaps, rec.round_level).upper, r.bound.upper);
    let fresh = recheck(&spec, &rec);
    assert!(
        fresh <= opts.tolerance,
        "mean gap on 16 fresh seeds {fresh}"
    );
    // Cheaper than the grids it avoids.
    let c = &rec.runs;
    assert!((c.search_fixed as u64) < c.one_class_grid && c.one_class_grid < c.full_grid);
}

#[test]
fn accepted_digits_design_holds_on_fresh_seeds() {
    let opts = Options {
        tolerance: 1.5,
        ..options(2)
    };
    let (spec, rec) = run(DIGITS, &[], &opts);
    assert!(rec.accepted, "{:#?}", rec.notes);
    let fresh = recheck(&spec, &rec);
    assert!(
        fresh <= opts.tolerance,
        "mean gap on 16 fresh seeds {fresh}"
    );
}

#[test]
fn held_classes_keep_their_formats() {
    let holds = vec![
        Hold::parse("forward_weights=Q1.6").unwrap(),
        Hold::parse("accumulator=24").unwrap(),
    ];
    let opts = Options {
        holds,
        ..options(2)
    };
    let (_, rec) = run(PUMP, &[], &opts);
    assert_eq!(rec.point.forward.to_string(), "Q1.6");
    assert_eq!(rec.point.acc, 24);
    let w = rec.class(Knob::ForwardWeights).unwrap();
    assert!(w.held && !w.searched && w.format == "Q1.6");
    assert!(rec.class(Knob::Accumulator).unwrap().held);
    // Every run the command made had the held formats.
    assert!(rec
        .run_log
        .iter()
        .all(|u| u.point.forward.to_string() == "Q1.6" && u.point.acc == 24));
    assert!(rec.steps.iter().all(|s| s.class != "forward_weights"));
    // The other classes were searched.
    assert!(rec.class(Knob::Activations).unwrap().searched);
}

#[test]
fn worker_threads_do_not_change_the_answer() {
    let (_, a) = run(PUMP, &[], &options(1));
    let (_, b) = run(PUMP, &[], &options(2));
    assert_eq!(a.point, b.point);
    assert_eq!(a.rounds, b.rounds);
    assert_eq!(a.steps, b.steps);
    assert_eq!(a.runs, b.runs);
}

#[test]
fn small_test_sets_get_a_split_per_replicate() {
    // 60 samples, a quarter held out: 15 test samples, one worth 6.7 points.
    let (_, rec) = run(
        PUMP,
        &["data.samples=60", "data.test_fraction=0.25"],
        &Options {
            tolerance: 5.0,
            rounds: 1,
            ..options(2)
        },
    );
    assert!(rec.vary_splits, "{}", rec.splits_note);
    assert!(
        rec.splits_note.contains("6.67 points"),
        "{}",
        rec.splits_note
    );
    let splits: BTreeSet<u64> = rec.run_log.iter().map(|u| u.rep.split).collect();
    assert!(splits.len() >= 3 + 12, "{splits:?}");
    // The spec's own test set is large enough for the digits: one split.
    let (_, d) = run(
        DIGITS,
        &[],
        &Options {
            splits: Splits::Auto,
            rounds: 1,
            confirm_seeds: 3,
            search_seeds: 2,
            ..options(2)
        },
    );
    assert!(!d.vary_splits);
    assert!(d.run_log.iter().all(|u| u.rep.split == 7));
}

#[test]
fn bp_has_no_feedback_weights_to_size() {
    let (_, rec) = run(
        PUMP,
        &["rule.name=bp"],
        &Options {
            rounds: 1,
            confirm_seeds: 3,
            search_seeds: 2,
            ..options(2)
        },
    );
    let fb = rec.class(Knob::FeedbackWeights).unwrap();
    assert!(!fb.used && !fb.searched);
    assert!(rec.steps.iter().all(|s| s.class != "feedback_weights"));
}
