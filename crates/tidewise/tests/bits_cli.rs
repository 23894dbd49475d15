//! `tidewise bits` from the command line: bad input gets a clear error naming the value and
//! what is allowed; a small run writes its files.

use std::path::Path;
use std::process::Command;

const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [6]\n\
    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 3\n";

fn bits(dir: &Path, extra: &[&str]) -> (i32, String, String) {
    let spec = dir.join("pump.toml");
    std::fs::write(&spec, SPEC).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_tidewise"))
        .arg("bits")
        .arg(&spec)
        .arg("--out")
        .arg(dir.join("out"))
        .args(["--jobs", "2", "--quiet"])
        .args(extra)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn negative_tolerance_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let (code, _, err) = bits(dir.path(), &["--tolerance", "-1"]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("--tolerance -1") && err.contains("0 or more"),
        "{err}"
    );
    assert!(!err.contains("panicked"), "{err}");
}

#[test]
fn zero_seeds_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let (code, _, err) = bits(dir.path(), &["--seeds", "0"]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("--seeds 0") && err.contains("1 to 64"),
        "{err}"
    );
}

#[test]
fn broken_energy_tables_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("missing.toml");
    std::fs::write(
        &missing,
        "[integer_add]\n8 = 0.03\n32 = 0.1\n[float_add]\n32 = 0.9\n[float_mul]\n32 = 3.7\n[sram_read_64bit]\n8 = 10.0\n",
    )
    .unwrap();
    let (code, _, err) = bits(dir.path(), &["--energy", missing.to_str().unwrap()]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("missing.toml") && err.contains("[integer_mul]"),
        "{err}"
    );
    let negative = dir.path().join("negative.toml");
    std::fs::write(
        &negative,
        "[integer_add]\n8 = 0.03\n32 = 0.1\n[integer_mul]\n8 = 0.2\n32 = -3.1\n[float_add]\n32 = 0.9\n[float_mul]\n32 = 3.7\n[sram_read_64bit]\n8 = 10.0\n",
    )
    .unwrap();
    let (code, _, err) = bits(dir.path(), &["--energy", negative.to_str().unwrap()]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("integer_mul.32 = -3.1") && err.contains("positive"),
        "{err}"
    );
}

#[test]
fn a_small_run_writes_the_recommendation() {
    let dir = tempfile::tempdir().unwrap();
    let (code, out, err) = bits(
        dir.path(),
        &["--seeds", "1", "--tolerance", "3", "--scan-step", "4"],
    );
    assert_eq!(code, 0, "{err}");
    assert!(
        out.contains("forward_weights") && out.contains("energy per training sample"),
        "{out}"
    );
    let o = dir.path().join("out");
    let text = std::fs::read_to_string(o.join("recommendation.json")).unwrap();
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    for class in [
        "forward_weights",
        "biases",
        "feedback_weights",
        "activations",
        "accumulator",
    ] {
        let c = &v[class];
        let (w, f) = (c["word_bits"].as_u64(), c["frac_bits"].as_u64());
        assert!(w.is_some() && f.is_some(), "{class}: {c}");
    }
    for key in [
        "accuracy_gap_points",
        "memory_bytes",
        "energy_pj_per_sample",
    ] {
        assert!(v[key].as_f64().is_some(), "{key}");
    }
    let runs = v["runs"].as_u64().unwrap();
    assert!(runs > 0 && runs < v["full_grid_runs"].as_u64().unwrap());
    let svg = std::fs::read_to_string(o.join("bits.svg")).unwrap();
    assert!(svg.starts_with("<svg") && svg.contains("stochastic") && svg.contains("nearest"));
    let csv = std::fs::read_to_string(o.join("runs.csv")).unwrap();
    assert_eq!(
        csv.lines().filter(|l| l.starts_with("search,")).count() as u64,
        runs
    );
}
