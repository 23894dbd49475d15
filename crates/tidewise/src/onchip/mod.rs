//! Board runner: builds a board's firmware with a job embedded, runs it under QEMU, and reads
//! what it reports and how much memory it takes.
//!
//! ```no_run
//! use std::path::Path;
//! use std::time::Duration;
//! use tidewise::onchip::{self, Report};
//!
//! let board = onchip::board("microbit")?;
//! let elf = onchip::build(&board, &onchip::default_boards_dir(), Path::new("job.bin"))?;
//! let fp = onchip::footprint(&elf)?;
//! board.check_fits(&fp)?;
//! let stdout = onchip::run(&board, &elf, Duration::from_secs(60))?;
//! let report = Report::parse(&stdout)?;
//! let dot = report.workload("dot_i16")?;
//! println!("{} instructions, {} flash bytes", dot.u64("instr")?, fp.flash_bytes);
//! # Ok::<(), onchip::OnchipError>(())
//! ```
//!
//! Instruction counts come from SysTick under `-icount shift=0`, where each instruction takes
//! 1 ns of virtual time: instructions = ticks x 10^9 / clock_hz (see `boards/README.md`).

pub mod compare;
mod error;
mod footprint;
pub mod job;
pub mod macs;
mod report;
pub mod session;

use std::ffi::OsString;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::Mutex;
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

pub use error::OnchipError;
pub use footprint::{footprint, Footprint, Section, SectionClass, STACK_SECTION};
pub use report::{Record, Report, PREFIX};
pub use session::{budget, prepare, train, Budget, Outcome};

/// The emulator program.
pub const QEMU: &str = "qemu-system-arm";

/// RAM the firmware keeps above its statics for the main stack (reset code, `main`, the
/// exception handlers): `HANDLER_STACK_BYTES` in `boards/common/board-build.rs`, whose linker
/// script refuses an image that leaves less.
pub const HANDLER_STACK_BYTES: u64 = 1024;

/// A board the firmware can be built for and run on.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Board {
    /// Name, also the firmware folder under `boards/`.
    pub name: &'static str,
    /// Processor core.
    pub core: &'static str,
    /// Rust target triple.
    pub target: &'static str,
    /// QEMU `-machine` value.
    pub qemu_machine: &'static str,
    /// QEMU `-cpu` value.
    pub qemu_cpu: &'static str,
    /// Core clock feeding SysTick, in Hz.
    pub clock_hz: u32,
    /// Start of the code memory.
    pub flash_origin: u64,
    /// Size of the code memory in bytes.
    pub flash_bytes: u64,
    /// Start of the data memory.
    pub ram_origin: u64,
    /// Size of the data memory in bytes.
    pub ram_bytes: u64,
    /// Name of the firmware binary (and package).
    pub bin: &'static str,
    /// Widest word container a job may use on this board.
    pub max_container_bits: u32,
    /// Flash the firmware takes besides the job (code, constants), for the check before a
    /// build; measured on the training firmware and rounded up.
    pub code_allowance: u64,
    /// The thread stack the firmware is built with (`TIDEWISE_STACK_BYTES`, a multiple of 8),
    /// reserved below the statics: a deeper stack faults and the run reports a stack
    /// overflow. Measured (the `tw:stack` peak of the training firmware) with a margin.
    pub stack_allowance: u64,
    /// Static RAM besides the arena and the order buffer (counter, output handle).
    pub static_allowance: u64,
}

