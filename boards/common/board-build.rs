//! Build script shared by every board crate (each board's Cargo.toml points `build` here).
//!
//! 1. Copies the board's `memory.x` into OUT_DIR, puts OUT_DIR on the linker search path and
//!    links with cortex-m-rt's `link.x`.
//! 2. Embeds the job blob: the file named by the `TIDEWISE_JOB` environment variable is copied
//!    to OUT_DIR/job.bin (an empty blob when the variable is unset or empty), which `main.rs`
//!    pulls in with `include_bytes!`. The file is only rewritten when its bytes change, so an
//!    unchanged job does not relink the firmware.

use std::env;
use std::fs;
use std::path::{Path, PathBuf};

fn main() {
    if let Err(message) = run() {
        // A build script reports failure by exiting non-zero; the message goes to cargo's stderr.
        eprintln!("error: {message}");
        std::process::exit(1);
    }
}

fn run() -> Result<(), String> {
    let out =
        PathBuf::from(env::var_os("OUT_DIR").ok_or("OUT_DIR is not set (run through cargo)")?);
    let manifest_dir = PathBuf::from(
        env::var_os("CARGO_MANIFEST_DIR")
            .ok_or("CARGO_MANIFEST_DIR is not set (run through cargo)")?,
    );

    let memory = manifest_dir.join("memory.x");
    let layout = fs::read(&memory).map_err(|e| format!("cannot read {}: {e}", memory.display()))?;
    write_if_changed(&out.join("memory.x"), &layout)?;
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rerun-if-changed={}", memory.display());
    println!("cargo:rustc-link-arg=-Tlink.x");

    println!("cargo:rerun-if-env-changed=TIDEWISE_JOB");
    let job = match env::var_os("TIDEWISE_JOB") {
        Some(path) if !path.is_empty() => {
            let path = PathBuf::from(path);
            println!("cargo:rerun-if-changed={}", path.display());
            fs::read(&path).map_err(|e| {
                format!(
                    "TIDEWISE_JOB names {}, which cannot be read: {e}",
                    path.display()
                )
            })?
        }
        _ => Vec::new(),
    };
    write_if_changed(&out.join("job.bin"), &job)
}

fn write_if_changed(path: &Path, bytes: &[u8]) -> Result<(), String> {
    if fs::read(path).ok().as_deref() == Some(bytes) {
        return Ok(());
    }
    fs::write(path, bytes).map_err(|e| format!("cannot write {}: {e}", path.display()))
}
