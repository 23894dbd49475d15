//! The one error type of the board runner.

use std::path::PathBuf;
use std::time::Duration;

/// Why a board could not be chosen, built, run or measured.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum OnchipError {
    /// The board name is not one of [`super::BOARDS`].
    #[error("unknown board \"{name}\"; known boards: {known}")]
    UnknownBoard { name: String, known: String },
    /// The board's firmware folder is missing.
    #[error("board \"{board}\": no firmware crate at {path} (expected a Cargo.toml there; pass the repository's boards/ folder)")]
    BoardDir { board: String, path: PathBuf },
    /// A file could not be read, written or renamed.
    #[error("{path}: {action}: {err}")]
    Io {
        path: PathBuf,
        action: &'static str,
        #[source]
        err: std::io::Error,
    },
    /// A program (cargo, qemu-system-arm) could not be started.
    #[error("cannot start `{program}`: {err}{hint}")]
    Spawn {
        program: String,
        hint: &'static str,
        #[source]
        err: std::io::Error,
    },
    /// `cargo build` for the board failed.
    #[error("board \"{board}\": `cargo build --release` in {dir} failed ({status}); its output:\n{stderr}")]
    BuildFailed {
        board: String,
        dir: PathBuf,
        status: String,
        stderr: String,
    },
    /// The build finished but the firmware image is not where the board's target puts it.
    #[error("board \"{board}\": the build finished but no firmware image is at {path}")]
    ElfMissing { board: String, path: PathBuf },
    /// The firmware image does not carry the job it was built with: another build of the
    /// same board replaced the image in between.
    #[error("board \"{board}\": the image at {path} does not embed the {job_bytes}-byte job it was built with (another build of this board ran at the same time?)")]
    JobNotEmbedded {
        board: String,
        path: PathBuf,
        job_bytes: usize,
    },
    /// The emulator was still running at the deadline and was killed.
    #[error("board \"{board}\": the run did not finish within {timeout:?} and was stopped; output so far:\n{stdout}{stderr}")]
    Timeout {
        board: String,
        timeout: Duration,
        stdout: String,
        stderr: String,
    },
    /// The emulator exited with a non-zero status (the firmware's exit code, or QEMU's own error).
    #[error("board \"{board}\": the run ended with {status}{meaning}; output:\n{stdout}{stderr}")]
    RunFailed {
        board: String,
        status: String,
        meaning: &'static str,
        stdout: String,
        stderr: String,
    },
    /// The firmware's thread stack overflowed its region (its `tw:fault kind=stack_overflow`
    /// line): the fault was caught before the statics were touched.
    #[error("board \"{board}\": stack overflow: the firmware's thread stack of {stack_bytes} bytes ran out (fault with the stack pointer at 0x{sp:08x}, below the region's start 0x{bottom:08x}); the job was stopped before it could overwrite the statics. Raise the board's stack allowance, or use a smaller network")]
    StackOverflow {
        board: String,
        stack_bytes: u64,
        sp: u64,
        bottom: u64,
    },
    /// The file is not an ELF image that can be measured.
    #[error("{path}: not a readable ELF image: {message}")]
    Elf { path: PathBuf, message: String },
    /// A `tw:` line is malformed.
    #[error("report line {line}: {message}: {text:?}")]
    ReportLine {
        line: usize,
        message: String,
        text: String,
    },
    /// A record or field the caller needs is absent from the report.
    #[error("report: {what}")]
    ReportMissing { what: String },
    /// A field's value is not of the expected kind.
    #[error("report line {line}: field {key}={value:?} of record \"{record}\" is not {expected}")]
    ReportValue {
        line: usize,
        record: String,
        key: String,
        value: String,
        expected: &'static str,
    },
    /// The spec cannot be packed into a job.
    #[error("cannot pack the job: {message}")]
    Job { message: String },
    /// The host's reference run failed.
    #[error("host reference run: {message}")]
    Host { message: String },
    /// The firmware decoded the job and refused it (its `tw:error` line).
    #[error("the firmware rejected the job: {message}")]
    Rejected { message: String },
    /// The spec's formats need a wider word container than the board's build supports.
    #[error("board \"{board}\" supports words of at most {max} bits, but the spec's formats need {need}-bit containers ({detail}); narrow those formats to {max} bits or use another board")]
    Container {
        board: String,
        need: u32,
        max: u32,
        detail: String,
    },
    /// The job, checked before building, needs more memory than the board has.
    #[error("board \"{board}\" cannot hold this job: it needs {need} bytes of {memory} ({detail}) but has {have}; {advice}")]
    JobTooLarge {
        board: String,
        memory: &'static str,
        need: u64,
        have: u64,
        detail: String,
        advice: &'static str,
    },
    /// The image needs more memory than the board has.
    #[error(
        "board \"{board}\": the image needs {need} bytes of {memory} but the board has {have}"
    )]
    DoesNotFit {
        board: String,
        memory: &'static str,
        need: u64,
        have: u64,
    },
}
