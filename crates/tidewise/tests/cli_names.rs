//! The help texts use the project's own names: `tidewise --help` and every subcommand's
//! `--help` are read, and none may mention a name the tool no longer has (the old override
//! flag, the old alignment command, the old per-run result file or the old word/fraction
//! format spelling). Project convention, no outside source.

use std::process::Command;

fn help(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_tidewise"))
        .args(args)
        .arg("--help")
        .output()
        .expect("run tidewise");
    assert!(out.status.success(), "{args:?} --help failed");
    let mut text = String::from_utf8_lossy(&out.stdout).into_owned();
    text.push_str(&String::from_utf8_lossy(&out.stderr));
    text
}

/// The subcommand names listed under "Commands:" in the top-level help.
fn subcommands(top: &str) -> Vec<String> {
    top.lines()
        .skip_while(|l| !l.starts_with("Commands:"))
        .skip(1)
        .take_while(|l| l.starts_with("  "))
        .filter_map(|l| l.split_whitespace().next())
        .filter(|name| *name != "help")
        .map(str::to_string)
        .collect()
}

/// An old name in `text`, if any. The word/fraction spelling is `s`, digits, `f`, digits.
fn old_name(text: &str) -> Option<String> {
    for needle in ["--set", "summary.json", "s<word>f<frac>"] {
        if text.contains(needle) {
            return Some(needle.to_string());
        }
    }
    let words = text.split(|c: char| !c.is_ascii_alphanumeric());
    for w in words {
        if w.eq_ignore_ascii_case("probe") || w.eq_ignore_ascii_case("probes") {
            return Some(w.to_string());
        }
        if let Some((word, frac)) = w.strip_prefix('s').and_then(|r| r.split_once('f')) {
            let digits = |s: &str| !s.is_empty() && s.bytes().all(|b| b.is_ascii_digit());
            if digits(word) && digits(frac) {
                return Some(w.to_string());
            }
        }
    }
    None
}

#[test]
fn the_checker_finds_each_old_name() {
    // The checker itself must not be blind: each old name planted in a text is found.
    for text in [
        "use --set run.epochs=3",
        "writes summary.json",
        "tidewise probe SPEC",
        "formats such as s16f12",
        "the s<word>f<frac> form",
    ] {
        assert!(old_name(text).is_some(), "missed in {text:?}");
    }
    assert_eq!(
        old_name("--with run.epochs=3, outcome.json, Q3.12, align"),
        None
    );
}

#[test]
fn no_help_text_uses_an_old_name() {
    let top = help(&[]);
    let subs = subcommands(&top);
    for expected in [
        "train", "align", "sweep", "merge", "report", "onchip", "bits", "export",
    ] {
        assert!(
            subs.iter().any(|s| s == expected),
            "{expected} missing from {subs:?}"
        );
    }
    assert!(
        old_name(&top).is_none(),
        "top-level help: {:?}",
        old_name(&top)
    );
    for sub in &subs {
        let text = help(&[sub]);
        assert!(
            old_name(&text).is_none(),
            "{sub} --help: {:?}\n{text}",
            old_name(&text)
        );
    }
}

#[test]
fn every_spec_reading_command_takes_with() {
    // The override flag exists under its new name on every command that reads a spec.
    for sub in ["train", "align", "sweep", "onchip", "bits", "export"] {
        let text = help(&[sub]);
        assert!(text.contains("--with <KEY=VALUE>"), "{sub} --help:\n{text}");
    }
}

/// A small pump spec in `dir`, its path as text.
fn pump_spec(dir: &std::path::Path) -> String {
    let spec = dir.join("pump.toml");
    let text = "[data]\nsource = \"pump\"\nsamples = 40\n[run]\nepochs = 3\n";
    std::fs::write(&spec, text).expect("write spec");
    spec.to_str().expect("utf-8 path").to_string()
}

/// Runs tidewise: success and stderr.
fn run(args: &[&str]) -> (bool, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_tidewise"))
        .args(args)
        .output()
        .expect("run tidewise");
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    (out.status.success(), err)
}

#[test]
fn old_spellings_are_refused_with_what_is_allowed() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = &pump_spec(dir.path());
    let o = dir.path().join("out");
    let o = o.to_str().expect("utf-8 path");
    let (ok, err) = run(&["train", s, "--out", o, "--set", "run.epochs=3"]);
    assert!(!ok && err.contains("--set"), "{err}");
    let (ok, err) = run(&["probe", s]);
    assert!(!ok && err.contains("probe"), "{err}");
    let (ok, err) = run(&["train", s, "--out", o, "--with", "fixed.activations=s16f12"]);
    assert!(!ok, "s16f12 was accepted");
    assert!(
        err.contains("s16f12") && err.contains("Q3.12") && err.contains("short_fract"),
        "{err}"
    );
    assert!(!err.contains("panicked"), "{err}");
    assert!(!std::path::Path::new(o).exists(), "a refused run wrote {o}");
}

#[test]
fn train_writes_outcome_json_and_report_reads_it() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = &pump_spec(dir.path());
    let out = dir.path().join("run");
    let o = out.to_str().expect("utf-8 path");
    let (ok, err) = run(&["train", s, "--out", o]);
    assert!(ok, "{err}");
    assert!(out.join("outcome.json").exists() && !out.join("summary.json").exists());
    let (ok, err) = run(&["report", o]);
    assert!(ok, "{err}");
    assert!(out.join("report.html").exists());
    // A folder from an earlier version, the file under its old name: refused with the fix.
    std::fs::rename(out.join("outcome.json"), out.join("summary.json")).expect("rename");
    let (ok, err) = run(&["report", o]);
    assert!(!ok, "an old folder was reported");
    assert!(err.contains("rename it to outcome.json"), "{err}");
}
