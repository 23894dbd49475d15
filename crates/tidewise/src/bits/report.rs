//! What `tidewise bits` writes: the table, `recommendation.json`, `bits.svg`, `runs.csv`.

use std::fmt::Write as _;

use serde_json::{json, Value};

use super::{Bound, Knob, Recommendation, Round};
use crate::energy::{EnergyEstimate, EnergyTable, OpCounts, PhaseCounts, PHASES};
use crate::memory::Memory;
use crate::plot::{self, Band, Panel, Series};
use crate::spec::Spec;

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

fn bound_line(b: &Bound) -> String {
    format!(
        "mean {:+.2}, sd {:.2}, one-sided {:.2}% upper bound {:+.2}, {} replicates",
        b.mean,
        b.sd,
        100.0 * b.level,
        b.upper,
        b.n
    )
}

/// The text table printed on stdout.
pub fn table(rec: &Recommendation, x: &Extras<'_>) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "bits: rule {}, rounding {}, tolerance {:.2} points at {:.0}% confidence ({} round(s) at most, each at {:.2}%)",
        x.rule,
        rec.rounding,
        rec.tolerance,
        100.0 * rec.confidence,
        rec.max_rounds,
        100.0 * rec.round_level
    );
    let _ = writeln!(s, "splits: {}", rec.splits_note);
    let fl: Vec<String> = rec
        .float_accuracy
        .iter()
        .map(|a| format!("{a:.2}%"))
        .collect();
    let _ = writeln!(
        s,
        "float reference on the {} search replicates: {} (mean {:.2}%)",
        rec.search_replicates.len(),
        fl.join(" "),
        rec.scan_float
    );
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
        let gap = match (&c.gap, c.used, c.held) {
            (_, false, _) => "   (not used by the rule)".to_string(),
            (_, _, true) => "   (held)".to_string(),
            (Some(g), _, _) => stats(g),
            (None, _, _) => "        -".to_string(),
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
        "{:<17} {:<24} {}",
        "joint (search)",
        "all classes at once",
        stats(&rec.search_gap)
    );
    let _ = writeln!(
        s,
        "(search gaps in points, float − fixed, over the search replicates; a class's own row has the other classes at the fixed reference; sat/upd: saturations per weight update, lost: updates rounded away)"
    );
    for r in &rec.rounds {
        let _ = writeln!(
            s,
            "confirmation round {}: {}: {} → {}",
            r.round,
            r.point,
            bound_line(&r.bound),
            if r.accepted {
                "accepted"
            } else {
                "not accepted"
            }
        );
    }
    let _ = writeln!(s, "decision: {}", decision_text(rec));
    if let Some(r) = &rec.recheck {
        let _ = writeln!(
            s,
            "re-check on further fresh replicates (not used to decide): {}",
            bound_line(&r.bound)
        );
    }
    for n in &rec.notes {
        let _ = writeln!(s, "  - {n}");
    }
    let r = &rec.runs;
    let _ = writeln!(
        s,
        "runs: {} fixed-arm runs for the search, {} for confirmation, {} for the re-check (+{} for the plot, {} float); the full grid over the same candidates and search replicates would take {} fixed-arm runs (one class at a time: {})",
        r.search_fixed, r.confirm_fixed, r.recheck_fixed, r.scan_fixed, r.float, r.full_grid, r.one_class_grid
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
    s
}

