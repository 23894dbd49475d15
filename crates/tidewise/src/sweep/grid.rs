//! Sweep grids: which spec keys vary, over which values, and the order of the points.
//!
//! A grid file is TOML. Each key is a dotted spec key, each value a non-empty array:
//!
//! ```toml
//! "fixed.forward_weights" = ["Q1.6", "Q2.13"]
//! "fixed.rounding" = ["nearest", "stochastic"]
//! "run.seed" = [1, 2, 3]
//!
//! # Lists walked together, as one axis (equal lengths): the i-th values go together.
//! [[zip]]
//! "fixed.feedback_weights" = ["Q1.6", "Q2.13"]
//! "fixed.biases" = ["Q2.5", "Q3.12"]
//! ```
//!
//! Section tables work as well (`[fixed]` then `rounding = [...]`). By default the grid is the
//! Cartesian product of its axes; `mode = "zip"` at the top walks every top-level list
//! together instead (one axis, all lists of one length). Axes are ordered by their first key
//! (keys of a zip group sorted), and the point index counts in mixed radix with the last axis
//! varying fastest, so the same file always numbers its points the same way.

use std::path::Path;

use serde_json::{json, Value};

/// Most points a grid may have.
pub const MAX_POINTS: usize = 10_000_000;

/// Why a grid was refused.
#[derive(Debug, thiserror::Error)]
pub enum GridError {
    /// The file could not be read.
    #[error("cannot read grid {path}: {source}")]
    Read {
        /// The file.
        path: String,
        /// The reason.
        source: std::io::Error,
    },
    /// Anything wrong with the grid's content.
    #[error("{origin}: {message}")]
    Invalid {
        /// File name.
        origin: String,
        /// What is wrong, naming the key.
        message: String,
    },
}

/// One axis: one key, or keys walked together (a zip group).
#[derive(Clone, Debug, PartialEq)]
pub struct Axis {
    /// The dotted spec keys of the axis (more than one for a zip group).
    pub keys: Vec<String>,
    /// `values[j][k]` is the value of `keys[k]` at step `j` of the axis.
    pub values: Vec<Vec<toml::Value>>,
}

impl Axis {
    /// Steps along the axis.
    pub fn len(&self) -> usize {
        self.values.len()
    }

    /// Whether the axis has no steps (never true for a parsed grid).
    pub fn is_empty(&self) -> bool {
        self.values.is_empty()
    }

    /// The axis name: its keys joined by ` + `.
    pub fn name(&self) -> String {
        self.keys.join(" + ")
    }

    /// A short label of step `j`: its values joined by `/`.
    pub fn label(&self, j: usize) -> String {
        self.values
            .get(j)
            .map(|vs| vs.iter().map(value_label).collect::<Vec<_>>().join("/"))
            .unwrap_or_default()
    }
}

/// A value as a short label: strings without quotes, an array of strings (per-layer
/// formats) joined by `|`, everything else as TOML.
pub fn value_label(v: &toml::Value) -> String {
    match v {
        toml::Value::String(s) => s.clone(),
        toml::Value::Array(a) if !a.is_empty() && a.iter().all(toml::Value::is_str) => a
            .iter()
            .filter_map(toml::Value::as_str)
            .collect::<Vec<_>>()
            .join("|"),
        other => other.to_string(),
    }
}

/// A parsed grid.
#[derive(Clone, Debug, PartialEq)]
pub struct Grid {
    /// The axes, in index order (the last varies fastest).
    pub axes: Vec<Axis>,
}

fn invalid(origin: &str, message: impl Into<String>) -> GridError {
    GridError::Invalid {
        origin: origin.to_string(),
        message: message.into(),
    }
}

/// `, did you mean `x`?` for the known key nearest to `key`, or the list of known keys.
pub fn nearest_key(key: &str) -> String {
    let keys = crate::spec::known_keys();
    let best = keys
        .iter()
        .map(|k| (strsim::levenshtein(k, key), k))
        .min_by_key(|(d, _)| *d);
    match best {
        Some((d, k)) if d <= 6 => format!("did you mean `{k}`?"),
        _ => format!("spec keys are {}", keys.join(", ")),
    }
}

/// Flattens `table` into `(dotted key, value)` pairs: section tables contribute
/// `section.key`, everything else its own name.
fn flatten(table: &toml::Table, prefix: &str, out: &mut Vec<(String, toml::Value)>) {
    for (k, v) in table {
        let key = if prefix.is_empty() {
            k.clone()
        } else {
            format!("{prefix}.{k}")
        };
        match v {
            toml::Value::Table(t) if prefix.is_empty() => flatten(t, &key, out),
            _ => out.push((key, v.clone())),
        }
    }
}

