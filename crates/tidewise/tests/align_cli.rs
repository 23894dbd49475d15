//! `tidewise align` on the command line: the files it writes and the errors it gives for bad
//! options (each naming the value and what is allowed).

use std::process::Command;

fn spec_file(dir: &std::path::Path, rule: &str) -> std::path::PathBuf {
    let path = dir.join(format!("{rule}.toml"));
    let text = format!(
        "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [12, 8]\n[rule]\nname = \"{rule}\"\n[run]\nepochs = 3\n"
    );
    std::fs::write(&path, text).expect("write spec");
    path
}

fn tidewise(args: &[&str]) -> (bool, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_tidewise"))
        .args(args)
        .output()
        .expect("run tidewise");
    (
        out.status.success(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn writes_alignment_csv_and_svg() {
    let dir = tempfile::tempdir().expect("temp dir");
    let spec = spec_file(dir.path(), "dtp-direct");
    let out = dir.path().join("out");
    let (ok, stdout, stderr) = tidewise(&[
        "align",
        spec.to_str().expect("utf-8 path"),
        "--every",
        "2",
        "--samples",
        "5",
        "--out",
        out.to_str().expect("utf-8 path"),
    ]);
    assert!(ok, "align failed: {stderr}");
    assert!(stdout.contains("null_share"), "{stdout}");
    let csv = std::fs::read_to_string(out.join("alignment.csv")).expect("alignment.csv");
    let mut lines = csv.lines();
    assert_eq!(lines.next(), Some("epoch,arm,layer,measure,value"));
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    // Epochs 0, 2 and the last (3); both arms; 3 layers × 3 measures + 2 hidden × 2; and the
    // fixed arm's intended update on the 3 update measures of every layer.
    let epochs: std::collections::BTreeSet<&str> = rows.iter().map(|r| r[0]).collect();
    assert_eq!(epochs.into_iter().collect::<Vec<_>>(), ["0", "2", "3"]);
    assert_eq!(rows.len(), 3 * (2 * (3 * 3 + 2 * 2) + 3 * 3));
    let arms: std::collections::BTreeSet<&str> = rows.iter().map(|r| r[1]).collect();
    assert_eq!(
        arms.into_iter().collect::<Vec<_>>(),
        ["fixed", "fixed-intended", "float"]
    );
    assert!(stdout.contains("fixed-intended"), "{stdout}");
    for r in &rows {
        let v: f64 = r[4].parse().expect("numeric value");
        match r[3] {
            "null_share" => assert!((0.0..=1.0 + 1e-12).contains(&v), "{r:?}"),
            "angle_bp" | "angle_gn" | "angle_target_gn" | "feedback_align" => {
                assert!((0.0..=180.0).contains(&v), "{r:?}")
            }
            other => panic!("unknown measure {other}"),
        }
    }
    let svg = std::fs::read_to_string(out.join("alignment.svg")).expect("alignment.svg");
    assert!(svg.starts_with("<svg") && svg.contains("feedback_align"));
    assert!(out.join("outcome.json").exists() && out.join("curves.csv").exists());
}

#[test]
fn bad_options_are_refused_with_the_value() {
    let dir = tempfile::tempdir().expect("temp dir");
    let spec = spec_file(dir.path(), "dtp-direct");
    let s = spec.to_str().expect("utf-8 path");
    let out = dir.path().join("never");
    let o = out.to_str().expect("utf-8 path");
    // pump with 200 samples and a 0.2 test share: 40 test samples.
    for (args, needle) in [
        (vec!["--every", "0"], "--every 0"),
        (vec!["--samples", "0"], "--samples 0"),
        (
            vec!["--samples", "41"],
            "--samples 41: the test split holds only 40",
        ),
        (
            vec!["--measure", "angle_xyz"],
            "\"angle_xyz\": unknown measure",
        ),
    ] {
        let mut all = vec!["align", s, "--out", o];
        all.extend(args);
        let (ok, _, stderr) = tidewise(&all);
        assert!(!ok, "{all:?} was accepted");
        assert!(stderr.contains(needle), "{all:?}: {stderr}");
        assert!(!stderr.contains("panicked"), "{stderr}");
    }
    assert!(
        !out.exists(),
        "refused options must not create the output folder"
    );
    let fa = spec_file(dir.path(), "fa");
    let (ok, _, stderr) = tidewise(&[
        "align",
        fa.to_str().expect("utf-8 path"),
        "--measure",
        "feedback_align",
        "--out",
        o,
    ]);
    assert!(!ok);
    assert!(
        stderr.contains("rule fa has no learned feedback"),
        "{stderr}"
    );
}
