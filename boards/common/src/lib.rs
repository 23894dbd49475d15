//! Firmware pieces shared by every tidewise board: the `tw:` report lines over semihosting,
//! the SysTick instruction counter, exit codes, the panic and fault handlers, and the
//! measured workloads. Each board's `main.rs` only names its board and forwards its
//! exception handlers here.
//!
//! The line format is described in `boards/README.md`; the host parser lives in
//! `crates/tidewise/src/onchip/report.rs`.
#![no_std]

pub mod counter;
pub mod exit;
pub mod memory;
pub mod report;
pub mod workload;

use cortex_m::peripheral::SYST;

/// Version of the `tw:` line format, printed in the `board` record.
pub const REPORT_VERSION: u32 = 1;

/// What the firmware knows about the board it runs on.
pub struct BoardInfo {
    /// Board name as the host knows it (`mps2-an386`, `microbit`).
    pub name: &'static str,
    /// Core clock feeding SysTick, in Hz.
    pub clock_hz: u32,
}

/// Runs the firmware: reports the board and the job blob, calibrates the instruction counter,
/// runs the measured workload, reports its memory layout and stack high-water mark and exits through semihosting with [`exit::OK`].
pub fn run(board: &BoardInfo, syst: SYST, job: &[u8]) -> ! {
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

    let dot = workload::dot_workload(&clock);
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
    let layout = memory::layout();
    tw!(
        "layout text_bytes={} rodata_bytes={} data_bytes={} bss_bytes={} uninit_bytes={}",
        layout.text,
        layout.rodata,
        layout.data,
        layout.bss,
        layout.uninit
    );
    tw!(
        "stack peak_bytes={} limit_bytes={} detectable_bytes={}",
        painted.peak(),
        painted.limit(),
        painted.painted_to()
    );
    tw!("end status=ok");
    exit::exit(exit::OK)
}
