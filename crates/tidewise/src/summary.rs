//! What a training run reports: `outcome.json` (both arms' outcome), `curves.csv`, `curves.svg` and the table.

use serde_json::{json, Value};
use tidewise_core::backend::FixedConfig;
use tidewise_core::class::Class;

use crate::arms::{ArmResult, Comparison};
use crate::plot::{self, Panel, Series};
use crate::spec::{Design, Spec};

fn arm_json(a: &ArmResult) -> Value {
    json!({
        "test_accuracy": a.test_accuracy,
        "initial_test_accuracy": a.initial_test_accuracy,
        "train_loss": a.train_loss,
        "samples_per_second": a.samples_per_second,
        "lost_updates": a.lost_updates,
        "saturations": a.saturations,
        "updates": a.updates,
        "data_saturations": a.data_saturations,
        "digest": a.digest,
        "lost_by_layer": a.lost_by_layer,
        "saturations_by_class": a
            .saturations_by_class
            .iter()
            .map(|(k, v)| (k.clone(), json!(v)))
            .collect::<serde_json::Map<String, Value>>(),
        "init_saturations": a.init.iter().map(|l| l.saturated).sum::<u64>(),
    })
}

/// Which file a run started from, and what was loaded (null without `net.init`).
fn init_json(spec: &Spec, cmp: &Comparison) -> Value {
    let Some(path) = &spec.net.init else {
        return Value::Null;
    };
    json!({
        "path": path.display().to_string(),
        "fnv1a64": cmp.init_fnv1a64,
        "tensors": cmp.fixed.init.iter().map(|l| json!({
            "name": l.name,
            "values": l.values,
            "saturated_fixed": l.saturated,
        })).collect::<Vec<_>>(),
    })
}

/// The per-layer formats of class `c`, in layer order, joined by `|` (e.g. `Q1.6|Q0.7`);
/// `None` for a class without per-layer formats.
pub fn layer_label(cfg: &FixedConfig, c: Class) -> Option<String> {
    let list: Vec<String> = cfg
        .layers
        .of(c)?
        .iter()
        .flatten()
        .map(|f| f.to_string())
        .collect();
    (!list.is_empty()).then(|| list.join("|"))
}

/// The formats of a design by class name, in Q notation. A class with per-layer formats
/// shows them joined by `|` as its format, lists them under `layers` (in the order of the
/// network's sizes: from layer 1 for weights and biases, from the input for activations)
/// and gives its widest word as `word_bits`; its `class_format` is the one its global values
/// (for activations: the constants) use.
pub fn formats_json(design: &Design) -> Value {
    let mut m = serde_json::Map::new();
    let cfg = &design.fixed;
    for c in Class::ALL {
        if c == Class::Acc {
            continue;
        }
        let f = cfg.classes[c.index()];
        let mut entry = json!({"format": f.format.to_string(), "word_bits": f.format.word(), "frac_bits": f.format.frac(), "rounding": f.rounding.name()});
        if let (Some(label), Some(list)) = (layer_label(cfg, c), cfg.layers.of(c)) {
            entry["format"] = json!(label);
            entry["class_format"] = json!(f.format.to_string());
            entry["word_bits"] = json!(cfg.widest_word(c));
            entry["layers"] = json!(list
                .iter()
                .flatten()
                .map(|f| json!({"format": f.to_string(), "word_bits": f.word(), "frac_bits": f.frac()}))
                .collect::<Vec<_>>());
        }
        m.insert(c.name().into(), entry);
    }
    m.insert(
        "accumulator".into(),
        json!({"word_bits": design.fixed.acc_bits, "overflow": format!("{:?}", design.fixed.acc_overflow).to_lowercase()}),
    );
    m.insert("rate_as_shift".into(), json!(design.rate_shift));
    Value::Object(m)
}

/// The per-run result file: both arms' outcome, beside `curves.csv`.
pub const OUTCOME_FILE: &str = "outcome.json";

/// The name earlier versions gave [`OUTCOME_FILE`]; the report refuses it with a hint.
pub const LEGACY_OUTCOME_FILE: &str = "summary.json";

/// The contents of [`OUTCOME_FILE`].
pub fn outcome_json(spec: &Spec, design: &Design, cmp: &Comparison) -> Value {
    let mut bytes = serde_json::Map::new();
    let mut bits = serde_json::Map::new();
    for (name, m) in cmp.memory.rows() {
        bytes.insert(name.into(), json!(m.bytes));
        bits.insert(name.into(), json!(m.bits));
    }
    bytes.insert("total".into(), json!(cmp.memory.total));
    bits.insert("total".into(), json!(cmp.memory.total_bits));
    json!({
        "spec": spec.to_json(),
        "spec_hash": spec.hash(),
        "design": formats_json(design),
        "arms": { "fixed": arm_json(&cmp.fixed), "float": arm_json(&cmp.float) },
        "init": init_json(spec, cmp),
        "accuracy_gap_points": cmp.gap_points(),
        "memory_bytes": Value::Object(bytes),
        "memory_bits": Value::Object(bits),
        "memory_container_bytes": cmp.memory.container_bytes,
        "warnings": cmp.warnings,
    })
}

