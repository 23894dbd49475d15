//! Sweeps end to end: the sequential and the parallel path, resume, shards and merge, the
//! report, and every refusal of bad input, through the library and the `tidewise` binary.
//!
//! The reference for every run is the plain `tidewise train` of the same spec (the base file
//! with the point's values given as `--with`): a sweep must add nothing and lose nothing.
//! `runs.jsonl` is checked against the JSON Lines convention (jsonlines.org: one JSON value
//! per `\n`-terminated UTF-8 line).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use serde_json::Value;
use tidewise::sweep::{self, store, Grid, Options, Shard, Sweep};

const BIN: &str = env!("CARGO_BIN_EXE_tidewise");

const BASE: &str = "# Invented demo: a tiny pump-monitor learner.\n[data]\nsource = \"pump\"\nsamples = 120\n[net]\nhidden = [8]\n[rule]\nwarmup_epochs = 0\n[run]\nepochs = 2\n";

const GRID: &str = "\"fixed.forward_weights\" = [\"Q1.6\", \"Q2.13\"]\n\"fixed.rounding\" = [\"nearest\", \"stochastic\"]\n\"run.seed\" = [1, 2, 3]\n";

struct Setup {
    _tmp: tempfile::TempDir,
    root: PathBuf,
    spec: PathBuf,
    grid: PathBuf,
}

fn setup() -> Setup {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path().to_path_buf();
    let spec = root.join("spec.toml");
    let grid = root.join("grid.toml");
    std::fs::write(&spec, BASE).unwrap();
    std::fs::write(&grid, GRID).unwrap();
    Setup {
        _tmp: tmp,
        root,
        spec,
        grid,
    }
}

