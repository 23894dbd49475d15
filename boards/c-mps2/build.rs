//! Build script of the C example firmware: the shared board steps (`common/board-build.rs`:
//! memory layout, thread stack below the statics; no job is embedded), then the C sources
//! compiled for the Cortex-M4F with arm-none-eabi-gcc: `stream.c` (the loop the host
//! example runs too), `board.c` (the entry point) and the configuration and samples, a C
//! file named by `TIDEWISE_C_DATA` (the tests generate it from the host's encoded data; a
//! small invented one, `default-data.c`, when the variable is unset).

use std::path::PathBuf;

#[path = "../common/board-build.rs"]
mod board_build;

fn main() {
    if let Err(message) = build() {
        eprintln!("error: {message}");
        std::process::exit(1);
    }
}

fn build() -> Result<(), String> {
    board_build::run()?;
    let here = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let example = here.join("../../crates/tidewise-c/examples/c");
    let include = here.join("../../crates/tidewise-c/include");
    println!("cargo:rerun-if-env-changed=TIDEWISE_C_DATA");
    let data = match std::env::var_os("TIDEWISE_C_DATA") {
        Some(p) if !p.is_empty() => PathBuf::from(p),
        _ => here.join("src/default-data.c"),
    };
    if !data.is_file() {
        return Err(format!(
            "TIDEWISE_C_DATA names {}, which is not a file",
            data.display()
        ));
    }
    for f in [
        example.join("stream.c"),
        example.join("stream.h"),
        here.join("src/board.c"),
        data.clone(),
        include.join("tidewise.h"),
    ] {
        println!("cargo:rerun-if-changed={}", f.display());
    }
    // Compiled under one name, so the archive never keeps an object of an earlier data file
    // (two definitions of the data, of which the linker would take the first).
    let out = PathBuf::from(std::env::var_os("OUT_DIR").ok_or("OUT_DIR is not set")?);
    let copy = out.join("tidewise_data.c");
    let text = std::fs::read(&data).map_err(|e| format!("cannot read {}: {e}", data.display()))?;
    // The data's hash goes into the Rust binary (its `board` record), so cargo relinks it
    // whenever the data change: a changed native archive alone does not relink.
    println!(
        "cargo:rustc-env=TIDEWISE_C_DATA_FNV1A32={:#010x}",
        fnv1a32(&text)
    );
    if std::fs::read(&copy).ok() != Some(text.clone()) {
        std::fs::write(&copy, text).map_err(|e| format!("cannot write {}: {e}", copy.display()))?;
    }
    cc::Build::new()
        .compiler("arm-none-eabi-gcc")
        .include(&include)
        .include(&example)
        .file(example.join("stream.c"))
        .file(here.join("src/board.c"))
        .file(&copy)
        .flag("-std=c99")
        .flag("-mcpu=cortex-m4")
        .flag("-mfloat-abi=hard")
        .flag("-mfpu=fpv4-sp-d16")
        .flag("-ffreestanding")
        .flag("-Wall")
        .flag("-Wextra")
        .flag("-Werror")
        .opt_level(2)
        .try_compile("tidewise_c_example")
        .map_err(|e| {
            format!("compiling the C example with arm-none-eabi-gcc failed (install it with `bash ci/arm-gcc.sh`): {e}")
        })
}

/// FNV-1a, 32-bit (as the firmware's `job` record uses).
fn fnv1a32(bytes: &[u8]) -> u32 {
    bytes.iter().fold(0x811c_9dc5, |h, &b| {
        (h ^ u32::from(b)).wrapping_mul(0x0100_0193)
    })
}