/// Checks one key and its list; returns the list's values. A list of its own axis must not
/// repeat a value (the runs would repeat); a list walked with others (`zipped`) may, since the
/// points differ in the other lists (two equal points are refused by the sweep as one spec).
fn key_values(
    origin: &str,
    known: &[String],
    key: &str,
    v: &toml::Value,
    zipped: bool,
) -> Result<Vec<toml::Value>, GridError> {
    if !known.iter().any(|k| k == key) {
        return Err(invalid(
            origin,
            format!("`{key}` is not a spec key; {}", nearest_key(key)),
        ));
    }
    let toml::Value::Array(list) = v else {
        return Err(invalid(
            origin,
            format!("`{key}` = {v}: expected an array of values, e.g. \"{key}\" = [{v}, ...]"),
        ));
    };
    if list.is_empty() {
        return Err(invalid(
            origin,
            format!("`{key}` has an empty list: give it at least one value (or remove the key)"),
        ));
    }
    for (i, a) in list.iter().enumerate() {
        if zipped {
            break;
        }
        if let Some(j) = list[..i].iter().position(|b| b == a) {
            return Err(invalid(
                origin,
                format!(
                    "`{key}` lists {} twice (positions {} and {}): each value once, or the runs would repeat",
                    value_label(a),
                    j + 1,
                    i + 1
                ),
            ));
        }
    }
    Ok(list.clone())
}

/// Builds one zip axis from keyed lists of equal length.
fn zip_axis(origin: &str, mut lists: Vec<(String, Vec<toml::Value>)>) -> Result<Axis, GridError> {
    lists.sort_by(|a, b| a.0.cmp(&b.0));
    let n = lists.first().map_or(0, |l| l.1.len());
    if let Some((k, l)) = lists.iter().find(|l| l.1.len() != n) {
        return Err(invalid(
            origin,
            format!(
                "zipped lists must have one length: `{}` has {n} values but `{k}` has {}",
                lists[0].0,
                l.len()
            ),
        ));
    }
    let keys: Vec<String> = lists.iter().map(|l| l.0.clone()).collect();
    let values = (0..n)
        .map(|j| lists.iter().map(|l| l.1[j].clone()).collect())
        .collect();
    Ok(Axis { keys, values })
}

impl Grid {
    /// Reads and parses a grid file.
    pub fn load(path: &Path) -> Result<Grid, GridError> {
        let text = std::fs::read_to_string(path).map_err(|source| GridError::Read {
            path: path.display().to_string(),
            source,
        })?;
        Grid::parse(&text, &path.display().to_string())
    }

    /// Parses grid text; `origin` names it in errors.
    pub fn parse(text: &str, origin: &str) -> Result<Grid, GridError> {
        let table: toml::Table = text.parse().map_err(|e: toml::de::Error| {
            invalid(origin, format!("not valid TOML: {}", e.message()))
        })?;
        let known = crate::spec::known_keys();
        let mut zip_mode = false;
        let mut groups: Vec<toml::Value> = Vec::new();
        let mut plain = toml::Table::new();
        for (k, v) in table {
            match (k.as_str(), v) {
                ("mode", toml::Value::String(m)) if m == "zip" => zip_mode = true,
                ("mode", toml::Value::String(m)) if m == "product" => {}
                ("mode", other) => {
                    return Err(invalid(
                        origin,
                        format!("mode = {other}: allowed: \"product\" (default), \"zip\""),
                    ))
                }
                ("zip", toml::Value::Array(gs)) => groups = gs,
                ("zip", other) => {
                    return Err(invalid(
                        origin,
                        format!("zip = {other}: expected [[zip]] tables of keyed lists"),
                    ))
                }
                (_, v) => {
                    plain.insert(k, v);
                }
            }
        }
        let mut seen: Vec<String> = Vec::new();
        let mut claim = |key: &str| {
            if seen.iter().any(|s| s == key) {
                return Err(invalid(
                    origin,
                    format!("`{key}` appears twice in the grid: give each key one list"),
                ));
            }
            seen.push(key.to_string());
            Ok(())
        };
        let mut flat = Vec::new();
        flatten(&plain, "", &mut flat);
        let mut lists = Vec::new();
        for (k, v) in &flat {
            claim(k)?;
            lists.push((k.clone(), key_values(origin, &known, k, v, zip_mode)?));
        }
        let mut axes = Vec::new();
        if zip_mode {
            if !groups.is_empty() {
                return Err(invalid(
                    origin,
                    "mode = \"zip\" already walks every list together; remove the [[zip]] tables",
                ));
            }
            if !lists.is_empty() {
                axes.push(zip_axis(origin, lists)?);
            }
        } else {
            for (k, vs) in lists {
                axes.push(Axis {
                    keys: vec![k],
                    values: vs.into_iter().map(|v| vec![v]).collect(),
                });
            }
        }
        for (g, group) in groups.iter().enumerate() {
            let toml::Value::Table(t) = group else {
                return Err(invalid(
                    origin,
                    format!("zip group {}: expected a [[zip]] table", g + 1),
                ));
            };
            let mut flat = Vec::new();
            flatten(t, "", &mut flat);
            if flat.is_empty() {
                return Err(invalid(
                    origin,
                    format!("zip group {} is empty: give it keyed lists", g + 1),
                ));
            }
            let mut gl = Vec::new();
            for (k, v) in &flat {
                claim(k)?;
                gl.push((k.clone(), key_values(origin, &known, k, v, true)?));
            }
            axes.push(zip_axis(origin, gl)?);
        }
        if axes.is_empty() {
            return Err(invalid(
                origin,
                "the grid is empty: give at least one spec key with a list of values, e.g. \"run.seed\" = [1, 2, 3]",
            ));
        }
        axes.sort_by(|a, b| a.keys.cmp(&b.keys));
        let grid = Grid { axes };
        let mut n: usize = 1;
        for a in &grid.axes {
            n = n
                .checked_mul(a.len())
                .filter(|&n| n <= MAX_POINTS)
                .ok_or_else(|| {
                    invalid(
                        origin,
                        format!("the grid has more than {MAX_POINTS} points: split it"),
                    )
                })?;
        }
        Ok(grid)
    }

