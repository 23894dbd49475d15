//! The bit-width folder's journal: `bits.json` (what the runs belong to) and `journal.jsonl`
//! (one JSON line per finished training run, appended as it finishes, like a sweep's: see
//! [`crate::sweep::store`] for why lines never interleave and how a line cut by a kill is
//! dropped).
//!
//! A line is keyed by its arm, design point (fixed arm only), seed and split seed, and holds
//! what the search reads back: correct test samples out of the test split, the test loss,
//! saturations, lost and attempted updates, and for observed float runs the value ranges.
//! Counts are integers and floats are written and read back exactly (`serde_json` with
//! `float_roundtrip`), so a resumed command computes exactly what an uninterrupted one does.

use std::path::{Path, PathBuf};

use serde_json::{json, Value};

use super::observe::Ranges;
use super::point::Point;
use super::runner::Outcome;
use super::seeds::Replicate;
use super::BitsError;
use crate::io::DirLock;
use crate::sweep::store::{self, Appender};

/// The manifest file.
pub const MANIFEST: &str = "bits.json";
/// The runs file.
pub const RUNS: &str = "journal.jsonl";
/// Layout version of both files.
pub const LAYOUT: u64 = 1;

/// One journalled run.
#[derive(Clone, Debug, PartialEq)]
pub struct Entry {
    /// The fixed arm's design point, `None` for the float arm.
    pub point: Option<Point>,
    /// Its seeds.
    pub rep: Replicate,
    /// Its outcome.
    pub outcome: Outcome,
    /// Value ranges (observed float runs only).
    pub ranges: Option<Ranges>,
}

impl Entry {
    /// The line written to `runs.jsonl`.
    pub fn to_json(&self) -> Value {
        let o = &self.outcome;
        let mut v = json!({
            "arm": if self.point.is_some() { "fixed" } else { "float" },
            "seed": self.rep.seed,
            "split": self.rep.split,
            "correct": o.correct,
            "tested": o.tested,
            "test_loss": o.loss,
            "saturations": o.saturations,
            "lost_updates": o.lost_updates,
            "updates": o.updates,
        });
        if let Some(p) = &self.point {
            v["point"] = p.to_json();
        }
        if let Some(r) = &self.ranges {
            v["ranges"] = json!(r);
        }
        v
    }

    /// An entry from its line.
    pub fn from_json(v: &Value) -> Result<Entry, String> {
        let u = |k: &str| {
            v.get(k)
                .and_then(Value::as_u64)
                .ok_or_else(|| format!("no whole number \"{k}\""))
        };
        let point = match v.get("arm").and_then(Value::as_str) {
            Some("float") => None,
            Some("fixed") => Some(
                v.get("point")
                    .and_then(Point::from_json)
                    .ok_or("no valid \"point\"")?,
            ),
            _ => return Err("\"arm\" is neither \"float\" nor \"fixed\"".into()),
        };
        let to32 = |x: u64, k: &str| u32::try_from(x).map_err(|_| format!("\"{k}\" too large"));
        let ranges = match v.get("ranges") {
            None => None,
            Some(r) => {
                let f = |k: &str| r.get(k).and_then(Value::as_f64).ok_or("bad \"ranges\"");
                Some(Ranges {
                    forward_weights: f("forward_weights")?,
                    biases: f("biases")?,
                    feedback_weights: f("feedback_weights")?,
                    activations: f("activations")?,
                })
            }
        };
        Ok(Entry {
            point,
            rep: Replicate {
                seed: u("seed")?,
                split: u("split")?,
            },
            outcome: Outcome {
                correct: to32(u("correct")?, "correct")?,
                tested: to32(u("tested")?, "tested")?,
                loss: v
                    .get("test_loss")
                    .and_then(Value::as_f64)
                    .ok_or("no \"test_loss\"")?,
                saturations: u("saturations")?,
                lost_updates: u("lost_updates")?,
                updates: u("updates")?,
            },
            ranges,
        })
    }
}

