//! One self-contained HTML page from a results folder: a sweep (`runs.jsonl`, with
//! `sweep.json`), a training run (`outcome.json` and `curves.csv`) and a bit-width estimate
//! (`recommendation.json`), whichever the folder holds. Figures are inline SVG; the page
//! loads nothing and runs no script.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::Path;

use serde_json::Value;

use super::grid::{toml_to_json, Grid};
use super::heatmap::{Cell, Heatmap, Scale};
use super::store::{self, Manifest};
use super::SweepError;
pub use crate::plot::esc;
use crate::plot::{self, Panel, Series};
use crate::summary::{LEGACY_OUTCOME_FILE, OUTCOME_FILE};

/// Which grid axes the heatmaps use.
#[derive(Clone, Debug, Default)]
pub struct ReportOptions {
    /// Axis of the heatmap rows (a grid key, or an axis name `a + b`).
    pub rows: Option<String>,
    /// Axis of the heatmap columns.
    pub cols: Option<String>,
}

/// The rendered page and its figures.
#[derive(Clone, Debug)]
pub struct Report {
    /// The HTML page.
    pub html: String,
    /// `(file name, SVG)` of figures worth keeping beside the page.
    pub figures: Vec<(String, String)>,
    /// What the folder held: `sweep`, `training`, `bits`.
    pub sections: Vec<&'static str>,
}

/// One axis of a sweep as the report sees it.
#[derive(Clone, Debug)]
struct AxisView {
    keys: Vec<String>,
    /// The values of each step (JSON, one per key).
    steps: Vec<Vec<Value>>,
}

impl AxisView {
    fn name(&self) -> String {
        self.keys.join(" + ")
    }
    fn label(&self, j: usize) -> String {
        self.steps[j]
            .iter()
            .map(|v| match v {
                Value::String(s) => s.clone(),
                other => other.to_string(),
            })
            .collect::<Vec<_>>()
            .join("/")
    }
    fn step_of(&self, point: &Value) -> Option<usize> {
        self.steps.iter().position(|vs| {
            self.keys
                .iter()
                .zip(vs)
                .all(|(k, v)| point.get(k) == Some(v))
        })
    }
    fn matches(&self, name: &str) -> bool {
        self.name() == name || self.keys.iter().any(|k| k == name)
    }
}

/// The axes of a sweep: from its manifest, else from the points of its runs.
fn axes_of(manifest: Option<&Manifest>, runs: &[Value]) -> Vec<AxisView> {
    if let Some(g) = manifest.and_then(|m| Grid::from_json(&m.grid)) {
        return g
            .axes
            .iter()
            .map(|a| AxisView {
                keys: a.keys.clone(),
                steps: a
                    .values
                    .iter()
                    .map(|vs| vs.iter().map(toml_to_json).collect())
                    .collect(),
            })
            .collect();
    }
    let mut axes: BTreeMap<String, Vec<Value>> = BTreeMap::new();
    for r in runs {
        if let Some(p) = r.get("point").and_then(Value::as_object) {
            for (k, v) in p {
                let list = axes.entry(k.clone()).or_default();
                if !list.contains(v) {
                    list.push(v.clone());
                }
            }
        }
    }
    axes.into_iter()
        .map(|(k, vs)| AxisView {
            keys: vec![k],
            steps: vs.into_iter().map(|v| vec![v]).collect(),
        })
        .collect()
}

fn num(v: &Value, path: &[&str]) -> Option<f64> {
    let mut cur = v;
    for p in path {
        cur = cur.get(p)?;
    }
    cur.as_f64()
}

