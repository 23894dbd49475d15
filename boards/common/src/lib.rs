//! Firmware pieces shared by every tidewise board: the `tw:` report lines over semihosting,
//! the SysTick instruction counter, exit codes, the panic and fault handlers, and the
//! measured workloads. Each board's `main.rs` is one [`firmware!`] call naming the board
//! and its core clock.
//!
//! The line format is described in `boards/README.md`; the host parser lives in
//! `crates/tidewise/src/onchip/report.rs`.
#![no_std]

pub mod counter;
pub mod exit;
mod firmware;
pub mod learn;
pub mod memory;
pub mod report;
pub mod stack;
pub mod workload;

use bytemuck::Pod;
use cortex_m::peripheral::SYST;
use tidewise_core::backend::Word;

pub use learn::Aligned;

/// Version of the `tw:` line format, printed in the `board` record.
pub const REPORT_VERSION: u32 = 2;

/// What the firmware knows about the board it runs on.
pub struct BoardInfo {
    /// Board name as the host knows it (`mps2-an386`, `microbit`).
    pub name: &'static str,
    /// Core clock feeding SysTick, in Hz.
    pub clock_hz: u32,
}

/// What `main` hands the thread code: the board, SysTick, the job blob and the static buffers.
pub struct Task<W: Word + 'static> {
    /// The board.
    pub board: &'static BoardInfo,
    /// SysTick, for the instruction counter.
    pub syst: SYST,
    /// The embedded job blob (empty: run the workload).
    pub job: &'static [u8],
    /// The network's arena.
    pub arena: &'static mut [W],
    /// The sample order buffer.
    pub order: &'static mut [u32],
    /// Storage for the learner.
    pub learner: &'static mut learn::Slot<W>,
}

/// Runs `task` on the thread stack ([`stack`]): switches thread mode to the process stack
/// and calls [`run`] there. Call from `main`; never returns.
pub fn start<W: Word + Pod>(task: Task<W>) -> ! {
    let mut task = task;
    stack::run_on_thread_stack(thread::<W>, core::ptr::from_mut(&mut task).cast())
}

extern "C" fn thread<W: Word + Pod>(task: *mut ()) -> ! {
    // SAFETY: `start` passes a pointer to its own `Task`, which stays in its frame on the main
    // stack (it never returns) and is not used there again: it is moved out once, here.
    let task = unsafe { task.cast::<Task<W>>().read() };
    run(task)
}

/// Runs the firmware: reports the board and the job blob and calibrates the instruction
/// counter; then, with no job, runs the measured workload, and with a job, decodes it and
/// trains it in the task's arena with the sample order in its order buffer (a rejected job
/// prints `tw:error` and exits with [`exit::JOB_REJECTED`]); finally reports the memory
/// layout and the thread stack's high-water mark and exits through semihosting with
/// [`exit::OK`].
pub fn run<W: Word + Pod>(task: Task<W>) -> ! {
    let Task {
        board,
        syst,
        job,
        arena,
        order,
        learner,
    } = task;
    let painted = memory::paint();
    let clock = counter::Counter::start(syst, board.clock_hz);
    tw!(
        "board name={} clock_hz={} systick_period={} version={}",
        board.name,
        board.clock_hz,
        counter::PERIOD,
        REPORT_VERSION
    );
    tw!(
        "job bytes={} fnv1a32=0x{:08x}",
        job.len(),
        workload::fnv1a32(job)
    );

    let calib = workload::calibrate(&clock, workload::CALIBRATION_LOOPS);
    tw!(
        "calib loops={} expect_instr={} ticks={} instr={} wraps={}",
        workload::CALIBRATION_LOOPS,
        calib.expected_instructions,
        calib.ticks,
        clock.instructions(calib.ticks),
        calib.wraps
    );

    if job.is_empty() {
        dot(&clock);
    } else if let Err(e) = learn::learn(&clock, job, arena, order, learner) {
        tw!("error msg={}", e);
        exit::exit(exit::JOB_REJECTED);
    }
    let layout = memory::layout();
    tw!(
        "layout text_bytes={} rodata_bytes={} data_bytes={} bss_bytes={} uninit_bytes={}",
        layout.text,
        layout.rodata,
        layout.data,
        layout.bss,
        layout.uninit
    );
    painted.report();
    tw!("end status=ok");
    exit::exit(exit::OK)
}

/// The `dot_i16` workload and its record. Kept out of line: its 4 KiB of operands then take
/// stack only in workload runs, not under a training job.
#[inline(never)]
fn dot(clock: &counter::Counter) {
    let dot = workload::dot_workload(clock);
    tw!(
        "workload name=dot_i16 n={} reps={} seed={} macs={} result={} total={} ticks={} instr={}",
        workload::DOT_LEN,
        workload::DOT_REPS,
        workload::DOT_SEED,
        workload::DOT_LEN as u64 * u64::from(workload::DOT_REPS),
        dot.result,
        dot.total,
        dot.ticks,
        clock.instructions(dot.ticks)
    );
}
