//! `[net] init = "FILE"` from the command line: a run started from saved weights continues
//! from them (its accuracy before the first epoch is the saved network's), and bad weight
//! files get clear errors or warnings, never a panic.
//!
//! The NumPy-written files are `tests/fixtures/weights/*.npz` (made by `make_fixtures.py`
//! there): a 16-5-4 network for the pump data, `dtp-direct`.

use std::path::{Path, PathBuf};
use std::process::Command;

use serde_json::Value;
use tidewise::weights::npz::{self, Values};
use tidewise::weights::InitFile;

const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [5]\n\
                    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 3\n";

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../../tests/fixtures/weights")
        .join(name)
}

/// `tidewise train` in `dir/NAME` with `sets`: exit code, summary (when written), stdout, stderr.
fn train(dir: &Path, name: &str, sets: &[String]) -> (i32, Value, String, String) {
    let spec = dir.join("pump.toml");
    std::fs::write(&spec, SPEC).unwrap();
    let out = dir.join(name);
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_tidewise"));
    cmd.arg("train").arg(&spec).arg("--out").arg(&out);
    for s in sets {
        cmd.arg("--with").arg(s);
    }
    let o = cmd.output().unwrap();
    let summary = std::fs::read(out.join("outcome.json"))
        .ok()
        .and_then(|b| serde_json::from_slice(&b).ok())
        .unwrap_or(Value::Null);
    let err = String::from_utf8_lossy(&o.stderr).into_owned();
    assert!(!err.contains("panicked"), "{err}");
    (
        o.status.code().unwrap_or(-1),
        summary,
        String::from_utf8_lossy(&o.stdout).into_owned(),
        err,
    )
}

fn init(path: &Path) -> String {
    format!("net.init={}", path.display())
}

fn acc(s: &Value, arm: &str, key: &str) -> f64 {
    s["arms"][arm][key].as_f64().unwrap()
}

#[test]
fn a_run_from_saved_weights_starts_where_the_saved_run_ended() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // Nearest rounding: the evaluation itself draws no random bits, so the same network
    // gives the same accuracy wherever it is evaluated.
    let nearest = "fixed.rounding=nearest".to_string();
    let (code, a, _, err) = train(d, "a", std::slice::from_ref(&nearest));
    assert_eq!(code, 0, "{err}");
    assert!(a["init"].is_null());
    let (code, b, out, err) = train(
        d,
        "b",
        &[nearest.clone(), init(&d.join("a/weights-float.npz"))],
    );
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        acc(&b, "float", "initial_test_accuracy"),
        acc(&a, "float", "test_accuracy")
    );
    assert!(out.contains("started from"), "{out}");
    assert_eq!(b["init"]["tensors"].as_array().unwrap().len(), 5);
    let (code, c, _, err) = train(
        d,
        "c",
        &[nearest.clone(), init(&d.join("a/weights-fixed.npz"))],
    );
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        acc(&c, "fixed", "initial_test_accuracy"),
        acc(&a, "fixed", "test_accuracy")
    );
    // The decoded fixed weights are exact in their formats: nothing saturates, and with the
    // default stochastic rounding too the fixed arm starts from the saved raw words.
    assert_eq!(c["arms"]["fixed"]["init_saturations"], 0);
    let (spec, design) =
        tidewise::spec::parse(SPEC, &[init(&d.join("a/weights-fixed.npz"))]).unwrap();
    let prepared = tidewise::arms::prepare(&spec).unwrap();
    let mut start = tidewise::weights::FinalWeights::new(0);
    tidewise::arms::run(&spec, &design, &prepared, &mut start, &mut |_, _, _| {}).unwrap();
    let mut saved = ndarray_npy::NpzReader::new(
        std::fs::File::open(d.join("a/weights-fixed-raw.npz")).unwrap(),
    )
    .unwrap();
    let snap = start.fixed.unwrap();
    for (t, raw) in snap.tensors.iter().zip(snap.raw.unwrap()) {
        let words: ndarray::ArrayD<i16> = saved.by_name(&t.name()).unwrap();
        let words: Vec<i32> = words.iter().map(|&w| i32::from(w)).collect();
        assert_eq!(raw, words, "{}", t.name());
    }
}

