//! tidewise firmware for QEMU's `microbit` (nRF51822, Cortex-M0, 16 MHz core clock).
#![no_std]
#![no_main]

tidewise_board::firmware!("microbit", 16_000_000);
