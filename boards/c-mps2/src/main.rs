//! The C example on QEMU's `mps2-an386` (Cortex-M4F): cortex-m-rt does the start-up, this
//! file reports over semihosting, and the training is C (`crates/tidewise-c/examples/c/
//! stream.c` and `board.c`, compiled by arm-none-eabi-gcc in `build.rs`) calling the tidewise
//! C interface, whose functions the `tidewise-c` rlib provides. The report lines are those of
//! `boards/README.md` (`board` with the FNV-1a 32 of the data file, `result`, `stack`, `end`,
//! or `error` / `fault`).
#![no_std]
#![no_main]

use core::ffi::{c_char, CStr};

use tidewise_board::{exit, tw};
// The C code calls the interface; naming the crate links its `extern "C"` functions.
use tidewise_c as _;

/// `TwExampleResult` of `stream.h`.
#[repr(C)]
struct ExampleResult {
    need: usize,
    digest: u64,
    failed: *const c_char,
    status: tidewise_c::TwStatus,
}

extern "C" {
    /// `board.c`: trains the embedded configuration and samples; 0 on success.
    fn tw_board_main(out: *mut ExampleResult) -> i32;
}

#[cortex_m_rt::entry]
fn main() -> ! {
    // On the thread stack below the statics, as the training firmware: an overflow faults.
    tidewise_board::stack::run_on_thread_stack(c_example, core::ptr::null_mut())
}

extern "C" fn c_example(_: *mut ()) -> ! {
    let painted = tidewise_board::memory::paint();
    tw!(
        "board name=mps2-an386 program=c_example data_fnv1a32={}",
        env!("TIDEWISE_C_DATA_FNV1A32")
    );
    let mut r = ExampleResult {
        need: 0,
        digest: 0,
        failed: core::ptr::null(),
        status: tidewise_c::TwStatus::TwOk,
    };
    // SAFETY: `tw_board_main` writes only `r`, through the pointer it is given.
    let rc = unsafe { tw_board_main(&mut r) };
    if rc != 0 {
        let call = if r.failed.is_null() {
            "?"
        } else {
            // SAFETY: `failed` points at one of stream.c's string literals.
            unsafe { CStr::from_ptr(r.failed) }.to_str().unwrap_or("?")
        };
        tw!(
            "error msg=the C example's {} call returned status {}",
            call,
            r.status as i32
        );
        exit::exit(exit::JOB_REJECTED);
    }
    tw!("result digest=0x{:016x} need_bytes={}", r.digest, r.need);
    painted.report();
    tw!("end status=ok");
    exit::exit(exit::OK)
}

#[cortex_m_rt::exception]
unsafe fn HardFault(frame: &cortex_m_rt::ExceptionFrame) -> ! {
    exit::hard_fault(frame)
}

#[cortex_m_rt::exception]
unsafe fn DefaultHandler(irqn: i16) {
    exit::unexpected_irq(irqn)
}
