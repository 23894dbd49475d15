//! Output files: written atomically, and never over another spec's results.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{bail, Context, Result};

/// Writes `bytes` to `path` through a temporary file in the same folder and a rename, so a
/// killed run leaves either the old file or the new one, never half of one.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let tmp = dir.join(format!(".{name}.tmp{}", std::process::id()));
    {
        let mut f =
            fs::File::create(&tmp).with_context(|| format!("cannot create {}", tmp.display()))?;
        f.write_all(bytes)
            .with_context(|| format!("cannot write {}", tmp.display()))?;
        f.sync_all().ok();
    }
    fs::rename(&tmp, path).with_context(|| format!("cannot move {} into place", path.display()))?;
    Ok(())
}

/// The marker file naming the spec whose results a folder holds.
pub const SPEC_MARK: &str = "spec.hash";

/// Prepares `dir` for the results of the spec with hash `hash`: creates it, or accepts it
/// when it is empty, holds results of the same spec, or `force` is set.
pub fn claim_dir(dir: &Path, hash: &str, force: bool) -> Result<PathBuf> {
    fs::create_dir_all(dir)
        .with_context(|| format!("cannot create output folder {}", dir.display()))?;
    let mark = dir.join(SPEC_MARK);
    match fs::read_to_string(&mark) {
        Ok(old) if old.trim() != hash && !force => bail!(
            "output folder {} holds results of another spec (hash {}, this spec {hash}): choose another --out or pass --force",
            dir.display(),
            old.trim()
        ),
        Ok(_) => {}
        Err(_) => {
            let foreign = fs::read_dir(dir)?
                .filter_map(|e| e.ok())
                .any(|e| !e.file_name().to_string_lossy().starts_with('.'));
            if foreign && !force {
                bail!(
                    "output folder {} already holds files that are not tidewise results: choose another --out or pass --force",
                    dir.display()
                );
            }
        }
    }
    write_atomic(&mark, format!("{hash}\n").as_bytes())?;
    Ok(dir.to_path_buf())
}