fn tw(args: &[&str]) -> Output {
    Command::new(BIN).args(args).output().unwrap()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// `runs.jsonl` by grid index, `timing` removed; checks the JSON Lines form and that no
/// index appears twice.
fn runs(dir: &Path) -> BTreeMap<u64, Value> {
    let text = std::fs::read_to_string(dir.join("runs.jsonl")).unwrap();
    assert!(text.is_empty() || text.ends_with('\n'), "last line cut");
    let mut out = BTreeMap::new();
    for line in text.lines() {
        let v: Value = serde_json::from_str(line).unwrap();
        assert!(v.is_object());
        let i = v["index"].as_u64().unwrap();
        assert!(
            out.insert(i, store::without_timing(&v)).is_none(),
            "index {i} twice"
        );
    }
    out
}

fn run_lib(s: &Setup, out: &Path, opts: &Options) -> sweep::Outcome {
    let sw = Sweep::load(&s.spec, &s.grid, &[]).unwrap();
    sweep::run_sweep(&sw, out, opts, &|_| {}).unwrap()
}

#[test]
fn sequential_and_parallel_paths_agree_and_match_train() {
    let s = setup();
    let (a, b) = (s.root.join("seq"), s.root.join("par"));
    let one = run_lib(
        &s,
        &a,
        &Options {
            jobs: Some(1),
            shard: None,
        },
    );
    let two = run_lib(
        &s,
        &b,
        &Options {
            jobs: Some(2),
            shard: None,
        },
    );
    // 2 x 2 x 3 points (Cartesian product; fact of the trade).
    assert_eq!((one.ran, two.ran, one.failed), (12, 12, 0));
    let (ra, rb) = (runs(&a), runs(&b));
    assert_eq!(ra.len(), 12);
    assert_eq!(ra, rb, "jobs 1 and jobs 2 must give the same runs");
    // Different points give different runs (the values were applied).
    let digests: std::collections::BTreeSet<&str> = ra
        .values()
        .map(|r| r["results"]["fixed"]["digest"].as_str().unwrap())
        .collect();
    assert_eq!(digests.len(), 12);

    // Point 7 against `tidewise train` with the same values as --with.
    let r = &ra[&7];
    let sets: Vec<String> = r["point"]
        .as_object()
        .unwrap()
        .iter()
        .map(|(k, v)| format!("--with={k}={v}"))
        .collect();
    let train_dir = s.root.join("train7");
    let mut args = vec![
        "train",
        s.spec.to_str().unwrap(),
        "--out",
        train_dir.to_str().unwrap(),
    ];
    args.extend(sets.iter().map(String::as_str));
    let o = tw(&args);
    assert!(o.status.success(), "{}", stderr(&o));
    let summary: Value =
        serde_json::from_str(&std::fs::read_to_string(train_dir.join("outcome.json")).unwrap())
            .unwrap();
    assert_eq!(summary["spec_hash"], r["spec_hash"]);
    assert_eq!(summary["spec"], r["spec"]);
    for arm in ["fixed", "float"] {
        for k in [
            "test_accuracy",
            "train_loss",
            "lost_updates",
            "saturations",
            "updates",
            "digest",
        ] {
            assert_eq!(summary["arms"][arm][k], r["results"][arm][k], "{arm}.{k}");
        }
    }
    assert_eq!(
        summary["accuracy_gap_points"],
        r["results"]["accuracy_gap_points"]
    );
    assert_eq!(summary["memory_bits"], r["results"]["memory_bits"]);
    assert_eq!(summary["memory_bytes"], r["results"]["memory_bytes"]);
}

#[test]
fn resume_skips_done_runs_and_redoes_a_cut_line() {
    let s = setup();
    let full = s.root.join("full");
    run_lib(
        &s,
        &full,
        &Options {
            jobs: Some(2),
            shard: None,
        },
    );
    let reference = runs(&full);

    let dir = s.root.join("resumed");
    let half = run_lib(
        &s,
        &dir,
        &Options {
            jobs: Some(2),
            shard: Some(Shard { index: 0, count: 2 }),
        },
    );
    assert_eq!((half.shard_points, half.ran), (6, 6));
    // Simulate a sweep killed inside a write: half of a line, no newline.
    let runs_path = dir.join("runs.jsonl");
    let text = std::fs::read_to_string(&runs_path).unwrap();
    let first = text.lines().next().unwrap();
    let cut = &first[..first.len() / 2];
    // The run of the first line is taken out, so the cut line stands for an unfinished run.
    let kept: String = text.lines().skip(1).map(|l| format!("{l}\n")).collect();
    std::fs::write(&runs_path, format!("{kept}{cut}")).unwrap();

    let o = tw(&[
        "sweep",
        s.spec.to_str().unwrap(),
        "--grid",
        s.grid.to_str().unwrap(),
        "--out",
        dir.to_str().unwrap(),
        "--jobs",
        "2",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stderr(&o).contains("cut line"), "{}", stderr(&o));
    let stdout = String::from_utf8_lossy(&o.stdout);
    // 12 points: 5 kept, the cut one and the 6 of the other shard made now.
    assert!(
        stdout.contains("7 runs made (0 failed), 5 already there"),
        "{stdout}"
    );
    assert_eq!(runs(&dir), reference);
    // Once more: nothing to do.
    let again = run_lib(&s, &dir, &Options::default());
    assert_eq!((again.ran, again.skipped), (0, 12));
}

#[test]
fn shards_merge_into_the_full_sweep() {
    let s = setup();
    let full = s.root.join("full");
    run_lib(
        &s,
        &full,
        &Options {
            jobs: Some(2),
            shard: None,
        },
    );
    let mut dirs = Vec::new();
    for k in 0..3 {
        let d = s.root.join(format!("shard-{k}"));
        let o = run_lib(
            &s,
            &d,
            &Options {
                jobs: Some(1),
                shard: Some(Shard { index: k, count: 3 }),
            },
        );
        assert_eq!(o.ran, 4);
        for i in runs(&d).keys() {
            assert_eq!(*i as usize % 3, k, "shard {k} holds only i % 3 == {k}");
        }
        dirs.push(d);
    }
    // Merge all three, plus the first again (its lines are duplicates).
    let merged = s.root.join("merged");
    let mut args: Vec<String> = vec!["merge".into()];
    args.extend(dirs.iter().map(|d| d.display().to_string()));
    args.push(dirs[0].display().to_string());
    args.extend(["--out".into(), merged.display().to_string()]);
    let o = Command::new(BIN).args(&args).output().unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        stdout.contains("12 of 12 grid points") && stdout.contains("4 duplicate"),
        "{stdout}"
    );
    assert_eq!(runs(&merged), runs(&full));
    // Sorted by grid index.
    let text = std::fs::read_to_string(merged.join("runs.jsonl")).unwrap();
    let order: Vec<u64> = text
        .lines()
        .map(|l| {
            serde_json::from_str::<Value>(l).unwrap()["index"]
                .as_u64()
                .unwrap()
        })
        .collect();
    assert_eq!(order, (0..12).collect::<Vec<u64>>());

    // One shard missing: non-zero exit, the missing indices listed (shard 1 of 3: 1, 4, 7, 10).
    let part = s.root.join("part");
    let o = tw(&[
        "merge",
        dirs[0].to_str().unwrap(),
        dirs[2].to_str().unwrap(),
        "--out",
        part.to_str().unwrap(),
    ]);
    assert!(!o.status.success());
    assert!(
        stderr(&o).contains("4 grid point(s) have no run: 1, 4, 7, 10"),
        "{}",
        stderr(&o)
    );
    assert_eq!(runs(&part).len(), 8);
    // The merged folder is a sweep folder: the sweep fills what is missing.
    let fill = run_lib(&s, &part, &Options::default());
    assert_eq!((fill.ran, fill.skipped), (4, 8));
    assert_eq!(runs(&part), runs(&full));

    // Shards of another sweep are refused.
    let other = s.root.join("other");
    let sw = Sweep::load(&s.spec, &s.grid, &["run.epochs=1".into()]).unwrap();
    sweep::run_sweep(
        &sw,
        &other,
        &Options {
            jobs: Some(2),
            shard: Some(Shard { index: 0, count: 6 }),
        },
        &|_| {},
    )
    .unwrap();
    let o = tw(&[
        "merge",
        dirs[0].to_str().unwrap(),
        other.to_str().unwrap(),
        "--out",
        s.root.join("m2").to_str().unwrap(),
    ]);
    assert!(!o.status.success());
    assert!(
        stderr(&o).contains("not a shard of the same sweep"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn bad_input_is_refused_with_the_value_named() {
    let s = setup();
    let spec = s.spec.to_str().unwrap();
    let out = s.root.join("out");
    let outs = out.to_str().unwrap();
    let grid_file = |name: &str, text: &str| {
        let p = s.root.join(name);
        std::fs::write(&p, text).unwrap();
        p.display().to_string()
    };
    let cases: Vec<(Vec<String>, &str)> = vec![
        (
            vec![grid_file("g1.toml", "\"fixed.roundng\" = [\"nearest\"]\n")],
            "`fixed.roundng` is not a spec key; did you mean `fixed.rounding`?",
        ),
        (vec![grid_file("g2.toml", "")], "the grid is empty"),
        (
            vec![grid_file("g3.toml", "\"run.seed\" = []\n")],
            "`run.seed` has an empty list",
        ),
        (
            vec![grid_file(
                "g4.toml",
                "\"fixed.forward_weights\" = [\"Q2.13\", \"Q40.3\"]\n",
            )],
            "grid point 1 (fixed.forward_weights = \"Q40.3\")",
        ),
        (
            vec![s.grid.display().to_string(), "--shard".into(), "4/4".into()],
            "--shard 4/4",
        ),
        (
            vec![s.grid.display().to_string(), "--shard".into(), "0/0".into()],
            "at least 1",
        ),
        (
            vec![s.grid.display().to_string(), "--jobs".into(), "0".into()],
            "--jobs 0: allowed: 1 to 1024",
        ),
    ];
    for (extra, want) in cases {
        let mut args = vec![
            "sweep".to_string(),
            spec.into(),
            "--out".into(),
            outs.into(),
            "--grid".into(),
        ];
        args.extend(extra);
        let o = Command::new(BIN).args(&args).output().unwrap();
        assert_eq!(o.status.code(), Some(2), "{args:?}");
        assert!(stderr(&o).contains(want), "{args:?}: {}", stderr(&o));
        assert!(
            !out.join("runs.jsonl").exists(),
            "{args:?} must not start runs"
        );
    }

    // A folder of another sweep: another base spec, then another grid.
    let small = grid_file("g5.toml", "\"run.seed\" = [1, 2]\n");
    let o = tw(&[
        "sweep", spec, "--grid", &small, "--out", outs, "--jobs", "2",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = tw(&[
        "sweep",
        spec,
        "--grid",
        &small,
        "--out",
        outs,
        "--with",
        "run.epochs=1",
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("holds the runs of another sweep (base spec hash"),
        "{}",
        stderr(&o)
    );
    let o = tw(&[
        "sweep",
        spec,
        "--grid",
        s.grid.to_str().unwrap(),
        "--out",
        outs,
    ]);
    assert!(
        stderr(&o).contains("another grid (2 points there, 12 here)"),
        "{}",
        stderr(&o)
    );
    // A folder with other files and no manifest.
    let o = tw(&[
        "sweep",
        spec,
        "--grid",
        &small,
        "--out",
        s.root.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("has no sweep.json but holds other files"),
        "{}",
        stderr(&o)
    );
    // A damaged line in the middle is not silently dropped.
    let runs_path = out.join("runs.jsonl");
    let text = std::fs::read_to_string(&runs_path).unwrap();
    std::fs::write(&runs_path, format!("{{\"index\": oops\n{text}")).unwrap();
    let o = tw(&["sweep", spec, "--grid", &small, "--out", outs]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("line 1 is not a run record"),
        "{}",
        stderr(&o)
    );
    // Merge of a folder that is not a sweep.
    let o = tw(&["merge", s.root.to_str().unwrap()]);
    assert!(stderr(&o).contains("has no sweep.json"), "{}", stderr(&o));
}

#[test]
fn a_run_that_fails_is_recorded_and_not_retried() {
    let s = setup();
    // A learning rate that drives the float arm to infinity fails the same way every time.
    let grid = Grid::parse("\"rule.lr\" = [0.02, 10.0]\n\"rule.beta\" = [100.0]\n", "g").unwrap();
    let text = std::fs::read_to_string(&s.spec).unwrap();
    let sw = Sweep::from_text(
        &text,
        "spec",
        &s.root,
        &["net.hidden=[64]".into(), "data.scale=50".into()],
        grid,
    )
    .unwrap();
    let dir = s.root.join("f");
    let o = sweep::run_sweep(&sw, &dir, &Options::default(), &|_| {}).unwrap();
    let r = runs(&dir);
    assert_eq!(r.len(), 2);
    let failed: Vec<&Value> = r.values().filter(|v| v["status"] == "failed").collect();
    assert_eq!(o.failed, failed.len());
    assert!(
        failed.iter().any(|v| v["point"]["rule.lr"] == 10.0),
        "the lr = 10 point must fail: {r:?}"
    );
    for f in &failed {
        assert!(f["error"].as_str().unwrap().contains("non-finite"), "{f}");
    }
    let again = sweep::run_sweep(&sw, &dir, &Options::default(), &|_| {}).unwrap();
    assert_eq!(again.ran, 0);
}

#[test]
fn report_pages_are_self_contained() {
    let s = setup();
    let dir = s.root.join("sw");
    run_lib(
        &s,
        &dir,
        &Options {
            jobs: Some(2),
            shard: None,
        },
    );
    let o = tw(&["report", dir.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    // Nothing loaded from elsewhere: no scripts, no links, no external images; the only URL
    // is the SVG namespace.
    for bad in ["<script", "<link", "src=", "href="] {
        assert!(!html.contains(bad), "{bad}");
    }
    let urls = html.matches("http").count();
    assert_eq!(urls, html.matches("http://www.w3.org/2000/svg").count());
    // Heatmaps of the two largest non-seed axes (2 x 2), one cell per pair, each the mean of
    // 3 seeds; mean gap of cell (Q1.6, nearest) recomputed here.
    assert!(html.contains("mean over run.seed"));
    let r = runs(&dir);
    let cell: Vec<f64> = r
        .values()
        .filter(|v| {
            v["point"]["fixed.forward_weights"] == "Q1.6"
                && v["point"]["fixed.rounding"] == "nearest"
        })
        .map(|v| v["results"]["accuracy_gap_points"].as_f64().unwrap())
        .collect();
    assert_eq!(cell.len(), 3);
    let mean = cell.iter().sum::<f64>() / 3.0;
    assert!(
        html.contains(&format!("mean {mean:.3} points over 3 run(s)")),
        "cell mean {mean}"
    );
    let gap_svg = std::fs::read_to_string(dir.join("sweep-gap.svg")).unwrap();
    assert_eq!(gap_svg.matches("<title>").count(), 4);

    // Axis choice by name, and a bad name.
    let o = tw(&[
        "report",
        dir.to_str().unwrap(),
        "--rows",
        "run.seed",
        "--cols",
        "fixed.rounding",
        "--out",
        s.root.join("r2.html").to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = tw(&["report", dir.to_str().unwrap(), "--rows", "fixed.rnd"]);
    assert!(
        stderr(&o).contains("no grid axis `fixed.rnd`"),
        "{}",
        stderr(&o)
    );

    // A training folder.
    let t = s.root.join("t");
    let o = tw(&[
        "train",
        s.spec.to_str().unwrap(),
        "--out",
        t.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = tw(&["report", t.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let html = std::fs::read_to_string(t.join("report.html")).unwrap();
    assert!(html.contains("Training run") && html.contains("<svg"));

    // A bit-width estimate is shown as written.
    let b = s.root.join("b");
    std::fs::create_dir_all(&b).unwrap();
    std::fs::write(
        b.join("recommendation.json"),
        r#"{"rule": "dtp", "accuracy_gap_points": 0.4, "forward_weights": {"format": "Q2.9", "word_bits": 12}}"#,
    )
    .unwrap();
    let o = tw(&["report", b.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let html = std::fs::read_to_string(b.join("report.html")).unwrap();
    assert!(html.contains("forward_weights.format") && html.contains("<code>Q2.9</code>"));
    assert!(
        html.contains(
            "<th>mean paired gap on the confirmation replicates (points)</th><td>0.4</td>"
        ),
        "{html}"
    );

    // Nothing to report.
    let e = s.root.join("empty");
    std::fs::create_dir_all(&e).unwrap();
    let o = tw(&["report", e.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("holds no results to report"),
        "{}",
        stderr(&o)
    );
}

/// A sweep trains each float arm once per float key (the spec without `[fixed]`, and the
/// resolved rates) and sets every fixed arm beside it: each run must equal a fresh
/// `arms::run` of its spec in both arms. The specs differ in formats (one float arm), in
/// the rate representation (`fixed.rate = "shift"`: rates rounded to powers of two, which
/// the float arm uses too, a second float arm) and in the seed (a third).
#[test]
fn float_arms_shared_between_runs_equal_fresh_ones() {
    let cache = sweep::DataCache::new();
    let cases: [&[&str]; 5] = [
        &[],
        &["fixed.forward_weights=Q1.6"],
        &["fixed.rounding=nearest", "fixed.activations=Q3.4"],
        &["fixed.rate=shift"],
        &["run.seed=9", "fixed.forward_weights=Q1.6"],
    ];
    let mut floats = std::collections::BTreeSet::new();
    for sets in cases {
        let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
        let (spec, design) = tidewise::spec::parse(BASE, &sets).unwrap();
        let data = cache.get(&spec).unwrap();
        let shared = cache.run(&spec, &design, &data).unwrap();
        let fresh = tidewise::arms::run(
            &spec,
            &design,
            &data,
            &mut tidewise::arms::NoObserver,
            &mut |_, _, _| {},
        )
        .unwrap();
        for (a, b, arm) in [
            (&shared.float, &fresh.float, "float"),
            (&shared.fixed, &fresh.fixed, "fixed"),
        ] {
            assert_eq!(a.digest, b.digest, "{sets:?} {arm}");
            assert_eq!(a.test_accuracy, b.test_accuracy, "{sets:?} {arm}");
            assert_eq!(a.updates, b.updates, "{sets:?} {arm}");
        }
        assert_eq!(shared.warnings, fresh.warnings, "{sets:?}");
        floats.insert(shared.float.digest.clone());
    }
    assert_eq!(floats.len(), 3, "three distinct float arms: {floats:?}");
}