#[test]
fn numpy_files_with_bad_contents_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let cases: [(&str, Vec<String>, &[&str]); 4] = [
        (
            "numpy-savez.npz",
            vec!["net.hidden=[6]".into()],
            &[
                "layer1.forward_weights",
                "shape [5, 16]",
                "layer 1",
                "needs [6, 16]",
                "16 inputs, 6 neurons",
            ],
        ),
        (
            "numpy-int64.npz",
            vec![],
            &["layer1.forward_weights", "int64", "'<i8'", "float32"],
        ),
        (
            "numpy-nan.npz",
            vec![],
            &["layer2.forward_weights", "NaN", "[3, 1]", "finite"],
        ),
        (
            "no-such-file.npz",
            vec![],
            &["cannot read weight file", "no-such-file.npz"],
        ),
    ];
    for (i, (file, mut sets, words)) in cases.into_iter().enumerate() {
        sets.push(init(&fixture(file)));
        let (code, _, _, err) = train(d, &format!("bad{i}"), &sets);
        assert_eq!(code, 2, "{file}: {err}");
        for w in words {
            assert!(err.contains(w), "{file}: {w:?} in {err}");
        }
    }
}

#[test]
fn every_truncation_of_a_file_is_refused() {
    let bytes = std::fs::read(fixture("numpy-savez.npz")).unwrap();
    let path = Path::new("cut.npz");
    for n in 0..bytes.len() {
        let e = npz::read_bytes(path, &bytes[..n]).expect_err(&format!("{n} bytes accepted"));
        assert!(e.to_string().contains("cut.npz"), "{e}");
    }
    assert_eq!(npz::read_bytes(path, &bytes).unwrap().len(), 5);
    // Through the command: a half file names the archive and says what is wrong.
    let dir = tempfile::tempdir().unwrap();
    let half = dir.path().join("half.npz");
    std::fs::write(&half, &bytes[..bytes.len() / 2]).unwrap();
    let (code, _, _, err) = train(dir.path(), "half", &[init(&half)]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("half.npz") && err.contains("truncated"),
        "{err}"
    );
}

/// An NPZ of float32 arrays named as given.
fn npz_file(path: &Path, arrays: &[(&str, Vec<usize>, Vec<f32>)]) {
    let list: Vec<(String, Vec<usize>, Values)> = arrays
        .iter()
        .map(|(n, s, v)| (n.to_string(), s.clone(), Values::F32(v.clone())))
        .collect();
    std::fs::write(path, npz::write(&list).unwrap()).unwrap();
}

/// The forward tensors of the 16-5-4 network, every value `v`.
fn forward(v: f32) -> Vec<(&'static str, Vec<usize>, Vec<f32>)> {
    vec![
        ("layer1.forward_weights", vec![5, 16], vec![v; 80]),
        ("layer2.forward_weights", vec![4, 5], vec![v; 20]),
        ("layer1.biases", vec![5], vec![v; 5]),
        ("layer2.biases", vec![4], vec![v; 4]),
    ]
}

#[test]
fn names_and_layers_are_checked() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let mut missing = forward(0.1);
    missing.remove(3);
    let mut unknown = forward(0.1);
    unknown.push(("arr_0", vec![3], vec![0.0; 3]));
    let mut beyond = forward(0.1);
    beyond.push(("layer3.biases", vec![4], vec![0.0; 4]));
    let cases: [(&str, _, &[&str]); 3] = [
        (
            "missing",
            missing,
            &["has no layer2.biases", "shape [4]", "layer1.biases"],
        ),
        (
            "unknown",
            unknown,
            &[
                "\"arr_0\"",
                "not a tensor name",
                "layer1.forward_weights [5, 16]",
            ],
        ),
        (
            "beyond",
            beyond,
            &["layer3.biases", "layer 3", "2 weight layers", "[16, 5, 4]"],
        ),
    ];
    for (name, arrays, words) in cases {
        let f = d.join(format!("{name}.npz"));
        npz_file(&f, &arrays);
        let (code, _, _, err) = train(d, name, &[init(&f)]);
        assert_eq!(code, 2, "{name}: {err}");
        for w in words {
            assert!(err.contains(w), "{name}: {w:?} in {err}");
        }
    }
}

