//! tidewise firmware for QEMU's `microbit` (nRF51822, Cortex-M0, 16 MHz core clock).
#![no_std]
#![no_main]

use cortex_m_rt::{entry, exception, ExceptionFrame};
use tidewise_board::{exit, BoardInfo};

/// The job blob embedded at build time from `TIDEWISE_JOB` (empty when unset).
static JOB: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/job.bin"));

const BOARD: BoardInfo = BoardInfo {
    name: "microbit",
    clock_hz: 16_000_000,
};

#[entry]
fn main() -> ! {
    match cortex_m::Peripherals::take() {
        Some(p) => tidewise_board::run(&BOARD, p.SYST, JOB),
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