/// The boards this build knows. Memory maps: QEMU `hw/arm/nrf51_soc.c` (microbit) and
/// `hw/arm/mps2.c` (AN386 uses the AN385 layout), QEMU's own board sources
/// (`docs/references.md` \[20\]).
pub const BOARDS: &[Board] = &[
    Board {
        name: "mps2-an386",
        core: "Cortex-M4F",
        target: "thumbv7em-none-eabihf",
        qemu_machine: "mps2-an386",
        qemu_cpu: "cortex-m4",
        clock_hz: 25_000_000,
        flash_origin: 0x0000_0000,
        flash_bytes: 4 * 1024 * 1024,
        ram_origin: 0x2000_0000,
        ram_bytes: 4 * 1024 * 1024,
        bin: "tidewise-mps2-an386",
        max_container_bits: 32,
        // Measured: 99.9 KB of code and constants besides the job (98.1 KB before the
        // per-layer rate scaling, 84.8 KB before the 32-bit back end and later rules work);
        // 7.2 KiB of stack (4.2 KiB before per-layer formats: the learner's frame holds the
        // back end, now with its [layer][class] format table, about three times); 8.1 KiB
        // since jobs train through the streaming learner (`tidewise_core::learner`), which
        // owns its back end; 6.1 KiB since the learner lives in a static. The board has 4 MiB
        // of flash, so the allowance leaves room. The thread stack is built at this size.
        code_allowance: 104 * 1024,
        stack_allowance: 7 * 1024 + 512,
        static_allowance: 64,
    },
    Board {
        name: "microbit",
        core: "Cortex-M0",
        target: "thumbv6m-none-eabi",
        qemu_machine: "microbit",
        qemu_cpu: "cortex-m0",
        clock_hz: 16_000_000,
        flash_origin: 0x0000_0000,
        flash_bytes: 256 * 1024,
        ram_origin: 0x2000_0000,
        ram_bytes: 16 * 1024,
        bin: "tidewise-microbit",
        // The Cortex-M0 multiplies 32 x 32 -> 32 bits only: 32-bit words would make every
        // product of a MAC a library call for the 64-bit result. 8- and 16-bit words only.
        max_container_bits: 16,
        // Measured: 98.7 KB of code and constants besides the job (78.4 KB before the
        // streaming learner, the counter-based rounding and the per-layer rates); 7.3 KiB of
        // stack (4.3 KiB before per-layer formats; 8.3 KiB through the streaming learner;
        // 6.4 KiB since the learner lives in a static, so the 7.5 KiB thread stack leaves
        // over 1 KiB of margin). The nRF51822 has 256 KiB of flash.
        code_allowance: 104 * 1024,
        stack_allowance: 7 * 1024 + 512,
        static_allowance: 64,
    },
];

/// The board called `name`.
pub fn board(name: &str) -> Result<Board, OnchipError> {
    BOARDS
        .iter()
        .find(|b| b.name == name)
        .cloned()
        .ok_or_else(|| OnchipError::UnknownBoard {
            name: name.to_string(),
            known: BOARDS.iter().map(|b| b.name).collect::<Vec<_>>().join(", "),
        })
}

/// The repository's `boards/` folder, as seen when this crate was compiled.
pub fn default_boards_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../boards")
}

/// True when `qemu-system-arm` can be started.
pub fn qemu_available() -> bool {
    Command::new(QEMU)
        .arg("--version")
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success())
}

impl Board {
    /// Instructions that `ticks` SysTick ticks stand for under `-icount shift=0`, rounded
    /// to nearest.
    pub fn instructions(&self, ticks: u64) -> u64 {
        let hz = u128::from(self.clock_hz.max(1));
        ((u128::from(ticks) * 1_000_000_000 + hz / 2) / hz) as u64
    }

    /// The emulator arguments that boot `elf` on this board.
    pub fn qemu_args(&self, elf: &Path) -> Vec<OsString> {
        let mut args: Vec<OsString> = [
            "-machine",
            self.qemu_machine,
            "-cpu",
            self.qemu_cpu,
            "-nographic",
            "-monitor",
            "none",
            "-semihosting-config",
            "enable=on,target=native",
            "-icount",
            "shift=0",
            "-kernel",
        ]
        .iter()
        .map(OsString::from)
        .collect();
        args.push(elf.as_os_str().to_owned());
        args
    }

    /// Checks that the image's load image fits the code memory and its statics the data memory.
    pub fn check_fits(&self, fp: &Footprint) -> Result<(), OnchipError> {
        for (memory, need, have) in [
            ("flash", fp.flash_bytes, self.flash_bytes),
            ("static RAM", fp.ram_bytes, self.ram_bytes),
            (
                "RAM (statics, thread stack and handler stack)",
                fp.ram_bytes + fp.stack_bytes + HANDLER_STACK_BYTES,
                self.ram_bytes,
            ),
        ] {
            if need > have {
                return Err(OnchipError::DoesNotFit {
                    board: self.name.to_string(),
                    memory,
                    need,
                    have,
                });
            }
        }
        Ok(())
    }
}

