//! What `tidewise bits` writes: the table, `recommendation.json`, `bits.svg`, `runs.csv`.

use std::fmt::Write as _;

use serde_json::{json, Value};

use super::{Knob, Recommendation, KNOBS};
use crate::energy::{EnergyEstimate, EnergyTable, OpCounts, PhaseCounts, PHASES};
use crate::memory::Memory;
use crate::plot::{self, Panel, Series};

/// Figures computed from the recommended design around the search.
pub struct Extras<'a> {
    /// The spec file as given.
    pub spec_path: &'a str,
    /// The spec's hash.
    pub spec_hash: &'a str,
    /// The rule's name.
    pub rule: &'a str,
    /// Memory of the recommended design.
    pub memory: Memory,
    /// Operations of one training sample.
    pub ops: &'a OpCounts,
    /// The cost table.
    pub table: &'a EnergyTable,
    /// Energy of the recommended design.
    pub fixed_energy: &'a EnergyEstimate,
    /// Energy of the float arm.
    pub float_energy: &'a EnergyEstimate,
    /// Wall-clock seconds of the whole command.
    pub seconds: f64,
}

fn stats(g: &super::GapStats) -> String {
    format!(
        "{:>+8.2} {:>6.2} {:>+7.2} {:>+7.2} {:>7.3}% {:>5.1}%",
        g.mean,
        g.std,
        g.min,
        g.max,
        100.0 * g.saturations_per_update,
        100.0 * g.lost_share
    )
}

/// The text table printed on stdout.
pub fn table(rec: &Recommendation, x: &Extras<'_>) -> String {
    let mut s = String::new();
    let seeds: Vec<String> = rec.seeds.iter().map(|s| s.to_string()).collect();
    let _ = writeln!(
        s,
        "bits: rule {}, rounding {}, tolerance {:.2} points, seeds {}",
        x.rule,
        rec.rounding,
        rec.tolerance,
        seeds.join(", ")
    );
    let fl: Vec<String> = rec
        .float_accuracy
        .iter()
        .map(|a| format!("{a:.2}%"))
        .collect();
    let mean = rec.float_accuracy.iter().sum::<f64>() / rec.float_accuracy.len().max(1) as f64;
    let _ = writeln!(s, "float reference: {} (mean {mean:.2}%)", fl.join(" "));
    let _ = writeln!(
        s,
        "fixed reference (the other classes while one is searched): {}",
        rec.reference
    );
    let _ = writeln!(
        s,
        "{:<17} {:<9} {:>4} {:>4} {:>4} {:>8} {:>6} {:>7} {:>7} {:>8} {:>6}",
        "class",
        "format",
        "word",
        "int",
        "frac",
        "gap mean",
        "std",
        "min",
        "max",
        "sat/upd",
        "lost"
    );
    for c in &rec.classes {
        let gap = match (&c.gap, c.used) {
            (_, false) => "   (not used by the rule)".to_string(),
            (Some(g), _) => stats(g),
            (None, _) => "        -".to_string(),
        };
        let _ = writeln!(
            s,
            "{:<17} {:<9} {:>4} {:>4} {:>4} {gap}",
            c.class.name(),
            c.format,
            c.word_bits,
            c.int_bits,
            c.frac_bits
        );
    }
    let _ = writeln!(
        s,
        "{:<17} {:<24} {}  {}",
        "joint",
        "all classes at once",
        stats(&rec.joint),
        if rec.within_tolerance {
            "within the tolerance"
        } else {
            "OUTSIDE the tolerance"
        }
    );
    let _ = writeln!(
        s,
        "(gaps in points, float − fixed, over the seeds; sat/upd: saturations per weight update, lost: updates rounded away; a class's own row has the other classes at the fixed reference, the accumulator's row is the joint design)"
    );
    for n in &rec.joint_notes {
        let _ = writeln!(s, "  - {n}");
    }
    let r = &rec.runs;
    let _ = writeln!(
        s,
        "runs: {} fixed-arm runs for the search (+{} for the plot, {} float); the full grid over the same candidates would take {} fixed-arm runs (one class at a time: {})",
        r.search_fixed, r.scan_fixed, r.float, r.full_grid, r.one_class_grid
    );
    let m = &x.memory;
    let _ = writeln!(
        s,
        "memory of the recommended design (bits: the words; bytes: {}-byte containers):",
        m.container_bytes
    );
    let _ = writeln!(
        s,
        "  {:<17} {:>8} {:>5} {:>9} {:>8}",
        "class", "values", "word", "bits", "bytes"
    );
    for (name, c) in m.rows() {
        if c.values == 0 {
            continue;
        }
        let _ = writeln!(
            s,
            "  {name:<17} {:>8} {:>5} {:>9} {:>8}",
            c.values, c.word_bits, c.bits, c.bytes
        );
    }
    let _ = writeln!(
        s,
        "  {:<17} {:>8} {:>5} {:>9} {:>8}   ({} bytes packed)",
        "total",
        "",
        "",
        m.total_bits,
        m.total,
        m.total_bits.div_ceil(8)
    );
    let (fe, fl) = (x.fixed_energy, x.float_energy);
    let _ = writeln!(
        s,
        "energy per training sample, pJ ({}; {}):",
        x.table.name, x.table.source
    );
    let _ = writeln!(
        s,
        "  {:<22} {:>10} {:>10} {:>10} {:>10}  sram",
        "", "multiply", "add", "memory", "total"
    );
    for (name, e) in [("fixed (recommended)", fe), ("float arm (32-bit)", fl)] {
        let _ = writeln!(
            s,
            "  {name:<22} {:>10.1} {:>10.1} {:>10.1} {:>10.1}  {} KiB row{}",
            e.multiply_pj,
            e.add_pj,
            e.memory_pj,
            e.total_pj,
            e.sram_kib,
            if e.beyond_table {
                " (storage exceeds the table's largest SRAM)"
            } else {
                ""
            }
        );
    }
    if fe.total_pj > 0.0 {
        let _ = writeln!(s, "  float / fixed: {:.1}×", fl.total_pj / fe.total_pj);
    }
    let t = x.ops.total();
    let _ = writeln!(
        s,
        "  one sample: {} MACs, {} other multiplies, {} additions (accumulation included), {} parameter reads, {} writes",
        t.macs(),
        t.multiplies() - t.macs(),
        t.additions(),
        t.reads.iter().sum::<u64>(),
        t.writes.iter().sum::<u64>()
    );
    if !fe.interpolated.is_empty() {
        let _ = writeln!(
            s,
            "  by the scaling law, not published points: {}",
            fe.interpolated.join("; ")
        );
    }
    let _ = writeln!(s, "wall time {:.1} s", x.seconds);
    s
}

