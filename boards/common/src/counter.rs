//! Instruction counter on SysTick.
//!
//! SysTick runs on the core clock and counts down from [`RELOAD`] to 0, then reloads and raises
//! its exception, whose handler ([`on_systick`]) counts the wrap. [`Counter::now`] combines the
//! wrap count and the current value into a 64-bit tick count.
//!
//! Under QEMU with `-icount shift=0` every executed instruction advances virtual time by 1 ns,
//! so `ticks` core-clock ticks correspond to `ticks * 10^9 / clock_hz` instructions, with a
//! resolution of `10^9 / clock_hz` instructions (40 on a 25 MHz core, 62.5 on 16 MHz). On real
//! silicon the same figure is core cycles (converted to the same unit), not instructions.

use core::sync::atomic::{AtomicU32, Ordering};

use cortex_m::peripheral::syst::SystClkSource;
use cortex_m::peripheral::{SCB, SYST};

/// SysTick reload value: the counter period is `RELOAD + 1` ticks. Kept well below the 24-bit
/// maximum so that a few million instructions already exercise the wrap counting.
pub const RELOAD: u32 = (1 << 16) - 1;
/// Ticks per SysTick period.
pub const PERIOD: u64 = RELOAD as u64 + 1;

/// Wraps counted by the SysTick handler. Only the handler writes it, with a plain load and
/// store (ARMv6-M has no atomic read-modify-write).
static WRAPS: AtomicU32 = AtomicU32::new(0);

/// Call from the board's `SysTick` exception handler.
#[inline(always)]
pub fn on_systick() {
    WRAPS.store(
        WRAPS.load(Ordering::Relaxed).wrapping_add(1),
        Ordering::Relaxed,
    );
}

/// A running SysTick counter on a clock of known frequency.
pub struct Counter {
    clock_hz: u32,
    _syst: SYST,
}

impl Counter {
    /// Configures SysTick on the core clock with [`RELOAD`], its exception enabled, and starts it.
    pub fn start(mut syst: SYST, clock_hz: u32) -> Self {
        syst.disable_counter();
        syst.set_clock_source(SystClkSource::Core);
        syst.set_reload(RELOAD);
        syst.clear_current();
        syst.enable_interrupt();
        syst.enable_counter();
        Counter {
            clock_hz,
            _syst: syst,
        }
    }

    /// Ticks since [`Counter::start`].
    #[inline(always)]
    pub fn now(&self) -> u64 {
        loop {
            let before = WRAPS.load(Ordering::Relaxed);
            let current = SYST::get_current();
            let pending = SCB::is_pendst_pending();
            let after = WRAPS.load(Ordering::Relaxed);
            if before != after {
                // The handler ran in between: read again.
                continue;
            }
            let mut wraps = u64::from(before);
            // The counter wrapped but its exception has not been taken yet. A value in the
            // upper half was read after the reload, one in the lower half just before it.
            if pending && current > RELOAD / 2 {
                wraps += 1;
            }
            return wraps * PERIOD + u64::from(RELOAD - current);
        }
    }

    /// Wraps counted so far.
    pub fn wraps(&self) -> u32 {
        WRAPS.load(Ordering::Relaxed)
    }

    /// Core clock in Hz.
    pub fn clock_hz(&self) -> u32 {
        self.clock_hz
    }

    /// Instructions that `ticks` stand for under `-icount shift=0`: `ticks * 10^9 / clock_hz`,
    /// rounded to nearest.
    pub fn instructions(&self, ticks: u64) -> u64 {
        let hz = u64::from(self.clock_hz.max(1));
        (ticks * 1_000_000_000 + hz / 2) / hz
    }
}