/// FNV-1a, 64-bit: names the image copy of one job.
fn fnv1a64(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf2_9ce4_8422_2325, |h, &b| {
        (h ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3)
    })
}

/// Builds of one process run one at a time, so that the image copied after a build is the one
/// that build linked.
static BUILD_LOCK: Mutex<()> = Mutex::new(());

/// Environment variables that would redirect or break a cross build started from a host build
/// (cleared by [`build`]; for other firmware builds started from the host).
pub const CLEARED_ENV: &[&str] = &[
    "RUSTFLAGS",
    "CARGO_ENCODED_RUSTFLAGS",
    "CARGO_BUILD_RUSTFLAGS",
    "CARGO_BUILD_TARGET",
    "CARGO_TARGET_DIR",
    "CARGO_BUILD_TARGET_DIR",
];

/// Builds the firmware of `board` from `boards_dir/<board.name>` with the job file `job`
/// embedded and a thread stack of `board.stack_allowance` bytes (`cargo build --release`,
/// `TIDEWISE_JOB` and `TIDEWISE_STACK_BYTES` set), and returns the path of a copy of the
/// image named after the job's contents and the stack size
/// (`<bin>-<FNV-1a 64 of the job>-s<stack bytes>.elf` beside the linked image), so that later builds of the same board with other jobs leave it in place.
/// Builds within one process are serialised; a build that finds its image replaced by another
/// process's build is retried. The copies stay until `boards/target` is cleaned.
pub fn build(board: &Board, boards_dir: &Path, job: &Path) -> Result<PathBuf, OnchipError> {
    let dir = boards_dir.join(board.name);
    if !dir.join("Cargo.toml").is_file() {
        return Err(OnchipError::BoardDir {
            board: board.name.to_string(),
            path: dir,
        });
    }
    let io = |path: &Path, action: &'static str| {
        let path = path.to_path_buf();
        move |err| OnchipError::Io { path, action, err }
    };
    let job = std::fs::canonicalize(job).map_err(io(job, "cannot open the job file"))?;
    let job_bytes = std::fs::read(&job).map_err(io(&job, "cannot read the job file"))?;
    let target_dir = boards_dir.join("target");
    let release = target_dir.join(board.target).join("release");
    let linked = release.join(board.bin);
    let copy = release.join(format!(
        "{}-{:016x}-s{}.elf",
        board.bin,
        fnv1a64(&job_bytes),
        board.stack_allowance
    ));

    let _guard = BUILD_LOCK
        .lock()
        .unwrap_or_else(|poisoned| poisoned.into_inner());
    let mut attempts = 0;
    let image = loop {
        attempts += 1;
        let image = cargo_build(board, &dir, &job, &target_dir, &linked)?;
        if footprint::embeds(&image, &job_bytes) {
            break image;
        }
        // Another process built this board with another job between our build and our read
        // of the image: build again.
        if attempts == BUILD_ATTEMPTS {
            return Err(OnchipError::JobNotEmbedded {
                board: board.name.to_string(),
                path: linked,
                job_bytes: job_bytes.len(),
            });
        }
    };
    // Write then rename, so a reader never sees a half-written copy.
    let partial = copy.with_extension(format!("elf.{}.partial", std::process::id()));
    std::fs::write(&partial, &image).map_err(io(&partial, "cannot write the image copy"))?;
    std::fs::rename(&partial, &copy)
        .map_err(io(&copy, "cannot rename the image copy into place"))?;
    Ok(copy)
}

/// Builds tried before giving up on an image that lacks its job.
const BUILD_ATTEMPTS: u32 = 3;