/// The decision in one sentence.
pub fn decision_text(rec: &Recommendation) -> String {
    match rec.decision() {
        Some(r) if rec.accepted => format!(
            "ACCEPTED in round {} of {}: the mean paired gap is at most {:.2} points with {:.0}% confidence (upper bound {:+.2}, mean {:+.2}, {} confirmation replicates never used by the search)",
            r.round,
            rec.max_rounds,
            rec.tolerance,
            100.0 * rec.confidence,
            r.bound.upper,
            r.bound.mean,
            r.bound.n
        ),
        Some(r) => format!(
            "NOT ACCEPTED after {} round(s): the last design's upper bound {:+.2} is above the tolerance {:.2}",
            rec.rounds.len(),
            r.bound.upper,
            rec.tolerance
        ),
        None => "no confirmation was made".into(),
    }
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

fn round_json(r: &Round) -> Value {
    json!({
        "round": r.round,
        "design": r.point,
        "replicates": r.replicates,
        "runs": r.bound.n,
        "mean_gap_points": r.bound.mean,
        "sd_points": r.bound.sd,
        "level": r.bound.level,
        "t_quantile": r.bound.t,
        "upper_bound_points": r.bound.upper,
        "accepted": r.accepted,
        "gap": r.gap,
    })
}

/// `recommendation.json` (nothing in it depends on the clock, so a resumed run writes the
/// same bytes).
pub fn recommendation_json(rec: &Recommendation, x: &Extras<'_>) -> Value {
    let mut v = json!({
        "spec": x.spec_path,
        "spec_hash": x.spec_hash,
        "rule": x.rule,
        "rounding": rec.rounding,
        "tolerance_points": rec.tolerance,
        "confidence": rec.confidence,
        "max_rounds": rec.max_rounds,
        "round_level": rec.round_level,
        "test_samples": rec.test_samples,
        "vary_splits": rec.vary_splits,
        "splits_note": rec.splits_note,
        "search_replicates": rec.search_replicates,
        "float_accuracy_percent": rec.float_accuracy,
        "observed_max": rec.ranges,
        "reference": rec.reference.to_string(),
    });
    for c in &rec.classes {
        v[c.class.name()] = json!({
            "used": c.used,
            "searched": c.searched,
            "held": c.held,
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
    if !d.layers.is_empty() {
        // The formats of every layer, as the recommended spec's arrays give them.
        let mut m = serde_json::Map::new();
        for (c, name) in [
            (tidewise_core::class::Class::Forward, "forward_weights"),
            (tidewise_core::class::Class::Bias, "biases"),
            (tidewise_core::class::Class::Act, "activations"),
        ] {
            let list: Vec<String> = d
                .layers
                .of(c)
                .into_iter()
                .flatten()
                .flatten()
                .map(|f| f.to_string())
                .collect();
            if !list.is_empty() {
                m.insert(name.into(), json!(list));
            }
        }
        v["layer_formats"] = Value::Object(m);
    }
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
    v["accepted"] = json!(rec.accepted);
    v["within_tolerance"] = json!(rec.accepted);
    v["decision"] = json!(decision_text(rec));
    if let Some(r) = rec.decision() {
        v["accuracy_gap_points"] = json!(r.bound.mean);
        v["upper_bound_points"] = json!(r.bound.upper);
        v["confirmation_runs"] = json!(r.bound.n);
        v["confirmation_level"] = json!(r.bound.level);
    }
    v["confirmation_rounds"] = json!(rec.rounds.iter().map(round_json).collect::<Vec<_>>());
    v["recheck"] = rec.recheck.as_ref().map_or(Value::Null, round_json);
    v["search_gap"] = json!(rec.search_gap);
    v["notes"] = json!(rec.notes);
    v["runs"] = json!(rec.runs.search_fixed + rec.runs.confirm_fixed + rec.runs.recheck_fixed);
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
    v
}

/// The recommended design as a complete spec: `spec` (data paths made absolute) with the
/// chosen formats filled in, as TOML that `tidewise train` accepts as it is.
pub fn recommended_spec(spec: &Spec, rec: &Recommendation) -> Result<String, String> {
    let spec = super::absolute_paths(spec);
    let mut table: toml::Table = toml::from_str(&spec.to_toml()).map_err(|e| e.to_string())?;
    for (k, v) in rec.point.spec_values() {
        crate::spec::set_key(&mut table, k, &v.to_string()).map_err(|e| e.to_string())?;
    }
    let body = toml::to_string(&table).map_err(|e| e.to_string())?;
    let head = format!(
        "# The design `tidewise bits` recommends for {} ({}).\n# {}\n# Train it: tidewise train THIS_FILE\n\n",
        spec.rule.name,
        rec.point,
        decision_text(rec).replace('\n', " ")
    );
    Ok(head + &body)
}

/// `bits.svg`: mean fixed-arm accuracy over the search replicates against word bits, one
/// panel per class, with the replicates' range shaded; the float reference and the tolerance
/// line dashed.
pub fn svg(title: &str, rec: &Recommendation) -> Result<String, String> {
    let mut panels = Vec::new();
    let order: Vec<Knob> = rec.classes.iter().map(|c| c.class).collect();
    for k in order {
        let series: Vec<&super::Scan> = rec.scans.iter().filter(|s| s.class == k).collect();
        if series.is_empty() {
            continue;
        }
        let xs: Vec<f64> = series
            .iter()
            .flat_map(|s| s.points.iter().map(|p| f64::from(p.word_bits)))
            .collect();
        let (x0, x1) = (
            xs.iter().copied().fold(f64::INFINITY, f64::min),
            xs.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        );
        let color = |r: &str| {
            if r == "nearest" {
                plot::PALETTE[2]
            } else {
                plot::FIXED
            }
        };
        let n = rec.search_replicates.len();
        let mut lines: Vec<Series> = series
            .iter()
            .map(|s| Series {
                name: format!("fixed, {} rounding: mean of {n} (band: range)", s.rounding),
                color: color(s.rounding),
                dashed: false,
                points: s
                    .points
                    .iter()
                    .map(|p| (f64::from(p.word_bits), p.mean))
                    .collect(),
            })
            .collect();
        let bands: Vec<Band> = series
            .iter()
            .map(|s| Band {
                color: color(s.rounding),
                points: s
                    .points
                    .iter()
                    .map(|p| (f64::from(p.word_bits), p.min, p.max))
                    .collect(),
            })
            .collect();
        lines.push(Series {
            name: "float reference (mean)".into(),
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
        panels.push((
            Panel {
                title: k.name().to_string(),
                x_label,
                y_label: "test accuracy (%)".into(),
                series: lines,
                log_y: false,
            },
            bands,
        ));
    }
    plot::render_banded(title, &panels, 2)
}

/// `runs.csv`: every fixed-arm run the command used, with its paired float run.
pub fn runs_csv(rec: &Recommendation) -> String {
    let mut s = String::from(
        "purpose,seed,split_seed,forward_weights,biases,feedback_weights,activations,accumulator,rounding,fixed_accuracy,float_accuracy,gap_points,fixed_test_loss,float_test_loss,saturations,lost_updates,updates\n",
    );
    for r in &rec.run_log {
        let p = &r.point;
        let _ = writeln!(
            s,
            "{},{},{},{},{},{},{},{},{},{:.4},{:.4},{:.4},{:.6},{:.6},{},{},{}",
            match r.purpose {
                super::Purpose::Search => "search",
                super::Purpose::Scan => "scan",
                super::Purpose::Confirm => "confirm",
                super::Purpose::Recheck => "recheck",
            },
            r.rep.seed,
            r.rep.split,
            p.forward,
            p.bias,
            p.feedback,
            p.act,
            p.acc,
            p.rounding.name(),
            r.fixed.accuracy(),
            r.float.accuracy(),
            r.gap(),
            r.fixed.loss,
            r.float.loss,
            r.fixed.saturations,
            r.fixed.lost_updates,
            r.fixed.updates
        );
    }
    s
}
