//! tidewise firmware for QEMU's `mps2-an386` (Cortex-M4F, 25 MHz core clock).
#![no_std]
#![no_main]

tidewise_board::firmware!("mps2-an386", 25_000_000);