/// Runs `cargo build --release` for the board and returns the linked image.
fn cargo_build(
    board: &Board,
    dir: &Path,
    job: &Path,
    target_dir: &Path,
    linked: &Path,
) -> Result<Vec<u8>, OnchipError> {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| OsString::from("cargo"));
    let mut cmd = Command::new(&cargo);
    cmd.args(["build", "--release", "--color", "never", "--target-dir"])
        .arg(target_dir)
        .current_dir(dir)
        .env("TIDEWISE_JOB", job)
        .env("TIDEWISE_STACK_BYTES", board.stack_allowance.to_string())
        .stdin(Stdio::null());
    for var in CLEARED_ENV {
        cmd.env_remove(var);
    }
    let out = cmd.output().map_err(|err| OnchipError::Spawn {
        program: cargo.to_string_lossy().into_owned(),
        hint: " (is the Rust toolchain installed?)",
        err,
    })?;
    if !out.status.success() {
        return Err(OnchipError::BuildFailed {
            board: board.name.to_string(),
            dir: dir.to_path_buf(),
            status: describe(out.status),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
        });
    }
    std::fs::read(linked).map_err(|err| {
        if err.kind() == std::io::ErrorKind::NotFound {
            OnchipError::ElfMissing {
                board: board.name.to_string(),
                path: linked.to_path_buf(),
            }
        } else {
            OnchipError::Io {
                path: linked.to_path_buf(),
                action: "cannot read the firmware image",
                err,
            }
        }
    })
}

fn describe(status: ExitStatus) -> String {
    match status.code() {
        Some(code) => format!("exit status {code}"),
        None => format!("{status}"),
    }
}

/// What a firmware exit status means (see `boards/common/src/exit.rs`).
fn meaning(status: ExitStatus) -> &'static str {
    match status.code() {
        Some(1) => " (QEMU error, or a semihosting exit without a status)",
        Some(2) => " (the firmware rejected its job)",
        Some(101) => " (the firmware panicked)",
        Some(102) => " (HardFault)",
        Some(103) => " (unexpected exception or interrupt)",
        Some(104) => " (stack overflow: the thread stack ran past its region)",
        _ => "",
    }
}

/// The firmware's stack-overflow report (`tw:fault kind=stack_overflow`) as an error.
fn stack_overflow(board: &Board, stdout: &str) -> Option<OnchipError> {
    let report = Report::parse(stdout).ok()?;
    let fault = report
        .records
        .iter()
        .find(|r| r.kind == "fault" && r.get("kind") == Some("stack_overflow"))?;
    Some(OnchipError::StackOverflow {
        board: board.name.to_string(),
        stack_bytes: fault.u64("stack_bytes").ok()?,
        sp: fault.u64("sp").ok()?,
        bottom: fault.u64("stack_bottom").ok()?,
    })
}

fn collect(mut pipe: impl Read + Send + 'static) -> JoinHandle<Vec<u8>> {
    std::thread::spawn(move || {
        let mut buf = Vec::new();
        // A read error just ends the capture; what was read so far is kept.
        let _ = pipe.read_to_end(&mut buf);
        buf
    })
}

fn joined(handle: Option<JoinHandle<Vec<u8>>>) -> String {
    let bytes = handle.and_then(|h| h.join().ok()).unwrap_or_default();
    String::from_utf8_lossy(&bytes).into_owned()
}

/// Waits for `child` until `deadline`; `None` when the deadline passed first.
fn wait_until(child: &mut Child, deadline: Instant) -> std::io::Result<Option<ExitStatus>> {
    let mut pause = Duration::from_millis(1);
    loop {
        if let Some(status) = child.try_wait()? {
            return Ok(Some(status));
        }
        let now = Instant::now();
        if now >= deadline {
            return Ok(None);
        }
        std::thread::sleep(pause.min(deadline - now));
        pause = (pause * 2).min(Duration::from_millis(25));
    }
}