#[test]
fn an_array_shorter_than_its_header_is_truncated() {
    // A stored zip member whose NPY header declares 5 float32 values but holds 3.
    let mut npy = b"\x93NUMPY\x01\x00".to_vec();
    let dict = "{'descr': '<f4', 'fortran_order': False, 'shape': (5,), }";
    let pad = 64 - (10 + dict.len() + 1) % 64;
    let header = format!("{dict}{}\n", " ".repeat(pad));
    npy.extend_from_slice(&(header.len() as u16).to_le_bytes());
    npy.extend_from_slice(header.as_bytes());
    for v in [1f32, 2.0, 3.0] {
        npy.extend_from_slice(&v.to_le_bytes());
    }
    let mut zip = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
    let stored =
        zip::write::SimpleFileOptions::default().compression_method(zip::CompressionMethod::Stored);
    zip.start_file("layer1.biases.npy", stored).unwrap();
    std::io::Write::write_all(&mut zip, &npy).unwrap();
    let bytes = zip.finish().unwrap().into_inner();
    let e = npz::read_bytes(Path::new("short.npz"), &bytes)
        .unwrap_err()
        .to_string();
    for w in [
        "short.npz",
        "layer1.biases",
        "[5]",
        "needs 20 data bytes",
        "holds 12",
        "truncated",
    ] {
        assert!(e.contains(w), "{w:?} in {e}");
    }
}

#[test]
fn saturation_and_feedback_are_reported() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // 8-bit formats: forward weights Q1.6 hold [-2, 2 - 2^-6], biases Q2.5 hold [-4, 4 - 2^-5]
    // (Q notation: m integer bits besides the sign, n fraction bits; a fact of the trade).
    let eight: Vec<String> = [
        "fixed.forward_weights=Q1.6",
        "fixed.biases=Q2.5",
        "fixed.feedback_weights=Q1.6",
        "fixed.activations=Q2.5",
        "fixed.noise=Q2.5",
        "fixed.rate=Q0.7",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let mut arrays = forward(0.0);
    // Row-major ramps through ±3: outside Q1.6 where |v| > 2 - 2^-6 or v < -2.
    let ramp = |n: usize| -> Vec<f32> {
        (0..n)
            .map(|i| -3.0 + 6.0 * i as f32 / (n - 1) as f32)
            .collect()
    };
    arrays[0].2 = ramp(80);
    arrays[2].2 = ramp(5);
    let q16_max = 2.0 - 1.0 / 64.0;
    let outside = arrays[0]
        .2
        .iter()
        .filter(|&&v| !(-2.0..=q16_max).contains(&v))
        .count();
    let f = d.join("wide.npz");
    npz_file(&f, &arrays);
    let mut sets = eight.clone();
    sets.push(init(&f));
    let (code, s, _, err) = train(d, "wide", &sets);
    assert_eq!(code, 0, "{err}");
    // Biases ±3 fit Q2.5: only the forward weights saturate.
    assert_eq!(s["arms"]["fixed"]["init_saturations"], outside as u64);
    assert_eq!(s["arms"]["float"]["init_saturations"], 0);
    let warnings = s["warnings"].to_string();
    for w in [
        format!("{outside} of 109 loaded values saturated"),
        format!("layer1.forward_weights {outside} of 80 into Q1.6"),
        "layer1.feedback_weights: drawn from the seed".to_string(),
    ] {
        assert!(warnings.contains(&w), "{w:?} in {warnings}");
    }
    // Feedback a rule does not have is ignored, and said so.
    let mut sets = vec![
        "rule.name=bp".to_string(),
        init(&fixture("numpy-savez.npz")),
    ];
    let (code, s, _, err) = train(d, "bp", &sets);
    assert_eq!(code, 0, "{err}");
    let warnings = s["warnings"].to_string();
    assert!(
        warnings.contains("layer1.feedback_weights ignored (rule bp"),
        "{warnings}"
    );
    // numpy's float64, Fortran-order, big-endian, deflated file loads as well.
    sets[1] = init(&fixture("numpy-mixed.npz"));
    sets[0] = "rule.name=dtp".into();
    let (code, s, _, err) = train(d, "mixed", &sets);
    assert_eq!(code, 0, "{err}");
    assert_eq!(s["init"]["tensors"].as_array().unwrap().len(), 4);
    let mixed = InitFile::read(&fixture("numpy-mixed.npz")).unwrap();
    assert_eq!(s["init"]["fnv1a64"], mixed.fnv1a64);
}
