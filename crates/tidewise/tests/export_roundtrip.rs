//! The hardware export against the training run it claims to record, and its bad inputs.
//!
//! Round trip: for every rule, exporting every step of one epoch and replaying the files
//! (`export::check`) must reproduce every word, and the exported final parameters must have
//! the digest `tidewise train`'s fixed arm reaches after that epoch (an independent run of
//! `train::train_epoch`, not the export's own loop). The data are the invented pump
//! generator (made up, nothing measured).

use std::path::Path;

use tidewise::arms::{self, NoObserver};
use tidewise::export::{self, Manifest};
use tidewise::spec::{self, Design, Spec};
use tidewise_core::rules::Rule;

const BASE: &str = "[data]\nsource = \"pump\"\nsamples = 48\n\
                    [net]\nhidden = [6]\n[rule]\nlr = 0.05\nwarmup_epochs = 0\n\
                    [fixed]\nforward_weights = \"Q1.6\"\nbiases = \"Q2.5\"\nfeedback_weights = \"Q1.6\"\n\
                    activations = \"Q2.5\"\nnoise = \"Q2.5\"\nstep = \"Q3.12\"\naccumulator = 16\n\
                    rounding = \"nearest\"\n[run]\nepochs = 1\nseed = 5\n";

fn design(sets: &[String]) -> (Spec, Design) {
    spec::parse(BASE, sets).unwrap()
}

fn manifest(dir: &Path) -> Manifest {
    serde_json::from_str(&std::fs::read_to_string(dir.join(export::MANIFEST)).unwrap()).unwrap()
}

#[test]
fn replay_and_training_digest_agree_for_every_rule() {
    for rule in Rule::ALL {
        for rounding in ["nearest", "floor", "stochastic"] {
            let sets = vec![
                format!("rule.name={}", rule.name()),
                format!("fixed.rounding={rounding}"),
            ];
            let (spec, design) = design(&sets);
            let prepared = arms::prepare(&spec).unwrap();
            let n = prepared.train.len();
            let tmp = tempfile::tempdir().unwrap();
            let e = export::export(&spec, &design, tmp.path(), n, false).unwrap();
            assert_eq!(e.manifest.steps, n);
            let r = export::check(tmp.path())
                .unwrap_or_else(|err| panic!("{} {rounding}: replay failed: {err:#}", rule.name()));
            assert_eq!(r.steps, n);
            let trained = arms::run_fixed(
                &spec,
                &design,
                &prepared,
                &mut NoObserver,
                &mut |_, _, _| {},
            )
            .unwrap();
            assert_eq!(
                manifest(tmp.path()).digest_final,
                trained.digest,
                "{} {rounding}: exported steps end where one training epoch ends",
                rule.name()
            );
            // Every sample of the epoch appears once, in the shuffled order.
            let mut seen = e.manifest.samples.clone();
            seen.sort_unstable();
            assert_eq!(seen, (0..n as u32).collect::<Vec<_>>());
        }
    }
}

#[test]
fn a_changed_word_fails_the_replay_and_names_the_file() {
    let (spec, design) = design(&["rule.name=dtp".into()]);
    let tmp = tempfile::tempdir().unwrap();
    export::export(&spec, &design, tmp.path(), 3, false).unwrap();
    export::check(tmp.path()).unwrap();
    for file in [
        "w1.mem",
        "h2.mem",
        "step.mem",
        "trace.mem",
        "tw_design_pkg.sv",
        "tw_design.h",
    ] {
        let path = tmp.path().join(file);
        let good = std::fs::read_to_string(&path).unwrap();
        // Flip the lowest bit of the last word of the file.
        let mut lines: Vec<String> = good.lines().map(String::from).collect();
        if file.ends_with(".mem") {
            let last = lines.iter().rposition(|l| !l.starts_with("//")).unwrap();
            let width = lines[last].len();
            let v = u64::from_str_radix(&lines[last], 16).unwrap() ^ 1;
            lines[last] = format!("{v:0width$x}");
        } else {
            // One constant changed: 8 forward-weight bits become 9.
            let at = lines
                .iter()
                .position(|l| l.contains("FORWARD_WEIGHTS_WORD"))
                .unwrap();
            lines[at] = lines[at].replace("= 8", "= 9").replace("(8)", "(9)");
            assert_ne!(lines[at], good.lines().nth(at).unwrap());
        }
        std::fs::write(&path, lines.join("\n") + "\n").unwrap();
        let err = format!("{:#}", export::check(tmp.path()).unwrap_err());
        assert!(err.contains(file), "{file}: {err}");
        std::fs::write(&path, good).unwrap();
    }
    export::check(tmp.path()).unwrap();
}