/// Boots `elf` on `board` under QEMU (semihosting on, `-icount shift=0`) and returns its
/// standard output once it exits with status 0. A run still going at `timeout` is killed.
pub fn run(board: &Board, elf: &Path, timeout: Duration) -> Result<String, OnchipError> {
    if !elf.is_file() {
        return Err(OnchipError::ElfMissing {
            board: board.name.to_string(),
            path: elf.to_path_buf(),
        });
    }
    let mut child = Command::new(QEMU)
        .args(board.qemu_args(elf))
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|err| OnchipError::Spawn {
            program: QEMU.to_string(),
            hint: " (install it with ci/qemu.sh, or the package qemu-system-arm)",
            err,
        })?;
    let stdout = child.stdout.take().map(collect);
    let stderr = child.stderr.take().map(collect);
    let waited = wait_until(&mut child, Instant::now() + timeout);
    let status = match waited {
        Ok(Some(status)) => status,
        Ok(None) | Err(_) => {
            // Killing fails only if it already exited; reap it either way.
            let _ = child.kill();
            let _ = child.wait();
            let (stdout, stderr) = (joined(stdout), joined(stderr));
            return match waited {
                Err(err) => Err(OnchipError::Spawn {
                    program: QEMU.to_string(),
                    hint: " (waiting for it failed)",
                    err,
                }),
                _ => Err(OnchipError::Timeout {
                    board: board.name.to_string(),
                    timeout,
                    stdout,
                    stderr,
                }),
            };
        }
    };
    let (stdout, stderr) = (joined(stdout), joined(stderr));
    if status.success() {
        Ok(stdout)
    } else if let Some(overflow) = stack_overflow(board, &stdout) {
        Err(overflow)
    } else {
        Err(OnchipError::RunFailed {
            board: board.name.to_string(),
            status: describe(status),
            meaning: meaning(status),
            stdout,
            stderr,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_and_unknown_boards() {
        assert_eq!(board("microbit").unwrap().ram_bytes, 16 * 1024);
        let err = board("nrf52").unwrap_err().to_string();
        assert_eq!(
            err,
            "unknown board \"nrf52\"; known boards: mps2-an386, microbit"
        );
    }

    #[test]
    fn ticks_to_instructions() {
        // 1 ns per instruction: one 25 MHz tick is 40 instructions, one 16 MHz tick 62.5.
        assert_eq!(
            board("mps2-an386").unwrap().instructions(250_001),
            10_000_040
        );
        assert_eq!(board("microbit").unwrap().instructions(3), 188);
        assert_eq!(board("microbit").unwrap().instructions(160_000), 10_000_000);
    }

    #[test]
    fn fit_check_names_the_memory() {
        let b = board("microbit").unwrap();
        let mut fp = Footprint {
            code_bytes: 1000,
            rodata_bytes: 0,
            data_bytes: 0,
            zeroed_bytes: 20_000,
            flash_bytes: 1000,
            ram_bytes: 20_000,
            stack_bytes: 0,
            sections: Vec::new(),
        };
        let err = b.check_fits(&fp).unwrap_err().to_string();
        assert_eq!(
            err,
            "board \"microbit\": the image needs 20000 bytes of static RAM but the board has 16384"
        );
        fp.ram_bytes = 16 * 1024 - HANDLER_STACK_BYTES;
        assert!(b.check_fits(&fp).is_ok());
        // The thread stack region and the handlers' stack count against the RAM too.
        fp.stack_bytes = 8;
        let err = b.check_fits(&fp).unwrap_err().to_string();
        assert!(
            err.contains("16392 bytes of RAM (statics, thread stack"),
            "{err}"
        );
    }

    #[test]
    fn missing_inputs_are_errors_not_panics() {
        let b = board("microbit").unwrap();
        let dir = tempfile::tempdir().unwrap();
        let err = build(&b, dir.path(), Path::new("no-such-job.bin")).unwrap_err();
        assert!(matches!(err, OnchipError::BoardDir { .. }), "{err}");
        let err = run(&b, &dir.path().join("missing.elf"), Duration::from_secs(1)).unwrap_err();
        assert!(matches!(err, OnchipError::ElfMissing { .. }), "{err}");
        let boards = default_boards_dir();
        let err = build(&b, &boards, &dir.path().join("no-such-job.bin")).unwrap_err();
        assert!(
            err.to_string().contains("cannot open the job file"),
            "{err}"
        );
    }
}