fn ops_json(ops: &OpCounts) -> Value {
    let phase = |p: &PhaseCounts| {
        let pairs = |t: &[[u64; crate::energy::OPERANDS]; crate::energy::OPERANDS]| {
            PhaseCounts::entries(t)
                .into_iter()
                .map(|(a, b, n)| json!({"a": a.name(), "b": b.name(), "count": n}))
                .collect::<Vec<_>>()
        };
        let per_class = |v: &[u64; 8]| {
            tidewise_core::class::Class::ALL
                .iter()
                .filter(|c| v[c.index()] > 0)
                .map(|c| (c.name().to_string(), json!(v[c.index()])))
                .collect::<serde_json::Map<_, _>>()
        };
        json!({
            "macs": p.macs(),
            "multiplies": p.multiplies(),
            "additions": p.additions(),
            "mac": pairs(&p.mac),
            "mul": pairs(&p.mul),
            "add": pairs(&p.add),
            "reads": per_class(&p.reads),
            "writes": per_class(&p.writes),
        })
    };
    let mut by = serde_json::Map::new();
    for p in PHASES {
        by.insert(p.name().into(), phase(ops.phase(p)));
    }
    json!({
        "feedback_steps": ops.feedback_steps,
        "total": phase(&ops.total()),
        "phases": by,
    })
}

