//! Exit codes and the handlers that end a run.
//!
//! The firmware ends through the semihosting `SYS_EXIT_EXTENDED` call, which QEMU turns into its
//! own process exit status. Every abnormal end prints one `tw:` line first.

#[cfg(all(feature = "panic-handler", not(feature = "panic-proof")))]
use core::fmt::Write;
#[cfg(feature = "panic-handler")]
use core::panic::PanicInfo;

use cortex_m_rt::ExceptionFrame;

#[cfg(all(feature = "panic-handler", not(feature = "panic-proof")))]
use crate::report::LineWriter;
use crate::tw;

/// The run finished and its report is complete.
pub const OK: u32 = 0;
/// The job blob was rejected (reported in a `tw:error` line).
pub const JOB_REJECTED: u32 = 2;
/// A Rust panic (reported in a `tw:panic` line).
pub const PANIC: u32 = 101;
/// A HardFault (reported in a `tw:fault` line).
pub const FAULT: u32 = 102;
/// An exception or interrupt with no handler (reported in a `tw:fault` line).
pub const UNEXPECTED_IRQ: u32 = 103;
/// The thread stack overflowed its region (reported in a `tw:fault kind=stack_overflow` line).
pub const STACK_OVERFLOW: u32 = 104;

/// Semihosting operation number of `SYS_EXIT_EXTENDED`.
const SYS_EXIT_EXTENDED: usize = 0x20;
/// `ADP_Stopped_ApplicationExit`: a normal application exit whose subcode is the status.
const ADP_STOPPED_APPLICATION_EXIT: usize = 0x20026;

/// Ends the run with `code` as the emulator's exit status.
pub fn exit(code: u32) -> ! {
    let block = [ADP_STOPPED_APPLICATION_EXIT, code as usize];
    // SAFETY: SYS_EXIT_EXTENDED takes a pointer to a two-word parameter block.
    unsafe {
        cortex_m_semihosting::syscall(SYS_EXIT_EXTENDED, &block);
    }
    // Without a debugger or emulator to stop us: park the core.
    loop {
        cortex_m::asm::wfi();
    }
}

/// Call from the board's `HardFault` handler. A frame below the thread stack is a stack
/// overflow: it is reported without reading the frame, which lies outside RAM.
pub fn hard_fault(frame: &ExceptionFrame) -> ! {
    let at = core::ptr::from_ref(frame) as usize;
    if crate::stack::overflowed(at) {
        let (bottom, top) = crate::stack::bounds();
        tw!(
            "fault kind=stack_overflow sp=0x{:08x} stack_bottom=0x{:08x} stack_bytes={}",
            at,
            bottom,
            top - bottom
        );
        exit(STACK_OVERFLOW)
    }
    tw!(
        "fault kind=hardfault pc=0x{:08x} lr=0x{:08x} xpsr=0x{:08x}",
        frame.pc(),
        frame.lr(),
        frame.xpsr()
    );
    exit(FAULT)
}

/// Call from the board's `DefaultHandler`.
pub fn unexpected_irq(irqn: i16) -> ! {
    tw!("fault kind=unexpected irqn={}", irqn);
    exit(UNEXPECTED_IRQ)
}

#[cfg(all(feature = "panic-handler", not(feature = "panic-proof")))]
#[panic_handler]
fn panic(info: &PanicInfo) -> ! {
    cortex_m::interrupt::disable();
    let mut w = LineWriter::new();
    let _ = match info.location() {
        Some(at) => write!(w, "panic file={} line={} ", at.file(), at.line()),
        None => write!(w, "panic "),
    };
    // `msg` is always the last field and runs to the end of the line.
    let _ = write!(w, "msg={}", info.message());
    w.finish();
    exit(PANIC)
}

/// Under `panic-proof` the handler calls a function that no object defines. With the release
/// profile (opt-level 3, fat LTO) every panic site the optimiser cannot prove unreachable keeps
/// a call to this handler, so the link fails with an undefined reference naming this symbol;
/// a successful link proves the image has no path to a panic (`ci/panic-proof.sh`).
#[cfg(all(feature = "panic-handler", feature = "panic-proof"))]
#[panic_handler]
fn panic(_info: &PanicInfo) -> ! {
    extern "C" {
        /// Defined nowhere, on purpose.
        fn tidewise_panic_path_survived_optimisation() -> !;
    }
    // SAFETY: never runs: an image that still calls it does not link.
    unsafe { tidewise_panic_path_survived_optimisation() }
}