/// `curves.csv`: one row per epoch and arm.
pub fn curves_csv(cmp: &Comparison) -> String {
    let mut s =
        String::from("epoch,arm,train_loss,test_accuracy,saturations,lost_updates,seconds\n");
    for (arm, r) in [("fixed", &cmp.fixed), ("float", &cmp.float)] {
        for e in &r.epochs {
            s.push_str(&format!(
                "{},{arm},{},{},{},{},{:.6}\n",
                e.epoch, e.train_loss, e.test_accuracy, e.saturations, e.lost_updates, e.seconds
            ));
        }
    }
    s
}

fn series(
    name: &str,
    color: (u8, u8, u8),
    dashed: bool,
    a: &ArmResult,
    f: impl Fn(&crate::arms::EpochRow) -> f64,
) -> Series {
    Series {
        name: name.into(),
        color,
        dashed,
        points: a
            .epochs
            .iter()
            .map(|e| (f64::from(e.epoch), f(e)))
            .collect(),
    }
}

/// `curves.svg`: accuracy and loss of both arms on shared axes, and lost updates per epoch.
pub fn curves_svg(title: &str, cmp: &Comparison) -> Result<String, String> {
    let both = |f: &dyn Fn(&crate::arms::EpochRow) -> f64| {
        vec![
            series("fixed", plot::FIXED, false, &cmp.fixed, f),
            series("float", plot::FLOAT, true, &cmp.float, f),
        ]
    };
    let panels = [
        Panel {
            title: "test accuracy".into(),
            x_label: "epoch".into(),
            y_label: "accuracy".into(),
            series: both(&|e| e.test_accuracy),
            log_y: false,
        },
        Panel {
            title: "training loss (½‖h − y‖²)".into(),
            x_label: "epoch".into(),
            y_label: "mean loss".into(),
            series: both(&|e| e.train_loss),
            log_y: true,
        },
        Panel {
            title: "updates lost to rounding (share of non-zero updates)".into(),
            x_label: "epoch".into(),
            y_label: "lost / attempted".into(),
            series: both(&|e| e.lost_updates as f64 / e.updates.max(1) as f64),
            log_y: true,
        },
        Panel {
            title: "saturation events".into(),
            x_label: "epoch".into(),
            y_label: "events per epoch".into(),
            series: vec![series("fixed", plot::FIXED, false, &cmp.fixed, |e| {
                e.saturations as f64
            })],
            log_y: false,
        },
    ];
    plot::render(title, &panels, 2)
}

/// The compact table printed after a run.
pub fn table(spec: &Spec, design: &Design, cmp: &Comparison) -> String {
    let mut s = String::new();
    s.push_str(&format!(
        "rule {}  net {:?}  epochs {}  seed {}\n",
        spec.rule.name, spec.net.hidden, spec.run.epochs, spec.run.seed
    ));
    let per_layer: Vec<String> = tidewise_core::backend::LayerFormats::CLASSES
        .iter()
        .filter_map(|&c| layer_label(&design.fixed, c).map(|l| format!("{} {l}", c.name())))
        .collect();
    if !per_layer.is_empty() {
        s.push_str(&format!("per-layer formats: {}\n", per_layer.join("  ")));
    }
    s.push_str("arm    test acc  train loss  samples/s   lost updates   saturations\n");
    for (name, a) in [("fixed", &cmp.fixed), ("float", &cmp.float)] {
        s.push_str(&format!(
            "{name:<6} {:>7.2}%  {:>10.5}  {:>9.0}  {:>13}  {:>12}\n",
            100.0 * a.test_accuracy,
            a.train_loss,
            a.samples_per_second,
            a.lost_updates,
            a.saturations
        ));
    }
    s.push_str(&format!(
        "gap (float - fixed): {:+.2} points   memory: {} bytes ({} bits)\n",
        cmp.gap_points(),
        cmp.memory.total,
        cmp.memory.total_bits
    ));
    if let Some(path) = &spec.net.init {
        s.push_str(&format!(
            "started from {}: test acc before training fixed {:.2}%, float {:.2}%\n",
            path.display(),
            100.0 * cmp.fixed.initial_test_accuracy,
            100.0 * cmp.float.initial_test_accuracy
        ));
    }
    for w in &cmp.warnings {
        s.push_str(&format!("warning: {w}\n"));
    }
    s
}
