//! Combining the folders of the shards of one sweep into one `runs.jsonl`, sorted by grid
//! index, with duplicates (same spec hash) dropped and the missing points listed.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde_json::Value;

use super::store::{self, Manifest};
use super::SweepError;

/// What a merge found and wrote.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Merged {
    /// Points in the grid.
    pub points: usize,
    /// Distinct runs written.
    pub runs: usize,
    /// Lines dropped because another line had the same spec hash.
    pub duplicates: usize,
    /// Grid indices without a run, ascending.
    pub missing: Vec<usize>,
    /// Cut last lines skipped (folder, bytes); the input folders are left as they are.
    pub partial: Vec<(PathBuf, u64)>,
    /// The merged results file.
    pub out: PathBuf,
}

/// `0, 2-5, 9`: indices with consecutive runs folded.
pub fn ranges(indices: &[usize]) -> String {
    let mut parts = Vec::new();
    let mut i = 0;
    while i < indices.len() {
        let start = indices[i];
        let mut end = start;
        while i + 1 < indices.len() && indices[i + 1] == end + 1 {
            i += 1;
            end = indices[i];
        }
        parts.push(if end == start {
            start.to_string()
        } else {
            format!("{start}-{end}")
        });
        i += 1;
    }
    parts.join(", ")
}

/// Merges the sweep folders `dirs` into `out` (which may be new, or a folder of the same
/// sweep, whose runs are kept). The manifests must agree; two lines with one spec hash must
/// agree on everything but `timing`.
pub fn merge(dirs: &[PathBuf], out: &Path) -> Result<Merged, SweepError> {
    let Some(first) = dirs.first() else {
        return Err(SweepError::Other(
            "merge needs at least one sweep folder".into(),
        ));
    };
    let read = |d: &Path| -> Result<Manifest, SweepError> {
        Manifest::read(d)?.ok_or_else(|| SweepError::Folder {
            dir: d.to_path_buf(),
            message: format!("has no {} (not a sweep folder)", store::MANIFEST),
        })
    };
    let manifest = read(first)?;
    for d in &dirs[1..] {
        if let Some(why) = manifest.mismatch(&read(d)?) {
            return Err(SweepError::Folder {
                dir: d.clone(),
                message: format!(
                    "is not a shard of the same sweep as {} ({why})",
                    first.display()
                ),
            });
        }
    }
    let mut inputs: Vec<PathBuf> = dirs.to_vec();
    if Manifest::read(out).ok().flatten().is_some() && !dirs.iter().any(|d| same_dir(d, out)) {
        inputs.push(out.to_path_buf());
    }
    let _lock = store::claim(out, &manifest)?;

    // index -> (hash, record without timing, record, folder)
    let mut by_index: BTreeMap<usize, (String, Value, Value, PathBuf)> = BTreeMap::new();
    let mut duplicates = 0;
    let mut partial = Vec::new();
    for d in &inputs {
        let path = d.join(store::RUNS);
        let mut failure: Option<SweepError> = None;
        let scan = store::scan(&path, |line| {
            if failure.is_some() {
                return;
            }
            if line.index >= manifest.points {
                failure = Some(SweepError::Folder {
                    dir: path.clone(),
                    message: format!(
                        "holds a run of index {} but the grid has {} points",
                        line.index, manifest.points
                    ),
                });
                return;
            }
            let bare = store::without_timing(&line.record);
            match by_index.get(&line.index) {
                Some((hash, other, _, from)) => {
                    if *hash != line.hash {
                        failure = Some(SweepError::Folder {
                            dir: path.clone(),
                            message: format!(
                                "index {} has spec hash {} here but {} in {}: the folders disagree on the grid",
                                line.index, line.hash, hash, from.display()
                            ),
                        });
                    } else if *other != bare {
                        failure = Some(SweepError::Folder {
                            dir: path.clone(),
                            message: format!(
                                "run {} (spec hash {}) has other results here than in {}: runs should be deterministic; rerun that point",
                                line.index, line.hash, from.display()
                            ),
                        });
                    } else {
                        duplicates += 1;
                    }
                }
                None => {
                    by_index.insert(line.index, (line.hash, bare, line.record, d.clone()));
                }
            }
        })?;
        if let Some(e) = failure {
            return Err(e);
        }
        if scan.partial > 0 {
            partial.push((d.clone(), scan.partial));
        }
    }
    let mut text = Vec::new();
    for (_, _, record, _) in by_index.values() {
        serde_json::to_writer(&mut text, record).map_err(|e| SweepError::Other(e.to_string()))?;
        text.push(b'\n');
    }
    let runs = out.join(store::RUNS);
    crate::io::write_atomic(&runs, &text).map_err(|e| SweepError::Other(format!("{e:#}")))?;
    let missing = (0..manifest.points)
        .filter(|i| !by_index.contains_key(i))
        .collect();
    Ok(Merged {
        points: manifest.points,
        runs: by_index.len(),
        duplicates,
        missing,
        partial,
        out: runs,
    })
}

fn same_dir(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ranges_fold_runs() {
        assert_eq!(ranges(&[0, 2, 3, 4, 5, 9]), "0, 2-5, 9");
        assert_eq!(ranges(&[]), "");
        assert_eq!(ranges(&[7]), "7");
    }
}