/// `recommendation.json`.
pub fn recommendation_json(rec: &Recommendation, x: &Extras<'_>) -> Value {
    let mut v = json!({
        "spec": x.spec_path,
        "spec_hash": x.spec_hash,
        "rule": x.rule,
        "rounding": rec.rounding,
        "tolerance_points": rec.tolerance,
        "seeds": rec.seeds,
        "float_accuracy_percent": rec.float_accuracy,
        "observed_max": rec.ranges,
        "reference": rec.reference.to_string(),
    });
    for c in &rec.classes {
        v[c.class.name()] = json!({
            "used": c.used,
            "searched": c.searched,
            "format": c.format,
            "word_bits": c.word_bits,
            "int_bits": c.int_bits,
            "frac_bits": c.frac_bits,
            "observed_max": c.observed_max,
            "gap_points": c.gap,
            "note": c.note,
        });
    }
    let d = &rec.design.fixed;
    let held: serde_json::Map<String, Value> = [
        tidewise_core::class::Class::Rate,
        tidewise_core::class::Class::Step,
        tidewise_core::class::Class::Noise,
    ]
    .iter()
    .map(|c| {
        (
            c.name().to_string(),
            json!(d.classes[c.index()].format.to_string()),
        )
    })
    .collect();
    v["held_at_spec"] = Value::Object(held);
    v["accuracy_gap_points"] = json!(rec.joint.mean);
    v["accuracy_gap"] = json!(rec.joint);
    v["within_tolerance"] = json!(rec.within_tolerance);
    v["joint_notes"] = json!(rec.joint_notes);
    v["runs"] = json!(rec.runs.search_fixed);
    v["runs_detail"] = json!(rec.runs);
    v["full_grid_runs"] = json!(rec.runs.full_grid);
    v["memory_bytes"] = json!(x.memory.total);
    v["memory_bits"] = json!(x.memory.total_bits);
    v["memory_bytes_packed"] = json!(x.memory.total_bits.div_ceil(8));
    v["memory"] = json!(x.memory);
    v["energy_pj_per_sample"] = json!(x.fixed_energy.total_pj);
    v["energy"] = json!({
        "table": x.table,
        "fixed": x.fixed_energy,
        "float32": x.float_energy,
        "ops_per_sample": ops_json(x.ops),
    });
    v["steps"] = json!(rec.steps);
    v["scans"] = json!(rec.scans);
    v["seconds"] = json!(x.seconds);
    v
}

/// `bits.svg`: accuracy against word bits, one panel per class, nearest and stochastic
/// rounding as two lines, the float reference and the tolerance line dashed.
pub fn svg(title: &str, rec: &Recommendation) -> Result<String, String> {
    let mut panels = Vec::new();
    for k in KNOBS {
        let series: Vec<&super::Scan> = rec.scans.iter().filter(|s| s.class == k).collect();
        if series.is_empty() {
            continue;
        }
        let xs: Vec<f64> = series
            .iter()
            .flat_map(|s| s.points.iter().map(|p| f64::from(p.0)))
            .collect();
        let (x0, x1) = (
            xs.iter().copied().fold(f64::INFINITY, f64::min),
            xs.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        );
        let mut lines: Vec<Series> = series
            .iter()
            .map(|s| Series {
                name: format!("fixed, {} rounding", s.rounding),
                color: if s.rounding == "nearest" {
                    plot::PALETTE[2]
                } else {
                    plot::FIXED
                },
                dashed: false,
                points: s.points.iter().map(|&(w, a)| (f64::from(w), a)).collect(),
            })
            .collect();
        lines.push(Series {
            name: "float reference".into(),
            color: plot::FLOAT,
            dashed: true,
            points: vec![(x0, rec.scan_float), (x1, rec.scan_float)],
        });
        lines.push(Series {
            name: format!("float − {:.1} points", rec.tolerance),
            color: plot::PALETTE[5],
            dashed: true,
            points: vec![
                (x0, rec.scan_float - rec.tolerance),
                (x1, rec.scan_float - rec.tolerance),
            ],
        });
        let chosen = rec.class(k).map_or(0, |c| c.word_bits);
        let x_label = if k == Knob::Accumulator {
            format!("accumulator bits (chosen {chosen})")
        } else {
            let m = rec.class(k).map_or(0, |c| c.int_bits);
            format!("word bits, {m} integer bits (chosen {chosen})")
        };
        panels.push(Panel {
            title: k.name().to_string(),
            x_label,
            y_label: "test accuracy (%)".into(),
            series: lines,
            log_y: false,
        });
    }
    plot::render(title, &panels, 2)
}

/// `runs.csv`: every fixed-arm run the command made.
pub fn runs_csv(rec: &Recommendation) -> String {
    let mut s = String::from(
        "purpose,seed,forward_weights,biases,feedback_weights,activations,accumulator,rounding,fixed_accuracy,float_accuracy,gap_points,saturations,lost_updates,updates\n",
    );
    for r in &rec.run_log {
        let p = &r.point;
        let _ = writeln!(
            s,
            "{},{},{},{},{},{},{},{},{:.6},{:.6},{:.4},{},{},{}",
            r.purpose,
            r.seed,
            p.forward,
            p.bias,
            p.feedback,
            p.act,
            p.acc,
            p.rounding.name(),
            r.outcome.fixed_accuracy,
            r.float_accuracy,
            100.0 * (r.float_accuracy - r.outcome.fixed_accuracy),
            r.outcome.saturations,
            r.outcome.lost_updates,
            r.outcome.updates
        );
    }
    s
}