/// An open journal. Its folder stays locked against other runs while the journal or a clone
/// of its [`Journal::lock`] lives.
pub struct Journal {
    dir: PathBuf,
    appender: Appender,
    lock: DirLock,
}

impl Journal {
    /// Opens the journal of `dir` for the runs `manifest` describes, creating it, or reading
    /// what it already holds. A folder holding another spec's or other options' journal, or
    /// files that are not a journal, is refused and left as it is; so is a folder another run
    /// holds ([`crate::io::lock_dir`]).
    pub fn open(dir: &Path, manifest: &Value) -> Result<(Journal, Vec<Entry>), BitsError> {
        let folder = |m: String| BitsError::Folder(format!("{}: {m}", dir.display()));
        let lock = crate::io::lock_dir(dir).map_err(|e| BitsError::Folder(e.to_string()))?;
        let path = dir.join(MANIFEST);
        let mut want = manifest.clone();
        want["layout"] = json!(LAYOUT);
        match std::fs::read_to_string(&path) {
            Ok(text) => {
                let old: Value = serde_json::from_str(&text)
                    .map_err(|e| folder(format!("{MANIFEST} is not valid JSON ({e})")))?;
                if old != want {
                    return Err(folder(format!(
                        "holds the journal of another bit-width search ({}): nothing was changed; choose another --out, or remove the folder to start over",
                        differences(&old, &want)
                    )));
                }
            }
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                let entries =
                    std::fs::read_dir(dir).map_err(|e| folder(format!("cannot read ({e})")))?;
                if let Some(name) = entries
                    .filter_map(|e| e.ok())
                    .map(|e| e.file_name().to_string_lossy().into_owned())
                    .find(|n| !n.starts_with('.'))
                {
                    return Err(folder(format!(
                        "has no {MANIFEST} but holds other files (such as {name}): choose an empty or new folder for --out"
                    )));
                }
                let text = serde_json::to_string_pretty(&want)
                    .map_err(|e| BitsError::Run(e.to_string()))?;
                crate::io::write_atomic(&path, text.as_bytes())
                    .map_err(|e| folder(format!("{e:#}")))?;
            }
            Err(e) => return Err(folder(format!("cannot read {MANIFEST} ({e})"))),
        }
        let runs = dir.join(RUNS);
        let mut entries = Vec::new();
        let scan = store::read_lines(&runs, |v| {
            entries.push(Entry::from_json(&v)?);
            Ok(())
        })
        .map_err(|e| BitsError::Folder(e.to_string()))?;
        if scan.partial > 0 {
            store::truncate_atomic(&runs, scan.good_len)
                .map_err(|e| BitsError::Folder(e.to_string()))?;
        }
        let appender = Appender::open(&runs).map_err(|e| BitsError::Folder(e.to_string()))?;
        Ok((
            Journal {
                dir: dir.to_path_buf(),
                appender,
                lock,
            },
            entries,
        ))
    }

    /// Appends one finished run (one write, synced).
    pub fn append(&self, e: &Entry) -> Result<(), BitsError> {
        self.appender
            .append(&e.to_json())
            .map_err(|e| BitsError::Folder(e.to_string()))
    }

    /// The journal's folder.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// The folder's lock, to keep it after the journal is handed on.
    pub fn lock(&self) -> DirLock {
        self.lock.clone()
    }
}

/// The top-level keys whose values differ, with both values, for the refusal message.
fn differences(old: &Value, new: &Value) -> String {
    let mut out = Vec::new();
    if let (Some(a), Some(b)) = (old.as_object(), new.as_object()) {
        for (k, v) in b {
            match a.get(k) {
                Some(w) if w == v => {}
                Some(w) if k == "options" => out.push(format!("options: {}", differences(w, v))),
                Some(w) if k == "spec" => {
                    let _ = w;
                    out.push("spec differs".to_string())
                }
                Some(w) => out.push(format!("{k} {w} there, {v} here")),
                None => out.push(format!("{k} missing there")),
            }
        }
    }
    if out.is_empty() {
        "another layout".into()
    } else {
        out.join("; ")
    }
}