#[test]
fn bad_inputs_are_refused_with_the_value_and_nothing_is_written() {
    let (spec, design) = design(&[]);
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("out");
    let e = format!(
        "{:#}",
        export::export(&spec, &design, &out, 0, false).unwrap_err()
    );
    assert!(e.contains("--steps 0"), "{e}");
    let n = arms::prepare(&spec).unwrap().train.len();
    let e = format!(
        "{:#}",
        export::export(&spec, &design, &out, n + 1, false).unwrap_err()
    );
    assert!(
        e.contains(&format!("--steps {}", n + 1)) && e.contains(&format!("1 to {n}")),
        "{e}"
    );
    assert!(!out.exists(), "a refused export creates no folder");

    // A folder of another design is refused; the same design may be written again.
    export::export(&spec, &design, &out, 2, false).unwrap();
    export::export(&spec, &design, &out, 3, false).unwrap();
    assert_eq!(manifest(&out).steps, 3);
    let (other, other_design) = spec::parse(BASE, &["run.seed=6".into()]).unwrap();
    let e = format!(
        "{:#}",
        export::export(&other, &other_design, &out, 2, false).unwrap_err()
    );
    assert!(e.contains("another spec"), "{e}");
    assert_eq!(
        manifest(&out).seed,
        5,
        "the refused export left the folder alone"
    );

    // Inputs that do not parse.
    let bad = tmp.path().join("bad.toml");
    std::fs::write(&bad, "[fixed]\nforward_weights = \"Q1.99\"\n").unwrap();
    assert!(export::load_input(&bad, &[]).is_err());
    let json = tmp.path().join("recommendation.json");
    std::fs::write(&json, "{ not json").unwrap();
    let e = format!("{:#}", export::load_input(&json, &[]).unwrap_err());
    assert!(e.contains("not JSON"), "{e}");
    std::fs::write(&json, "{\"a\": 1}").unwrap();
    let e = format!("{:#}", export::load_input(&json, &[]).unwrap_err());
    assert!(e.contains("not a recommendation"), "{e}");
    std::fs::write(&json, "{\"spec_hash\": \"0\", \"decision\": \"x\"}").unwrap();
    let e = format!("{:#}", export::load_input(&json, &[]).unwrap_err());
    assert!(e.contains("recommended.toml"), "{e}");
    // With its recommended.toml beside it, the recommendation is the design.
    std::fs::write(tmp.path().join("recommended.toml"), BASE).unwrap();
    let (s, _, p) = export::load_input(&json, &[]).unwrap();
    assert_eq!(s.hash(), spec.hash());
    assert!(p.ends_with("recommended.toml"));

    // Not an export folder.
    let e = format!("{:#}", export::check(tmp.path()).unwrap_err());
    assert!(e.contains("manifest.json"), "{e}");
}

#[test]
fn the_command_writes_checks_and_refuses() {
    let tmp = tempfile::tempdir().unwrap();
    let spec_path = tmp.path().join("design.toml");
    std::fs::write(&spec_path, BASE).unwrap();
    let out = tmp.path().join("hdl");
    let bin = env!("CARGO_BIN_EXE_tidewise");
    let run = |args: &[&str]| std::process::Command::new(bin).args(args).output().unwrap();
    let (s, o) = (spec_path.to_str().unwrap(), out.to_str().unwrap());
    let r = run(&["export", s, "--out", o, "--steps", "0"]);
    assert_eq!(r.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&r.stderr).contains("--steps 0"));
    let r = run(&["export", s, "--out", o, "--steps", "2"]);
    assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
    let r = run(&["export", "--check", o]);
    assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
    assert!(String::from_utf8_lossy(&r.stdout).contains("2 steps re-run"));
    let r = run(&["export", s, "--out", o, "--with", "run.seed=9"]);
    assert_eq!(r.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&r.stderr).contains("another spec"));
}
