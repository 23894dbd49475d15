//! Output files: written atomically, never over another spec's results, and never by two
//! runs at once.

use std::fs;
use std::io::Write;
use std::ops::Deref;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

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

/// The lock file inside an output folder (a dot file, so the folder checks pass over it).
pub const LOCK_FILE: &str = ".tidewise.lock";

/// Why an output folder could not be locked.
#[derive(Debug, thiserror::Error)]
pub enum LockError {
    /// Another run holds the folder.
    #[error(
        "output folder {} is in use by another tidewise run (lock file {}); wait for it or choose another folder",
        dir.display(),
        dir.join(LOCK_FILE).display()
    )]
    InUse {
        /// The folder.
        dir: PathBuf,
    },
    /// The folder or its lock file cannot be made or locked.
    #[error("cannot {what} {}: {source}", path.display())]
    Io {
        /// What failed ("create output folder", "open the lock file", "lock").
        what: &'static str,
        /// The folder or the lock file.
        path: PathBuf,
        /// The reason.
        source: std::io::Error,
    },
}

/// An output folder held exclusively by this run until the last clone is dropped (or the
/// process ends, however it ends: the operating system releases the lock). Derefs to the
/// folder's path.
#[derive(Clone, Debug)]
pub struct DirLock {
    dir: PathBuf,
    _file: Arc<fs::File>,
}

impl Deref for DirLock {
    type Target = Path;
    fn deref(&self) -> &Path {
        &self.dir
    }
}

impl AsRef<Path> for DirLock {
    fn as_ref(&self) -> &Path {
        &self.dir
    }
}

/// Creates `dir` if needed and takes the exclusive lock on it that every command writing a
/// result folder holds for its whole life. A folder another run holds is refused
/// ([`LockError::InUse`]) after a short grace ([`LOCK_GRACE`]) rather than waited for. The lock is advisory (the
/// operating system's file lock on [`LOCK_FILE`]): it keeps tidewise runs apart, not other
/// programs.
pub fn lock_dir(dir: &Path) -> Result<DirLock, LockError> {
    let io = |what, path: &Path| {
        let path = path.to_path_buf();
        move |source| LockError::Io { what, path, source }
    };
    fs::create_dir_all(dir).map_err(io("create output folder", dir))?;
    let path = dir.join(LOCK_FILE);
    let file = fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(&path)
        .map_err(io("open the lock file", &path))?;
    let mut waited = Duration::ZERO;
    loop {
        match file.try_lock() {
            Ok(()) => {
                return Ok(DirLock {
                    dir: dir.to_path_buf(),
                    _file: Arc::new(file),
                })
            }
            Err(fs::TryLockError::WouldBlock) if waited < LOCK_GRACE => {
                std::thread::sleep(LOCK_POLL);
                waited += LOCK_POLL;
            }
            Err(fs::TryLockError::WouldBlock) => {
                return Err(LockError::InUse {
                    dir: dir.to_path_buf(),
                })
            }
            Err(fs::TryLockError::Error(e)) => return Err(io("lock", &path)(e)),
        }
    }
}

/// How long [`lock_dir`] keeps trying a held lock before it refuses. A `flock(2)` lock
/// belongs to the open file, which a child process forked by another thread shares until
/// it executes its program: a lock this process has just released can look held for that
/// instant. Real runs hold a folder for seconds or more, so the grace changes no answer.
pub const LOCK_GRACE: Duration = Duration::from_millis(500);
/// The pause between two tries within [`LOCK_GRACE`].
const LOCK_POLL: Duration = Duration::from_millis(10);

/// Prepares `dir` for the results of the spec with hash `hash`: creates and locks it
/// ([`lock_dir`]), and accepts it when it is empty, holds results of the same spec, or
/// `force` is set. Keep the returned lock for as long as the command writes.
pub fn claim_dir(dir: &Path, hash: &str, force: bool) -> Result<DirLock> {
    let lock = lock_dir(dir)?;
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
    Ok(lock)
}