/// The sweep part of the page.
fn sweep_section(
    dir: &Path,
    opts: &ReportOptions,
    html: &mut String,
    figures: &mut Vec<(String, String)>,
) -> Result<(), SweepError> {
    let manifest = Manifest::read(dir)?;
    let mut runs: Vec<Value> = Vec::new();
    let mut seen = std::collections::HashSet::new();
    let scan = store::scan(&dir.join(store::RUNS), |l| {
        if seen.insert(l.hash.clone()) {
            runs.push(l.record);
        }
    })?;
    runs.sort_by_key(|r| r.get("index").and_then(Value::as_u64).unwrap_or(u64::MAX));
    let axes = axes_of(manifest.as_ref(), &runs);
    let ok: Vec<&Value> = runs
        .iter()
        .filter(|r| r.get("status").and_then(Value::as_str) == Some("ok"))
        .collect();
    let points = manifest.as_ref().map_or(runs.len(), |m| m.points);
    let _ = write!(
        html,
        "<h2>Sweep</h2><p>{} of {points} grid points have a run ({} succeeded, {} failed){}.</p>",
        runs.len(),
        ok.len(),
        runs.len() - ok.len(),
        if scan.partial > 0 {
            format!("; a cut last line of {} bytes was skipped", scan.partial)
        } else {
            String::new()
        }
    );
    if !axes.is_empty() {
        html.push_str("<table><tr><th>axis</th><th>values</th></tr>");
        for a in &axes {
            let _ = write!(
                html,
                "<tr><td><code>{}</code></td><td>{}</td></tr>",
                esc(&a.name()),
                esc(&(0..a.steps.len())
                    .map(|j| a.label(j))
                    .collect::<Vec<_>>()
                    .join(", "))
            );
        }
        html.push_str("</table>");
    }
    let find = |name: &str| -> Result<usize, SweepError> {
        axes.iter().position(|a| a.matches(name)).ok_or_else(|| {
            SweepError::Other(format!(
                "no grid axis `{name}` in {}: the axes are {}",
                dir.display(),
                axes.iter()
                    .map(|a| format!("`{}`", a.name()))
                    .collect::<Vec<_>>()
                    .join(", ")
            ))
        })
    };
    // Default axes: the two with the most values, leaving out seeds (averaged over).
    let mut order: Vec<usize> = (0..axes.len())
        .filter(|&i| axes[i].steps.len() > 1 && !axes[i].keys.iter().any(|k| k == "run.seed"))
        .collect();
    order.sort_by_key(|&i| std::cmp::Reverse(axes[i].steps.len()));
    let col = match &opts.cols {
        Some(n) => Some(find(n)?),
        None => order.first().copied(),
    };
    let row = match &opts.rows {
        Some(n) => Some(find(n)?),
        None => order.iter().copied().find(|&i| Some(i) != col),
    };
    if let (Some(r), Some(c)) = (row, col) {
        if r == c {
            return Err(SweepError::Other(format!(
                "--rows and --cols name the same axis `{}`",
                axes[r].name()
            )));
        }
    }
    if let Some(c) = col {
        let (rows, row_name): (Vec<String>, String) = match row {
            Some(r) => (
                (0..axes[r].steps.len()).map(|j| axes[r].label(j)).collect(),
                axes[r].name(),
            ),
            None => (vec!["all runs".into()], String::new()),
        };
        let cols: Vec<String> = (0..axes[c].steps.len()).map(|j| axes[c].label(j)).collect();
        let grid_of = |metric: &dyn Fn(&Value) -> Option<f64>| {
            let mut cells = vec![vec![Cell::default(); cols.len()]; rows.len()];
            for r in &runs {
                let Some(p) = r.get("point") else { continue };
                let Some(j) = axes[c].step_of(p) else {
                    continue;
                };
                let i = match row {
                    Some(ri) => match axes[ri].step_of(p) {
                        Some(i) => i,
                        None => continue,
                    },
                    None => 0,
                };
                match r.get("results").and_then(metric) {
                    Some(v) if r.get("status").and_then(Value::as_str) == Some("ok") => {
                        cells[i][j].values.push(v)
                    }
                    _ => cells[i][j].failed += 1,
                }
            }
            cells
        };
        let rest: Vec<String> = (0..axes.len())
            .filter(|&i| Some(i) != row && i != c)
            .map(|i| axes[i].name())
            .collect();
        let over = if rest.is_empty() {
            String::new()
        } else {
            format!(" (mean over {})", rest.join(", "))
        };
        let (col_name, gap_cells, acc_cells) = (
            axes[c].name(),
            grid_of(&|res| num(res, &["accuracy_gap_points"])),
            grid_of(&|res| num(res, &["fixed", "test_accuracy"]).map(|a| 100.0 * a)),
        );
        let gap_title = format!("Accuracy gap, float − fixed{over}");
        let acc_title = format!("Fixed-arm test accuracy{over}");
        let map = |title, unit, cells, scale| {
            Heatmap {
                title,
                unit,
                row_name: &row_name,
                rows: &rows,
                col_name: &col_name,
                cols: &cols,
                cells,
                scale,
            }
            .svg()
        };
        let gap = map(&gap_title, "points", &gap_cells, Scale::Diverging);
        let acc = map(&acc_title, "percent", &acc_cells, Scale::Sequential);
        html.push_str("<h3>Accuracy gap</h3><p>Positive: the fixed-point arm is behind the float arm by that many percentage points of test accuracy. Hover a cell for the run count and spread.</p>");
        html.push_str(&inline_figure(&gap));
        html.push_str("<h3>Fixed-arm accuracy</h3>");
        html.push_str(&inline_figure(&acc));
        figures.push(("sweep-gap.svg".into(), gap));
        figures.push(("sweep-accuracy.svg".into(), acc));
        // Mean accuracy per epoch for each value of the column axis.
        let mut series = Vec::new();
        for (j, label) in cols.iter().enumerate() {
            let mut sum: Vec<f64> = Vec::new();
            let mut n = 0usize;
            for r in &ok {
                let Some(p) = r.get("point") else { continue };
                if axes[c].step_of(p) != Some(j) {
                    continue;
                }
                let Some(curve) = r
                    .pointer("/results/fixed/accuracy_by_epoch")
                    .and_then(Value::as_array)
                else {
                    continue;
                };
                if sum.len() < curve.len() {
                    sum.resize(curve.len(), 0.0);
                }
                for (s, v) in sum.iter_mut().zip(curve) {
                    *s += v.as_f64().unwrap_or(0.0);
                }
                n += 1;
            }
            if n > 0 {
                series.push(Series {
                    name: label.clone(),
                    color: plot::PALETTE[j % plot::PALETTE.len()],
                    dashed: j >= plot::PALETTE.len(),
                    points: sum
                        .iter()
                        .enumerate()
                        .map(|(e, s)| ((e + 1) as f64, 100.0 * s / n as f64))
                        .collect(),
                });
            }
        }
        // The float arm does not depend on the fixed-point keys: one mean curve of all runs.
        let mut sum: Vec<f64> = Vec::new();
        let mut n = 0usize;
        for r in &ok {
            let Some(curve) = r
                .pointer("/results/float/accuracy_by_epoch")
                .and_then(Value::as_array)
            else {
                continue;
            };
            if sum.len() < curve.len() {
                sum.resize(curve.len(), 0.0);
            }
            for (s, v) in sum.iter_mut().zip(curve) {
                *s += v.as_f64().unwrap_or(0.0);
            }
            n += 1;
        }
        if n > 0 && !series.is_empty() {
            series.push(Series {
                name: "float arm, all runs".into(),
                color: (90, 90, 90),
                dashed: true,
                points: sum
                    .iter()
                    .enumerate()
                    .map(|(e, s)| ((e + 1) as f64, 100.0 * s / n as f64))
                    .collect(),
            });
        }
        if !series.is_empty() {
            let panel = Panel {
                title: format!(
                    "test accuracy by epoch: fixed arm, mean per {}; float arm dashed",
                    axes[c].name()
                ),
                x_label: "epoch".into(),
                y_label: "accuracy (%)".into(),
                series,
                log_y: false,
            };
            match plot::render("Sweep curves", &[panel], 1) {
                Ok(svg) => {
                    html.push_str("<h3>Curves</h3>");
                    html.push_str(&inline_figure(&svg));
                }
                Err(e) => {
                    let _ = write!(html, "<p>curves could not be drawn: {}</p>", esc(&e));
                }
            }
        }
    }
    // The runs themselves.
    html.push_str("<h3>Runs</h3><table><tr><th>index</th><th>point</th><th>status</th><th>fixed acc.</th><th>float acc.</th><th>gap</th><th>lost updates</th><th>saturations</th><th>memory bits</th></tr>");
    const MAX_ROWS: usize = 500;
    for r in runs.iter().take(MAX_ROWS) {
        let point = r
            .get("point")
            .and_then(Value::as_object)
            .map(|m| {
                m.iter()
                    .map(|(k, v)| format!("{k} = {v}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            })
            .unwrap_or_default();
        let res = r.get("results");
        let f = |path: &[&str], scale: f64, digits: usize| {
            res.and_then(|x| num(x, path))
                .map_or("–".to_string(), |v| format!("{:.*}", digits, v * scale))
        };
        let status = r.get("status").and_then(Value::as_str).unwrap_or("?");
        let status = if status == "failed" {
            format!(
                "failed: {}",
                r.get("error").and_then(Value::as_str).unwrap_or("")
            )
        } else {
            status.to_string()
        };
        let _ = write!(
            html,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}%</td><td>{}%</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            r.get("index").and_then(Value::as_u64).unwrap_or(0),
            esc(&point),
            esc(&status),
            f(&["fixed", "test_accuracy"], 100.0, 2),
            f(&["float", "test_accuracy"], 100.0, 2),
            f(&["accuracy_gap_points"], 1.0, 2),
            f(&["fixed", "lost_updates"], 1.0, 0),
            f(&["fixed", "saturations"], 1.0, 0),
            f(&["memory_bits", "total"], 1.0, 0),
        );
    }
    html.push_str("</table>");
    if runs.len() > MAX_ROWS {
        let _ = write!(
            html,
            "<p>First {MAX_ROWS} of {} runs shown; all are in runs.jsonl.</p>",
            runs.len()
        );
    }
    Ok(())
}

/// An SVG document as an inline figure sized to the page: the prolog dropped, the root's
/// fixed width and height replaced by the full width of the page (the viewBox keeps the
/// proportions), up to 1.25 times its drawn size so a small figure is not blown up.
fn inline_figure(svg: &str) -> String {
    let body = svg.find("<svg").map_or(svg, |i| &svg[i..]);
    let Some(end) = body.find('>') else {
        return body.to_string();
    };
    let (tag, rest) = body.split_at(end);
    let attr = |name: &str| -> Option<(usize, usize, f64)> {
        let key = format!(" {name}=\"");
        let at = tag.find(&key)?;
        let from = at + key.len();
        let len = tag[from..].find('"')?;
        Some((at, from + len + 1, tag[from..from + len].parse().ok()?))
    };
    let (Some(w), Some(h)) = (attr("width"), attr("height")) else {
        return body.to_string();
    };
    let mut spans = [w, h];
    spans.sort_by_key(|s| s.0);
    let mut root = String::new();
    root.push_str(&tag[..spans[0].0]);
    root.push_str(&tag[spans[0].1..spans[1].0]);
    root.push_str(&tag[spans[1].1..]);
    if !root.contains("viewBox") {
        let _ = write!(root, r#" viewBox="0 0 {} {}""#, w.2, h.2);
    }
    let _ = write!(
        root,
        r#" class="figure" width="100%" style="max-width:{:.0}px""#,
        1.25 * w.2
    );
    root + rest
}

/// The training-run part: the figures of `outcome.json` and the curves of `curves.csv`.
fn training_section(dir: &Path, html: &mut String) -> Result<(), SweepError> {
    let path = dir.join(OUTCOME_FILE);
    let text = std::fs::read_to_string(&path).map_err(|e| SweepError::io(&path, e))?;
    let s: Value = serde_json::from_str(&text).map_err(|e| SweepError::Folder {
        dir: path.clone(),
        message: format!("not valid JSON ({e})"),
    })?;
    html.push_str("<h2>Training run</h2>");
    if let Some(spec) = s.get("spec") {
        let _ = write!(
            html,
            "<p>rule <code>{}</code>, data <code>{}</code>, hidden {}, {} epochs, seed {} (spec hash <code>{}</code>)</p>",
            esc(spec.pointer("/rule/name").and_then(Value::as_str).unwrap_or("?")),
            esc(spec.pointer("/data/source").and_then(Value::as_str).unwrap_or("?")),
            spec.pointer("/net/hidden").map_or("?".into(), Value::to_string),
            spec.pointer("/run/epochs").map_or("?".into(), Value::to_string),
            spec.pointer("/run/seed").map_or("?".into(), Value::to_string),
            esc(s.get("spec_hash").and_then(Value::as_str).unwrap_or("?")),
        );
    }
    html.push_str("<table><tr><th>arm</th><th>test acc.</th><th>train loss</th><th>lost updates</th><th>saturations</th><th>updates</th></tr>");
    for arm in ["fixed", "float"] {
        let a = s.pointer(&format!("/arms/{arm}"));
        let g = |k: &str| a.and_then(|a| a.get(k)).and_then(Value::as_f64);
        let _ = write!(
            html,
            "<tr><td>{arm}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            g("test_accuracy").map_or("–".into(), |v| format!("{:.2}%", 100.0 * v)),
            g("train_loss").map_or("–".into(), |v| format!("{v:.5}")),
            g("lost_updates").map_or("–".into(), |v| format!("{v:.0}")),
            g("saturations").map_or("–".into(), |v| format!("{v:.0}")),
            g("updates").map_or("–".into(), |v| format!("{v:.0}")),
        );
    }
    html.push_str("</table>");
    let _ = write!(
        html,
        "<p>Accuracy gap (float − fixed): {} points. Memory: {} bytes, {} bits.</p>",
        num(&s, &["accuracy_gap_points"]).map_or("–".into(), |v| format!("{v:+.2}")),
        num(&s, &["memory_bytes", "total"]).map_or("–".into(), |v| format!("{v:.0}")),
        num(&s, &["memory_bits", "total"]).map_or("–".into(), |v| format!("{v:.0}")),
    );
    if let Some(d) = s.get("design").and_then(Value::as_object) {
        html.push_str("<table><tr><th>tensor class</th><th>format</th><th>rounding</th></tr>");
        for (k, v) in d {
            if let Some(f) = v.get("format").and_then(Value::as_str) {
                let _ = write!(
                    html,
                    "<tr><td>{}</td><td><code>{}</code></td><td>{}</td></tr>",
                    esc(k),
                    esc(f),
                    esc(v.get("rounding").and_then(Value::as_str).unwrap_or(""))
                );
            }
        }
        html.push_str("</table>");
    }
    if let Some(w) = s
        .get("warnings")
        .and_then(Value::as_array)
        .filter(|w| !w.is_empty())
    {
        html.push_str("<ul class=\"warn\">");
        for x in w {
            let _ = write!(html, "<li>{}</li>", esc(x.as_str().unwrap_or("")));
        }
        html.push_str("</ul>");
    }
    let csv_path = dir.join("curves.csv");
    if csv_path.exists() {
        let svg = curves_from_csv(&csv_path)?;
        html.push_str("<h3>Curves</h3>");
        html.push_str(&inline_figure(&svg));
    }
    Ok(())
}

/// Redraws `curves.csv` (columns epoch, arm, train_loss, test_accuracy, saturations,
/// lost_updates, ...) as four panels.
fn curves_from_csv(path: &Path) -> Result<String, SweepError> {
    let bad = |m: String| SweepError::Folder {
        dir: path.to_path_buf(),
        message: m,
    };
    let mut rd = csv::Reader::from_path(path).map_err(|e| bad(e.to_string()))?;
    let headers = rd.headers().map_err(|e| bad(e.to_string()))?.clone();
    let col = |name: &str| {
        headers.iter().position(|h| h == name).ok_or_else(|| {
            bad(format!(
                "no column `{name}` (columns: {})",
                headers.iter().collect::<Vec<_>>().join(", ")
            ))
        })
    };
    let (ce, ca) = (col("epoch")?, col("arm")?);
    let metrics = [
        ("test_accuracy", "test accuracy", "accuracy", false),
        ("train_loss", "training loss", "mean loss", true),
        (
            "lost_updates",
            "updates lost to rounding",
            "per epoch",
            true,
        ),
        ("saturations", "saturation events", "per epoch", false),
    ];
    let cols: Vec<usize> = metrics.iter().map(|m| col(m.0)).collect::<Result<_, _>>()?;
    let mut data: BTreeMap<String, Vec<Vec<(f64, f64)>>> = BTreeMap::new();
    for (line, rec) in rd.records().enumerate() {
        let rec = rec.map_err(|e| bad(e.to_string()))?;
        let field = |i: usize| -> Result<f64, SweepError> {
            rec.get(i)
                .and_then(|v| v.trim().parse::<f64>().ok())
                .ok_or_else(|| {
                    bad(format!(
                        "row {}: column {} is not a number",
                        line + 2,
                        i + 1
                    ))
                })
        };
        let arm = rec.get(ca).unwrap_or("").to_string();
        let e = field(ce)?;
        let entry = data
            .entry(arm)
            .or_insert_with(|| vec![Vec::new(); metrics.len()]);
        for (k, &c) in cols.iter().enumerate() {
            entry[k].push((e, field(c)?));
        }
    }
    let panels: Vec<Panel> = metrics
        .iter()
        .enumerate()
        .map(|(k, m)| Panel {
            title: m.1.into(),
            x_label: "epoch".into(),
            y_label: m.2.into(),
            series: data
                .iter()
                .map(|(arm, v)| Series {
                    name: arm.clone(),
                    color: if arm == "float" {
                        plot::FLOAT
                    } else {
                        plot::FIXED
                    },
                    dashed: arm == "float",
                    points: v[k].clone(),
                })
                .collect(),
            log_y: m.3,
        })
        .collect();
    plot::render("Training curves (fixed solid, float dashed)", &panels, 2)
        .map_err(SweepError::Other)
}

/// Flattens JSON into `(path, scalar)` rows.
fn flatten_json(prefix: &str, v: &Value, out: &mut Vec<(String, String)>) {
    match v {
        Value::Object(m) => {
            for (k, x) in m {
                let p = if prefix.is_empty() {
                    k.clone()
                } else {
                    format!("{prefix}.{k}")
                };
                flatten_json(&p, x, out);
            }
        }
        Value::Array(a) if a.iter().any(|x| x.is_object() || x.is_array()) => {
            for (i, x) in a.iter().enumerate() {
                flatten_json(&format!("{prefix}[{i}]"), x, out);
            }
        }
        Value::String(s) => out.push((prefix.to_string(), s.clone())),
        other => out.push((prefix.to_string(), other.to_string())),
    }
}

/// The bit-width estimate part: the headline figures (the decision, its bound and
/// confidence, the confirmation runs) and per-class formats of `recommendation.json`
/// (whichever of them it holds), `bits.svg` (accuracy against width with the replicates'
/// spread) when present, and every field as written.
fn bits_section(dir: &Path, html: &mut String) -> Result<(), SweepError> {
    let path = dir.join("recommendation.json");
    let text = std::fs::read_to_string(&path).map_err(|e| SweepError::io(&path, e))?;
    let v: Value = serde_json::from_str(&text).map_err(|e| SweepError::Folder {
        dir: path.clone(),
        message: format!("not valid JSON ({e})"),
    })?;
    let show = |x: &Value| match x {
        Value::String(s) => s.clone(),
        other => other.to_string(),
    };
    html.push_str("<h2>Bit-width estimate</h2>");
    let headline = [
        ("rule", "rule"),
        ("rounding", "rounding"),
        ("tolerance_points", "tolerance (points)"),
        ("confidence", "confidence"),
        ("decision", "decision"),
        (
            "accuracy_gap_points",
            "mean paired gap on the confirmation replicates (points)",
        ),
        ("upper_bound_points", "one-sided upper bound (points)"),
        ("confirmation_level", "level of the accepting round"),
        ("confirmation_runs", "confirmation runs"),
        ("within_tolerance", "accepted"),
        ("splits_note", "test splits"),
        ("memory_bytes", "memory (bytes)"),
        ("memory_bits", "memory (bits)"),
        ("energy_pj_per_sample", "energy per sample (pJ)"),
        ("runs", "runs"),
    ];
    let rows: Vec<(&str, String)> = headline
        .iter()
        .filter_map(|(k, label)| {
            v.get(*k)
                .filter(|x| !x.is_object() && !x.is_array())
                .map(|x| (*label, show(x)))
        })
        .collect();
    if !rows.is_empty() {
        html.push_str("<table>");
        for (label, x) in rows {
            let _ = write!(html, "<tr><th>{}</th><td>{}</td></tr>", esc(label), esc(&x));
        }
        html.push_str("</table>");
    }
    if let Some(m) = v.as_object() {
        let classes: Vec<(&String, &Value)> = m
            .iter()
            .filter(|(_, x)| x.get("format").is_some_and(Value::is_string))
            .collect();
        if !classes.is_empty() {
            html.push_str("<table><tr><th>tensor class</th><th>format</th><th>word bits</th><th>gap (points)</th><th>note</th></tr>");
            for (k, x) in classes {
                let f = |key: &str| x.get(key).map_or(String::new(), show);
                // The gap is an object of replicate statistics: its mean, range and count.
                let gap = match x.get("gap_points") {
                    Some(g) if g.is_object() => match (num(g, &["mean"]), num(g, &["n"])) {
                        (Some(m), Some(n)) => format!(
                            "{m:+.2} (range {} to {}, n = {n})",
                            num(g, &["min"]).map_or("–".into(), |v| format!("{v:+.2}")),
                            num(g, &["max"]).map_or("–".into(), |v| format!("{v:+.2}"))
                        ),
                        _ => show(g),
                    },
                    _ => f("gap_points"),
                };
                let _ = write!(
                    html,
                    "<tr><td>{}</td><td><code>{}</code></td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    esc(k),
                    esc(&f("format")),
                    esc(&f("word_bits")),
                    esc(&gap),
                    esc(&f("note"))
                );
            }
            html.push_str("</table>");
        }
    }
    if let Ok(svg) = std::fs::read_to_string(dir.join("bits.svg")) {
        if svg.contains("<svg") {
            html.push_str(&inline_figure(&svg));
        }
    }
    let mut all = Vec::new();
    flatten_json("", &v, &mut all);
    const MAX_FIELDS: usize = 2000;
    let _ = write!(
        html,
        "<details><summary>All {} fields of recommendation.json</summary><table><tr><th>field</th><th>value</th></tr>",
        all.len()
    );
    for (k, x) in all.iter().take(MAX_FIELDS) {
        let _ = write!(
            html,
            "<tr><td><code>{}</code></td><td>{}</td></tr>",
            esc(k),
            esc(x)
        );
    }
    html.push_str("</table></details>");
    Ok(())
}

const STYLE: &str = "body{font-family:system-ui,sans-serif;margin:2em auto;max-width:1150px;padding:0 1em;color:#1a1a1a;background:#fff}\
h1{font-size:1.4em;border-bottom:2px solid #1a1a1a;padding-bottom:.2em}h2{font-size:1.2em;margin-top:2em}h3{font-size:1em;margin-top:1.5em}\
table{border-collapse:collapse;margin:.6em 0;font-size:.88em}td,th{border:1px solid #d0d0c8;padding:.2em .5em;text-align:left}\
th{background:#f1f0ea}code{font-size:.95em}svg.figure{height:auto;display:block;margin:.8em 0}.warn li{color:#8a3b12}";

/// Renders the page for `dir`. Fails when the folder holds none of the known results.
pub fn render(dir: &Path, opts: &ReportOptions) -> Result<Report, SweepError> {
    let mut body = String::new();
    let mut figures = Vec::new();
    let mut sections = Vec::new();
    if dir.join(store::RUNS).exists() {
        sweep_section(dir, opts, &mut body, &mut figures)?;
        sections.push("sweep");
    }
    if dir.join(OUTCOME_FILE).exists() {
        training_section(dir, &mut body)?;
        sections.push("training");
    } else if dir.join(LEGACY_OUTCOME_FILE).exists() {
        return Err(SweepError::Folder {
            dir: dir.to_path_buf(),
            message: format!("holds {LEGACY_OUTCOME_FILE}, the name an earlier version gave the run's result file; rename it to {OUTCOME_FILE} (the contents are the same) or rerun the command"),
        });
    }
    if dir.join("recommendation.json").exists() {
        bits_section(dir, &mut body)?;
        sections.push("bits");
    }
    if sections.is_empty() {
        return Err(SweepError::Folder {
            dir: dir.to_path_buf(),
            message: "holds no results to report: expected runs.jsonl (a sweep), outcome.json and curves.csv (a training run) or recommendation.json (a bit-width estimate)".into(),
        });
    }
    let title = format!("tidewise results: {}", dir.display());
    let html = format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{STYLE}</style></head><body><h1>{}</h1>{body}</body></html>\n",
        esc(&title),
        esc(&title)
    );
    Ok(Report {
        html,
        figures,
        sections,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inline_figures_fill_the_page() {
        let svg = "<?xml version=\"1.0\"?>\n<svg width=\"920\" height=\"640\" viewBox=\"0 0 920 640\" xmlns=\"http://www.w3.org/2000/svg\"><g/></svg>";
        assert_eq!(
            inline_figure(svg),
            "<svg viewBox=\"0 0 920 640\" xmlns=\"http://www.w3.org/2000/svg\" class=\"figure\" width=\"100%\" style=\"max-width:1150px\"><g/></svg>"
        );
        let bare = "<svg xmlns=\"http://www.w3.org/2000/svg\" height=\"50\" width=\"100\"></svg>";
        assert!(inline_figure(bare).contains("viewBox=\"0 0 100 50\""));
    }

    #[test]
    fn escaping() {
        assert_eq!(esc("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }
}
