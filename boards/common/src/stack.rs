//! The thread stack: a region at the start of RAM, below the statics, that the firmware's
//! thread code runs on as the process stack (PSP), while the exception handlers keep the main
//! stack (MSP) at the top of RAM.
//!
//! The build script's `stack.x` places the region (`__sthread_stack` to `__ethread_stack`).
//! A stack that outgrows it leaves RAM: the first push or exception entry below the start of
//! RAM is a bus fault, taken as a HardFault on the still valid main stack, and the fault
//! handler reports `tw:fault kind=stack_overflow` ([`overflowed`]) instead of the statics
//! being overwritten silently. The same arrangement serves both boards: it needs only the two
//! stack pointers of every Cortex-M core, no memory protection unit (the microbit's
//! Cortex-M0 has none), and that nothing answers below the start of RAM (true of QEMU's
//! mps2-an386 and microbit memory maps, and of the parts they model).

use core::ptr::addr_of;

extern "C" {
    static __sthread_stack: u32;
    static __ethread_stack: u32;
}

/// The thread stack's bounds `[bottom, top)` as addresses.
pub fn bounds() -> (usize, usize) {
    // Only the addresses of the linker symbols are taken, never their values.
    (
        addr_of!(__sthread_stack) as usize,
        addr_of!(__ethread_stack) as usize,
    )
}

/// Whether an exception frame at `frame` (the stack pointer the fault handler was given) lies
/// below the thread stack: the thread code, or the hardware's push of its exception frame, ran
/// past the region's bottom. Frames of handler code lie on the main stack, above the statics.
pub fn overflowed(frame: usize) -> bool {
    frame < bounds().0
}

/// Switches thread mode to the process stack at the top of the thread stack region and calls
/// `entry(arg)` there; never returns. The caller's frame stays on the main stack, where the
/// exception handlers run from then on. Call once, from `main`.
pub fn run_on_thread_stack(entry: extern "C" fn(*mut ()) -> !, arg: *mut ()) -> ! {
    let top = bounds().1;
    // SAFETY: the region is reserved by the linker script for this stack alone and its top is
    // 8-byte aligned (AAPCS); setting CONTROL.SPSEL in thread mode selects the process stack
    // for the code that follows (the ISB makes it take effect), and `entry` never returns, so
    // nothing runs on the old stack pointer in thread mode again.
    unsafe {
        // Fixed low registers, as Armv6-M `movs`/`orrs` need: r1 (the top, then the SPSEL
        // bit) and r3 are scratch, which is sound because control never comes back.
        core::arch::asm!(
            "msr psp, r1",
            "mrs r3, control",
            "movs r1, #2",
            "orrs r3, r1",
            "msr control, r3",
            "isb",
            "blx r2",
            in("r0") arg,
            in("r1") top,
            in("r2") entry,
            options(noreturn)
        )
    }
}