    /// Points in the grid.
    pub fn len(&self) -> usize {
        self.axes.iter().map(Axis::len).product()
    }

    /// Whether the grid has no points (never true for a parsed grid).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The step along each axis of point `index`.
    pub fn steps(&self, index: usize) -> Vec<usize> {
        let mut rest = index;
        let mut steps = vec![0; self.axes.len()];
        for (s, a) in steps.iter_mut().zip(&self.axes).rev() {
            *s = rest % a.len().max(1);
            rest /= a.len().max(1);
        }
        steps
    }

    /// The `(key, value)` pairs of point `index`, in axis order.
    pub fn point(&self, index: usize) -> Vec<(String, toml::Value)> {
        let mut out = Vec::new();
        for (a, s) in self.axes.iter().zip(self.steps(index)) {
            for (k, v) in a.keys.iter().zip(&a.values[s]) {
                out.push((k.clone(), v.clone()));
            }
        }
        out
    }

    /// The point as a JSON object `{key: value}`.
    pub fn point_json(&self, index: usize) -> Value {
        let m: serde_json::Map<String, Value> = self
            .point(index)
            .into_iter()
            .map(|(k, v)| (k, toml_to_json(&v)))
            .collect();
        Value::Object(m)
    }

    /// The grid as JSON (for the manifest): `{"axes": [{"keys": [...], "values": [[...]]}]}`.
    pub fn to_json(&self) -> Value {
        json!({
            "axes": self.axes.iter().map(|a| json!({
                "keys": a.keys,
                "values": a.values.iter().map(|vs| vs.iter().map(toml_to_json).collect::<Vec<_>>()).collect::<Vec<_>>(),
            })).collect::<Vec<_>>()
        })
    }

    /// Reads the grid back from [`Grid::to_json`].
    pub fn from_json(v: &Value) -> Option<Grid> {
        let mut axes = Vec::new();
        for a in v.get("axes")?.as_array()? {
            let keys = a
                .get("keys")?
                .as_array()?
                .iter()
                .map(|k| k.as_str().map(String::from))
                .collect::<Option<Vec<_>>>()?;
            let values = a
                .get("values")?
                .as_array()?
                .iter()
                .map(|vs| {
                    vs.as_array()?
                        .iter()
                        .map(json_to_toml)
                        .collect::<Option<Vec<_>>>()
                })
                .collect::<Option<Vec<_>>>()?;
            axes.push(Axis { keys, values });
        }
        Some(Grid { axes })
    }
}

/// A TOML value as JSON (date-times as their text).
pub fn toml_to_json(v: &toml::Value) -> Value {
    match v {
        toml::Value::String(s) => json!(s),
        toml::Value::Integer(i) => json!(i),
        toml::Value::Float(f) => json!(f),
        toml::Value::Boolean(b) => json!(b),
        toml::Value::Datetime(d) => json!(d.to_string()),
        toml::Value::Array(a) => Value::Array(a.iter().map(toml_to_json).collect()),
        toml::Value::Table(t) => Value::Object(
            t.iter()
                .map(|(k, v)| (k.clone(), toml_to_json(v)))
                .collect(),
        ),
    }
}

