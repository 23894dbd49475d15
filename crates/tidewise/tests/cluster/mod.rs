//! The one-node Slurm cluster of `ci/slurm/up.sh`, for the tests that submit array jobs.
// Each test crate that includes this module uses some of its helpers.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// The repository root.
pub fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// Whether `TIDEWISE_REQUIRE_SLURM=1` makes a missing cluster a failure.
pub fn required() -> bool {
    std::env::var("TIDEWISE_REQUIRE_SLURM").is_ok_and(|v| v == "1")
}

/// Starts the cluster; `false` (after saying why, naming `test`) when it cannot and it is not
/// required.
pub fn slurm_or_skip(test: &str) -> bool {
    let up = repo().join("ci/slurm/up.sh");
    let reason = match Command::new("bash").arg(&up).output() {
        Ok(o) if o.status.success() => return true,
        Ok(o) => format!(
            "{} exited with {}:\n{}",
            up.display(),
            o.status,
            String::from_utf8_lossy(&o.stderr)
        ),
        Err(e) => format!("cannot run {}: {e}", up.display()),
    };
    if required() {
        panic!("Slurm did not start and TIDEWISE_REQUIRE_SLURM=1: {reason}");
    }
    eprintln!("{test}: skipped: Slurm did not start ({reason}); set TIDEWISE_REQUIRE_SLURM=1 to make this a failure");
    false
}
