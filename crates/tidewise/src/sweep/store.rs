//! The sweep folder: `sweep.json` (the manifest) and `runs.jsonl` (one JSON line per finished
//! run, appended).
//!
//! Lines follow the JSON Lines convention (jsonlines.org: UTF-8, one JSON value per line, `\n`
//! terminated). Each line is written by one `write` on a file opened with `O_APPEND` while a
//! mutex is held, then the file is synced: POSIX (IEEE Std 1003.1-2017, `write()`;
//! `docs/references.md` \[41\]) puts every
//! `O_APPEND` write at the end of the file with no intervening modification, so lines never
//! interleave. A kill can at worst leave the last line without its `\n`; the reader reports
//! and drops it, and the run is made again.

use std::collections::HashSet;
use std::fs::{self, File, OpenOptions};
use std::io::{BufRead, BufReader, Read, Write};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use serde_json::{json, Value};

use super::SweepError;
use crate::io::DirLock;

/// The manifest file of a sweep folder.
pub const MANIFEST: &str = "sweep.json";
/// The results file of a sweep folder.
pub const RUNS: &str = "runs.jsonl";
/// Version of the manifest and line layout.
pub const LAYOUT: u64 = 1;

/// What identifies a sweep: the resolved base spec and the grid.
#[derive(Clone, Debug, PartialEq)]
pub struct Manifest {
    /// Hash of the base spec (file and `--with`, before any grid value).
    pub base_hash: String,
    /// The base spec as JSON.
    pub base_spec: Value,
    /// The grid as JSON ([`super::grid::Grid::to_json`]).
    pub grid: Value,
    /// Points in the grid.
    pub points: usize,
}

impl Manifest {
    /// The manifest as the JSON document written to `sweep.json`.
    pub fn to_json(&self) -> Value {
        json!({
            "layout": LAYOUT,
            "base_spec_hash": self.base_hash,
            "base_spec": self.base_spec,
            "grid": self.grid,
            "points": self.points,
        })
    }

    /// Reads a manifest document.
    pub fn from_json(v: &Value) -> Option<Manifest> {
        if v.get("layout")?.as_u64()? != LAYOUT {
            return None;
        }
        Some(Manifest {
            base_hash: v.get("base_spec_hash")?.as_str()?.to_string(),
            base_spec: v.get("base_spec")?.clone(),
            grid: v.get("grid")?.clone(),
            points: usize::try_from(v.get("points")?.as_u64()?).ok()?,
        })
    }

    /// Reads `dir/sweep.json`; `None` when the folder has none.
    pub fn read(dir: &Path) -> Result<Option<Manifest>, SweepError> {
        let path = dir.join(MANIFEST);
        let text = match fs::read_to_string(&path) {
            Ok(t) => t,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
            Err(e) => return Err(SweepError::io(&path, e)),
        };
        let v: Value = serde_json::from_str(&text).map_err(|e| SweepError::Folder {
            dir: dir.to_path_buf(),
            message: format!("{MANIFEST} is not valid JSON ({e})"),
        })?;
        Manifest::from_json(&v).map(Some).ok_or_else(|| SweepError::Folder {
            dir: dir.to_path_buf(),
            message: format!(
                "{MANIFEST} is not a sweep manifest of layout {LAYOUT} (written by another version?)"
            ),
        })
    }

    /// Why `other` (found in `dir`) is not this sweep, if it is not.
    pub fn mismatch(&self, other: &Manifest) -> Option<String> {
        if self.base_hash != other.base_hash {
            Some(format!(
                "base spec hash {} there, {} here",
                other.base_hash, self.base_hash
            ))
        } else if self.grid != other.grid {
            Some(format!(
                "another grid ({} points there, {} here)",
                other.points, self.points
            ))
        } else {
            None
        }
    }
}

/// Prepares `dir` for `manifest`: creates and locks it ([`crate::io::lock_dir`]; keep the
/// returned lock while writing) and writes the manifest, or accepts it when it already holds
/// the same sweep. Refuses a folder in use, of another sweep, or with other files.
pub fn claim(dir: &Path, manifest: &Manifest) -> Result<DirLock, SweepError> {
    let lock = crate::io::lock_dir(dir)?;
    match Manifest::read(dir)? {
        Some(old) => {
            if let Some(why) = manifest.mismatch(&old) {
                return Err(SweepError::Folder {
                    dir: dir.to_path_buf(),
                    message: format!(
                        "holds the runs of another sweep ({why}): choose another --out, or remove the folder to start over"
                    ),
                });
            }
            Ok(lock)
        }
        None => {
            let entries = fs::read_dir(dir).map_err(|e| SweepError::io(dir, e))?;
            if let Some(name) = entries
                .filter_map(|e| e.ok())
                .map(|e| e.file_name().to_string_lossy().into_owned())
                .find(|n| !n.starts_with('.'))
            {
                return Err(SweepError::Folder {
                    dir: dir.to_path_buf(),
                    message: format!(
                        "has no {MANIFEST} but holds other files (such as {name}): choose an empty or new folder for --out"
                    ),
                });
            }
            let text = serde_json::to_string_pretty(&manifest.to_json()).unwrap_or_default();
            crate::io::write_atomic(&dir.join(MANIFEST), text.as_bytes())
                .map_err(|e| SweepError::Other(format!("{e:#}")))?;
            Ok(lock)
        }
    }
}

