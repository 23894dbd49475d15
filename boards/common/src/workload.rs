//! Measured workloads: the counter calibration loop and an `i16` dot product.
//!
//! The host test (`crates/tidewise/tests/onchip_qemu.rs`) recomputes both from the constants
//! and the generator described here, so any change must be mirrored there.

use core::hint::black_box;

use crate::counter::Counter;

/// Iterations of the calibration loop (two instructions each).
pub const CALIBRATION_LOOPS: u32 = 5_000_000;
/// Elements per dot product.
pub const DOT_LEN: usize = 1024;
/// Dot products per measurement.
pub const DOT_REPS: u32 = 64;
/// Seed of the xorshift32 stream that fills the operands.
pub const DOT_SEED: u32 = 2_463_534_242;

/// FNV-1a, 32-bit (offset basis 0x811c9dc5, prime 0x01000193), over `bytes`.
pub fn fnv1a32(bytes: &[u8]) -> u32 {
    let mut hash: u32 = 0x811c_9dc5;
    for &b in bytes {
        hash ^= u32::from(b);
        hash = hash.wrapping_mul(0x0100_0193);
    }
    hash
}

/// xorshift32 with shifts (13, 17, 5) ("Xorshift RNGs", Journal of Statistical Software,
/// 2003, `docs/references.md` \[27\]): one step from a non-zero state.
pub fn xorshift32(mut x: u32) -> u32 {
    x ^= x << 13;
    x ^= x >> 17;
    x ^= x << 5;
    x
}

/// Result of the calibration loop.
pub struct Calibration {
    /// Instructions the loop itself executes: two per iteration.
    pub expected_instructions: u64,
    /// Ticks measured around it.
    pub ticks: u64,
    /// SysTick wraps during the measurement.
    pub wraps: u32,
}

/// Runs a `subs`/`bne` loop of `loops` iterations (at least 1) between two counter reads.
/// The measured instruction count should be `2 * loops` plus the few instructions of the two
/// reads and of the SysTick handler runs, within one tick.
pub fn calibrate(clock: &Counter, loops: u32) -> Calibration {
    let loops = loops.max(1);
    let wraps0 = clock.wraps();
    let t0 = clock.now();
    // SAFETY: a register-only countdown loop; r0 is declared clobbered.
    unsafe {
        core::arch::asm!(
            "2:",
            "subs r0, #1",
            "bne 2b",
            inout("r0") loops => _,
            options(nomem, nostack),
        );
    }
    let t1 = clock.now();
    Calibration {
        expected_instructions: 2 * u64::from(loops),
        ticks: t1 - t0,
        wraps: clock.wraps().wrapping_sub(wraps0),
    }
}

/// Result of the dot-product workload.
pub struct DotResult {
    /// One dot product.
    pub result: i32,
    /// Wrapping sum of the [`DOT_REPS`] dot products.
    pub total: i32,
    /// Ticks measured around the repetitions.
    pub ticks: u64,
}

/// Fills `a` then `b` from one xorshift32 stream seeded with [`DOT_SEED`]: each element is
/// `(x >> 21) - 1024` for the next state `x`, so it lies in `-1024..=1023`. With 1024 elements
/// no partial sum can leave `i32` (`1024 * 1024^2 = 2^30`).
pub fn fill_operands(a: &mut [i16], b: &mut [i16]) {
    let mut x = DOT_SEED;
    for v in a.iter_mut().chain(b.iter_mut()) {
        x = xorshift32(x);
        *v = ((x >> 21) as i16).wrapping_sub(1024);
    }
}

/// `sum(a[i] * b[i])`, products formed in `i32` and accumulated with wrapping `i32` adds.
#[inline(never)]
pub fn dot_i16(a: &[i16], b: &[i16]) -> i32 {
    a.iter().zip(b).fold(0i32, |acc, (&x, &y)| {
        acc.wrapping_add(i32::from(x) * i32::from(y))
    })
}

/// Fills the operands and measures [`DOT_REPS`] dot products of [`DOT_LEN`] elements.
pub fn dot_workload(clock: &Counter) -> DotResult {
    let mut a = [0i16; DOT_LEN];
    let mut b = [0i16; DOT_LEN];
    fill_operands(&mut a, &mut b);
    let mut total = 0i32;
    let mut result = 0i32;
    let t0 = clock.now();
    for _ in 0..DOT_REPS {
        // black_box keeps the compiler from hoisting the product out of the loop.
        result = dot_i16(black_box(&a), black_box(&b));
        total = total.wrapping_add(result);
    }
    let t1 = clock.now();
    DotResult {
        result,
        total,
        ticks: t1 - t0,
    }
}
