//! The bit-width search on small problems (the invented pump generator, few epochs; a
//! subset of the UCI digits): the accepted design's mean gap on 16 further seeds that the
//! command never used is within the tolerance (re-run independently through `arms::run`),
//! search and confirmation replicates never overlap, held classes stay held, the answer
//! does not depend on worker threads, and small test sets get a split per replicate.
//!
//! Outside data: the UCI "Optical Recognition of Handwritten Digits" (1998) via the
//! `smartcore` crate (docs/references.md [32]).

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

/// Whether two designs run the same: every class but the accumulator's entry (whose format
/// the core never uses for values: its fraction is the products'), the accumulator word and
/// overflow, and every per-layer format.
fn same_fixed(a: &tidewise::spec::Design, b: &tidewise::spec::Design) -> bool {
    use tidewise_core::class::Class;
    let (x, y) = (&a.fixed, &b.fixed);
    Class::ALL
        .iter()
        .filter(|&&c| c != Class::Acc)
        .all(|c| x.classes[c.index()] == y.classes[c.index()])
        && x.acc_bits == y.acc_bits
        && x.acc_overflow == y.acc_overflow
        && x.layers == y.layers
}

/// The formats of every layer of `c` in `d`, in layer order.
fn layer_formats(d: &tidewise::spec::Design, c: tidewise_core::class::Class) -> Vec<String> {
    d.fixed
        .layers
        .of(c)
        .into_iter()
        .flatten()
        .flatten()
        .map(|f| f.to_string())
        .collect()
}

#[test]
fn per_layer_search_sizes_each_layer_and_keeps_held_layers() {
    use tidewise_core::class::Class;
    // The invented pump demo as shipped (2 weight layers), fewer epochs; layer 2's weights
    // held (e.g. an existing memory macro).
    let opts = Options {
        per_layer: true,
        holds: vec![Hold::parse("forward_weights.2=Q2.9").unwrap()],
        ..options(2)
    };
    let (spec, rec) = run("demo", &["run.epochs=10"], &opts);
    // Every layer of the weights and activations has its own row; layer 2 held.
    let w1 = rec.class(Knob::LayerWeights(1)).unwrap();
    assert!(w1.searched && !w1.held, "{w1:?}");
    let w2 = rec.class(Knob::LayerWeights(2)).unwrap();
    assert!(w2.held && !w2.searched && w2.format == "Q2.9", "{w2:?}");
    for l in 0..=2 {
        assert!(rec.class(Knob::LayerActivations(l)).unwrap().searched);
    }
    assert!(rec.class(Knob::ForwardWeights).is_none());
    assert!(rec.class(Knob::Biases).unwrap().searched);
    // Every run the search made kept the held layer.
    assert!(rec.run_log.iter().all(|u| u
        .point
        .format(Knob::LayerWeights(2))
        .map(|f| f.to_string())
        == Some("Q2.9".into())));
    // The design's per-layer formats are the rows'.
    let d = &rec.design;
    let rows = |knobs: &[Knob]| -> Vec<String> {
        knobs
            .iter()
            .map(|&k| rec.class(k).unwrap().format.clone())
            .collect()
    };
    assert_eq!(
        layer_formats(d, Class::Forward),
        rows(&[Knob::LayerWeights(1), Knob::LayerWeights(2)])
    );
    assert_eq!(
        layer_formats(d, Class::Act),
        rows(&[
            Knob::LayerActivations(0),
            Knob::LayerActivations(1),
            Knob::LayerActivations(2)
        ])
    );
    // The accumulator sums the widest W·h products over the layers (the class formats
    // only follow the layers once they have formats of their own).
    let widest = |knobs: &[Knob]| {
        knobs
            .iter()
            .map(|&k| rec.class(k).unwrap().frac_bits)
            .max()
            .unwrap()
    };
    assert_eq!(
        rec.class(Knob::Accumulator).unwrap().frac_bits,
        widest(&[Knob::LayerWeights(1), Knob::LayerWeights(2)])
            + widest(&[
                Knob::LayerActivations(0),
                Knob::LayerActivations(1),
                Knob::LayerActivations(2)
            ])
    );
    // The recommended spec, read back as `tidewise train` reads it, is exactly the design
    // that was confirmed.
    let text = bits::recommended_spec(&spec, &rec).unwrap();
    let (_, back) = tidewise::spec::parse(&text, &[]).unwrap();
    assert!(same_fixed(&back, &rec.design), "{text}");
    assert!(rec.accepted, "{:#?}", rec.notes);
    let fresh = recheck(&spec, &rec);
    assert!(
        fresh <= opts.tolerance,
        "mean gap on 16 fresh seeds {fresh}"
    );
}