/// One line of `runs.jsonl` as read back.
#[derive(Clone, Debug)]
pub struct Line {
    /// The grid index.
    pub index: usize,
    /// The run's spec hash.
    pub hash: String,
    /// The whole record.
    pub record: Value,
}

/// What reading `runs.jsonl` found.
#[derive(Debug, Default)]
pub struct Scan {
    /// Complete lines.
    pub lines: usize,
    /// Distinct spec hashes of complete lines.
    pub hashes: HashSet<String>,
    /// Bytes of complete lines (the file's length without a truncated tail).
    pub good_len: u64,
    /// Bytes after the last complete line (a line cut by a kill), 0 if none.
    pub partial: u64,
}

/// Reads `path` line by line, handing each complete record to `each`. A last line without
/// its `\n` is counted in [`Scan::partial`], not parsed; a complete line that is not a run
/// record is an error naming its line number.
pub fn scan(path: &Path, mut each: impl FnMut(Line)) -> Result<Scan, SweepError> {
    let mut hashes = HashSet::new();
    let lines = read_lines(path, |record| {
        let index = record
            .get("index")
            .and_then(Value::as_u64)
            .and_then(|i| usize::try_from(i).ok())
            .ok_or_else(|| "no \"index\"".to_string())?;
        let hash = record
            .get("spec_hash")
            .and_then(Value::as_str)
            .ok_or_else(|| "no \"spec_hash\"".to_string())?
            .to_string();
        hashes.insert(hash.clone());
        each(Line {
            index,
            hash,
            record,
        });
        Ok(())
    })?;
    Ok(Scan { hashes, ..lines })
}

/// Reads a JSON Lines file, handing each complete line's value to `each`, which refuses a
/// line by returning why. A missing file reads as empty; a last line without its `\n` (a
/// write cut by a kill) is counted in [`Scan::partial`], not parsed.
pub fn read_lines(
    path: &Path,
    mut each: impl FnMut(Value) -> Result<(), String>,
) -> Result<Scan, SweepError> {
    let mut out = Scan::default();
    let file = match File::open(path) {
        Ok(f) => f,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(out),
        Err(e) => return Err(SweepError::io(path, e)),
    };
    let mut reader = BufReader::new(file);
    let mut buf = Vec::new();
    loop {
        buf.clear();
        let n = reader
            .read_until(b'\n', &mut buf)
            .map_err(|e| SweepError::io(path, e))?;
        if n == 0 {
            break;
        }
        if buf.last() != Some(&b'\n') {
            out.partial = n as u64;
            break;
        }
        let line_no = out.lines + 1;
        let bad = |why: String| {
            SweepError::Folder {
            dir: path.to_path_buf(),
            message: format!(
                "line {line_no} is not a run record ({why}); the file was edited or damaged: remove that line and run again"
            ),
        }
        };
        let record: Value = serde_json::from_slice(&buf).map_err(|e| bad(e.to_string()))?;
        each(record).map_err(bad)?;
        out.lines += 1;
        out.good_len += n as u64;
    }
    Ok(out)
}

/// Cuts `path` to its first `len` bytes by copying them to a temporary file beside it and
/// renaming that over the original, so a kill during the repair leaves one of the two.
pub fn truncate_atomic(path: &Path, len: u64) -> Result<(), SweepError> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let tmp = dir.join(format!(".{name}.repair{}", std::process::id()));
    let result = (|| -> std::io::Result<()> {
        let mut src = File::open(path)?.take(len);
        let mut dst = File::create(&tmp)?;
        std::io::copy(&mut src, &mut dst)?;
        dst.sync_all()?;
        fs::rename(&tmp, path)?;
        if let Ok(d) = File::open(dir) {
            d.sync_all().ok();
        }
        Ok(())
    })();
    if result.is_err() {
        fs::remove_file(&tmp).ok();
    }
    result.map_err(|e| SweepError::io(path, e))
}

/// Appends whole lines to `runs.jsonl`, one at a time.
pub struct Appender {
    path: PathBuf,
    file: Mutex<File>,
}

impl Appender {
    /// Opens `path` for appending (creating it).
    pub fn open(path: &Path) -> Result<Appender, SweepError> {
        let file = OpenOptions::new()
            .create(true)
            .append(true)
            .open(path)
            .map_err(|e| SweepError::io(path, e))?;
        Ok(Appender {
            path: path.to_path_buf(),
            file: Mutex::new(file),
        })
    }

    /// Writes `record` as one line (one `write` of the whole line) and syncs the file.
    pub fn append(&self, record: &Value) -> Result<(), SweepError> {
        let mut line = serde_json::to_vec(record).map_err(|e| SweepError::Other(e.to_string()))?;
        line.push(b'\n');
        let mut f = self
            .file
            .lock()
            .map_err(|_| SweepError::Other("results writer poisoned by a panic".into()))?;
        f.write_all(&line)
            .and_then(|()| f.sync_data())
            .map_err(|e| SweepError::io(&self.path, e))
    }
}

/// A record without its `timing` key: what must be equal between reruns.
pub fn without_timing(record: &Value) -> Value {
    let mut r = record.clone();
    if let Some(m) = r.as_object_mut() {
        m.remove("timing");
    }
    r
}