fn json_to_toml(v: &Value) -> Option<toml::Value> {
    Some(match v {
        Value::String(s) => toml::Value::String(s.clone()),
        Value::Bool(b) => toml::Value::Boolean(*b),
        Value::Number(n) => match n.as_i64() {
            Some(i) => toml::Value::Integer(i),
            None => toml::Value::Float(n.as_f64()?),
        },
        Value::Array(a) => toml::Value::Array(a.iter().map(json_to_toml).collect::<Option<_>>()?),
        Value::Object(m) => toml::Value::Table(
            m.iter()
                .map(|(k, v)| Some((k.clone(), json_to_toml(v)?)))
                .collect::<Option<_>>()?,
        ),
        Value::Null => return None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn err(text: &str) -> String {
        Grid::parse(text, "g.toml").unwrap_err().to_string()
    }

    #[test]
    fn product_counts_and_orders_points() {
        let g = Grid::parse(
            "\"run.seed\" = [1, 2, 3]\n\"fixed.rounding\" = [\"nearest\", \"stochastic\"]\n",
            "g",
        )
        .unwrap();
        // |A x B| = |A| |B| (Cartesian product; fact of the trade).
        assert_eq!(g.len(), 6);
        assert_eq!(g.axes[0].keys, ["fixed.rounding"]);
        // Last axis fastest: 0 -> (nearest, 1), 1 -> (nearest, 2), 3 -> (stochastic, 1).
        assert_eq!(
            g.point_json(1),
            json!({"fixed.rounding": "nearest", "run.seed": 2})
        );
        assert_eq!(
            g.point_json(3),
            json!({"fixed.rounding": "stochastic", "run.seed": 1})
        );
        let all: std::collections::BTreeSet<String> =
            (0..g.len()).map(|i| g.point_json(i).to_string()).collect();
        assert_eq!(all.len(), 6, "every index a distinct point");
    }

    #[test]
    fn sections_and_zip_groups() {
        let g = Grid::parse(
            "[run]\nseed = [1, 2]\n[[zip]]\n\"fixed.forward_weights\" = [\"Q1.6\", \"Q2.13\"]\n\"fixed.biases\" = [\"Q2.5\", \"Q3.12\"]\n",
            "g",
        )
        .unwrap();
        assert_eq!(g.len(), 4);
        assert_eq!(g.axes[0].keys, ["fixed.biases", "fixed.forward_weights"]);
        assert_eq!(
            g.point_json(2),
            json!({"fixed.biases": "Q3.12", "fixed.forward_weights": "Q2.13", "run.seed": 1})
        );
        let z = Grid::parse(
            "mode = \"zip\"\n\"run.seed\" = [1, 2]\n\"rule.name\" = [\"dtp\", \"bp\"]\n",
            "g",
        )
        .unwrap();
        assert_eq!(z.len(), 2);
        assert_eq!(Grid::from_json(&z.to_json()), Some(z));
    }

    #[test]
    fn per_layer_points_are_labelled_compactly() {
        let g = Grid::parse(
            "\"fixed.forward_weights\" = [[\"Q1.6\", \"Q0.7\"], \"Q2.13\"]\n",
            "g",
        )
        .unwrap();
        assert_eq!(g.len(), 2);
        assert_eq!(g.axes[0].label(0), "Q1.6|Q0.7");
        assert_eq!(g.axes[0].label(1), "Q2.13");
    }

    #[test]
    fn bad_grids_are_refused_with_the_key() {
        let e = err("\"fixed.roundng\" = [\"nearest\"]\n");
        assert!(e.contains("`fixed.roundng` is not a spec key"), "{e}");
        assert!(e.contains("did you mean `fixed.rounding`"), "{e}");
        let e = err("");
        assert!(e.contains("the grid is empty"), "{e}");
        let e = err("\"run.seed\" = []\n");
        assert!(e.contains("`run.seed` has an empty list"), "{e}");
        let e = err("\"run.seed\" = 3\n");
        assert!(e.contains("expected an array"), "{e}");
        let e = err("\"run.seed\" = [1, 1]\n");
        assert!(e.contains("twice"), "{e}");
        let e = err("mode = \"zip\"\n\"run.seed\" = [1, 2]\n\"rule.name\" = [\"dtp\"]\n");
        assert!(e.contains("one length"), "{e}");
        let e = err("\"run.seed\" = [1]\n[run]\nseed = [2]\n");
        assert!(e.contains("not valid TOML") || e.contains("twice"), "{e}");
        let e = err("mode = \"all\"\n\"run.seed\" = [1]\n");
        assert!(e.contains("allowed: \"product\""), "{e}");
    }
}