#[test]
fn per_layer_formats_of_the_input_spec_are_held_as_given() {
    use tidewise_core::class::Class;
    // Activations given per layer in the spec (input, hidden, output): held as given.
    let sets = [r#"fixed.activations=["Q2.9","Q3.10","Q4.11"]"#];
    let want = vec!["Q2.9", "Q3.10", "Q4.11"];
    for per_layer in [false, true] {
        let opts = Options {
            per_layer,
            ..options(2)
        };
        let (spec, rec) = run(PUMP, &sets, &opts);
        assert_eq!(layer_formats(&rec.design, Class::Act), want, "{per_layer}");
        assert!(rec.run_log.iter().all(|u| {
            (0..=2).all(|l| {
                u.point
                    .format(Knob::LayerActivations(l))
                    .map(|f| f.to_string())
                    == Some(want[usize::from(l)].to_string())
            })
        }));
        // The class format is the array's widest range, as the spec reads it.
        assert_eq!(
            rec.design.fixed.classes[Class::Act.index()]
                .format
                .to_string(),
            "Q4.11"
        );
        // The weights were still searched.
        let w = if per_layer {
            Knob::LayerWeights(1)
        } else {
            Knob::ForwardWeights
        };
        assert!(rec.class(w).unwrap().searched);
        let text = bits::recommended_spec(&spec, &rec).unwrap();
        let (_, back) = tidewise::spec::parse(&text, &[]).unwrap();
        assert!(same_fixed(&back, &rec.design), "{text}");
    }
}

#[test]
fn held_layers_outside_the_network_are_refused() {
    let spec = tidewise::spec::parse(PUMP, &[]).unwrap();
    let prepared = arms::prepare(&spec.0).unwrap();
    for (hold, want) in [
        (
            "forward_weights.3=Q1.6",
            "allowed: forward_weights.1 to forward_weights.2",
        ),
        (
            "forward_weights.0=Q1.6",
            "allowed: forward_weights.1 to forward_weights.2",
        ),
        (
            "activations.3=Q1.6",
            "allowed: activations.0 to activations.2",
        ),
    ] {
        let opts = Options {
            holds: vec![Hold::parse(hold).unwrap()],
            per_layer: true,
            ..options(1)
        };
        let err = bits::search(
            &spec.0,
            &spec.1,
            &prepared,
            &opts,
            Executor::Local,
            None,
            &mut silent,
        )
        .unwrap_err()
        .to_string();
        assert!(err.contains(want) && err.contains(hold), "{hold}: {err}");
    }
    for (hold, want) in [
        ("feedback_weights.1=Q1.6", "no per-layer formats"),
        ("accumulator.1=24", "no per-layer formats"),
        ("forward_weights.x=Q1.6", "layer `x`"),
        ("forward_weights.9=Q1.6", "layer `9`"),
        ("forward_weights.1=Q1.x", "format `Q1.x`"),
    ] {
        let err = Hold::parse(hold).unwrap_err().to_string();
        assert!(err.contains(want) && err.contains(hold), "{hold}: {err}");
    }
}
