//! tidewise firmware for QEMU's `microbit` (nRF51822, Cortex-M0, 16 MHz core clock).
#![no_std]
#![no_main]

use cortex_m_rt::{entry, exception, ExceptionFrame};
use tidewise_board::{exit, Aligned, BoardInfo};

/// Word container, arena and order-buffer sizes of the embedded job (from the build script).
mod job {
    include!(concat!(env!("OUT_DIR"), "/job.rs"));
}

/// The job blob embedded at build time from `TIDEWISE_JOB` (empty when unset), at a 4-byte
/// boundary so that its arrays are read in place.
static JOB: &Aligned<[u8]> = &Aligned(*include_bytes!(concat!(env!("OUT_DIR"), "/job.bin")));

const BOARD: BoardInfo = BoardInfo {
    name: "microbit",
    clock_hz: 16_000_000,
};

#[entry]
fn main() -> ! {
    // cortex-m-rt turns these into `&'static mut` references, taken once.
    static mut ARENA: [job::Word; job::ARENA_WORDS] = [0; job::ARENA_WORDS];
    static mut ORDER: [u32; job::ORDER_LEN] = [0; job::ORDER_LEN];
    match cortex_m::Peripherals::take() {
        // Opaque to the optimiser: it must neither fold the decoder over the constant blob
        // nor drop the blob's bytes from the image.
        Some(p) => {
            let job = core::hint::black_box(&JOB.0);
            tidewise_board::run(&BOARD, p.SYST, job, ARENA, ORDER)
        }
        None => exit::exit(exit::FAULT),
    }
}

#[exception]
fn SysTick() {
    tidewise_board::counter::on_systick();
}

#[exception]
unsafe fn HardFault(frame: &ExceptionFrame) -> ! {
    exit::hard_fault(frame)
}

#[exception]
unsafe fn DefaultHandler(irqn: i16) {
    exit::unexpected_irq(irqn)
}
