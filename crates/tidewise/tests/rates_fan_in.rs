//! Forward rates that scale with the network: a wide input layer learns at `η / 2^s`,
//! `s = round(log2(fan_in / rule.lr_fan_in))` above the reference fan-in.
//!
//! The data are invented and generated here (no file ships): an invented mat of 28 × 28
//! light sensors (784 features, or 32 × 32 = 1024) under which one of four objects lies; each
//! object has a fixed random brightness pattern in [0, 1], each reading adds uniform noise.
//! The classes are far apart, so a learner that stays finite learns them.
//!
//! The per-sample change of a unit's pre-activation under the delta rule is
//! `η δ ‖h_{l−1}‖²` (a fact of the trade, from `ΔW = η δ hᵀ`), and `‖x‖²` of 784 features in
//! [0, 1] is about 784/3, twelve times that of the 64-pixel digits the default rate was
//! chosen on: with the default rate and no scaling the float arm diverges in the first epoch.

use std::fmt::Write as _;
use std::path::Path;

use tidewise::arms::{self, NoObserver, RunError};
use tidewise::spec;
use tidewise_core::network::fan_in_shift;

/// `samples` rows of `features` sensor readings and a label column, written to `path`.
fn write_mat(path: &Path, features: usize, samples: usize, seed: u64) {
    let mut s = seed;
    let mut next = move || {
        // xorshift64 ("Xorshift RNGs", Journal of Statistical Software 8(14), 2003;
        // docs/references.md [27]).
        s ^= s << 13;
        s ^= s >> 7;
        s ^= s << 17;
        (s >> 11) as f64 / (1u64 << 53) as f64
    };
    let objects = ["cup", "key", "phone", "wallet"];
    let patterns: Vec<Vec<f64>> = (0..objects.len())
        .map(|_| (0..features).map(|_| next()).collect())
        .collect();
    let mut text = String::new();
    for j in 0..features {
        write!(text, "s{j},").unwrap();
    }
    text.push_str("object\n");
    for i in 0..samples {
        let c = i % objects.len();
        for &p in &patterns[c] {
            let v = (0.7 * p + 0.3 * next()).clamp(0.0, 1.0);
            write!(text, "{v:.4},").unwrap();
        }
        text.push_str(objects[c]);
        text.push('\n');
    }
    std::fs::write(path, text).unwrap();
}

fn spec_text(path: &Path, hidden: &str) -> String {
    format!(
        "# Invented demo: a light-sensor mat telling four objects apart.\n\
         [data]\nsource = \"csv\"\npath = {:?}\nlabel = \"object\"\ntest_fraction = 0.25\n\
         [net]\nhidden = {hidden}\n[rule]\nname = \"bp\"\nwarmup_epochs = 0\n[run]\nepochs = 2\nseed = 1\n",
        path.display().to_string()
    )
}

/// `round(log2(n / r))` for `n > r` (else 0) against the standard library's `f64` `log2`
/// (a general-purpose reference; no ratio here lies within 10⁻⁹ of a rounding boundary, which
/// the test checks).
#[test]
fn fan_in_shift_is_the_rounded_log_ratio() {
    assert_eq!(fan_in_shift(784, 0), 0, "0 turns the scaling off");
    for r in [1u16, 16, 64, 100] {
        for n in 1usize..=4096 {
            let x = (n as f64 / f64::from(r)).log2();
            if (x - x.floor() - 0.5).abs() < 1e-9 {
                continue;
            }
            let expect = if x > 0.0 { x.round() as u32 } else { 0 };
            assert_eq!(fan_in_shift(n, r), expect, "fan-in {n}, reference {r}");
        }
    }
    // The layers the defaults scale: digits and pump keep η; a 28 × 28 input gets η/16.
    for (n, s) in [
        (16, 0),
        (64, 0),
        (90, 0),
        (91, 1),
        (256, 2),
        (512, 3),
        (784, 4),
        (1024, 4),
    ] {
        assert_eq!(fan_in_shift(n, 64), s, "fan-in {n}");
    }
}

/// The failure fan-in scaling prevents (training on wide inputs diverging at the default rate),
/// reproduced without the scaling, and its absence with the default.
#[test]
fn wide_inputs_train_stably_at_the_default_rate() {
    let dir = tempfile::tempdir().unwrap();
    for (features, hidden) in [(784, "[256]"), (784, "[512, 512]"), (1024, "[256]")] {
        let path = dir.path().join(format!("mat{features}.csv"));
        write_mat(&path, features, 320, 7);
        let text = spec_text(&path, hidden);

        // No scaling: the default rate diverges in the float arm within the first epoch.
        let (spec, design) = spec::parse(&text, &["rule.lr_fan_in=0".into()]).unwrap();
        let prepared = arms::prepare(&spec).unwrap();
        match arms::run_float(
            &spec,
            &design,
            &prepared,
            &mut NoObserver,
            &mut |_, _, _| {},
        ) {
            Err(RunError::NonFinite { epoch, step, .. }) => {
                assert_eq!(epoch, 1, "{features} {hidden}");
                println!("{features}-{hidden}, no scaling: non-finite at sample {step} of epoch 1");
            }
            other => panic!(
                "{features} {hidden}: expected divergence without scaling, got {:?}",
                other.map(|r| r.test_accuracy)
            ),
        }

        // The default reference fan-in (64): both arms stay finite and learn the classes.
        let (spec, design) = spec::parse(&text, &[]).unwrap();
        assert_eq!(design.hyper.lr_fan_in, 64);
        let cmp = arms::run(
            &spec,
            &design,
            &prepared,
            &mut NoObserver,
            &mut |_, _, _| {},
        )
        .unwrap_or_else(|e| panic!("{features} {hidden}: {e}"));
        for (arm, r) in [("float", &cmp.float), ("fixed", &cmp.fixed)] {
            assert!(
                r.epochs.iter().all(|e| e.train_loss.is_finite()),
                "{features} {hidden} {arm}"
            );
            // Four classes: chance is 0.25.
            assert!(
                r.test_accuracy >= 0.9,
                "{features} {hidden} {arm}: test accuracy {}",
                r.test_accuracy
            );
            println!(
                "{features}-{hidden} {arm}: losses {:?}, test accuracy {:.3}",
                r.epochs.iter().map(|e| e.train_loss).collect::<Vec<_>>(),
                r.test_accuracy
            );
        }
    }
}

#[test]
fn a_reference_fan_in_out_of_range_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("mat.csv");
    let text = spec_text(&path, "[8]");
    let err = spec::parse(&text, &["rule.lr_fan_in=70000".into()]).unwrap_err();
    let msg = err.to_string();
    assert!(
        msg.contains("rule.lr_fan_in") && msg.contains("70000") && msg.contains("1 to 65535"),
        "{msg}"
    );
    let err = spec::parse(&text, &["rule.lr_fan_in=-1".into()]).unwrap_err();
    let msg = err.to_string();
    assert!(
        msg.contains("rule.lr_fan_in") && msg.contains("-1") && msg.contains("0 (no scaling)"),
        "{msg}"
    );
}
