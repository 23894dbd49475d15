//! The firmware's own view of its memory: section sizes from the linker's symbols, and the
//! stack high-water mark by painting.
//!
//! [`paint`] fills the free stack below the current stack pointer with a pattern; [`peak`]
//! later finds the lowest word that no longer holds it. The stack painted is the thread stack
//! ([`crate::stack`]), the region at the start of RAM below the statics that the thread code
//! runs on.

use core::ptr::{addr_of, read_volatile, write_volatile};

const PATTERN: u32 = 0x5afe_c0de;
/// Bytes left unpainted just below the stack pointer, for the painting function's own calls.
const GUARD: usize = 64;
/// Most bytes painted, so that a board with megabytes of RAM does not spend long painting.
/// A peak at this depth means "at least this much".
pub const MAX_PAINT: usize = 64 * 1024;

extern "C" {
    static __stext: u32;
    static __etext: u32;
    static __srodata: u32;
    static __erodata: u32;
    static __sdata: u32;
    static __edata: u32;
    static __sbss: u32;
    static __ebss: u32;
    static __suninit: u32;
    static __euninit: u32;
}

/// Section sizes in bytes, from the bounds that cortex-m-rt's `link.x` defines.
pub struct Layout {
    pub text: usize,
    pub rodata: usize,
    pub data: usize,
    pub bss: usize,
    pub uninit: usize,
}

/// Reads the section bounds the linker placed.
pub fn layout() -> Layout {
    // Only the addresses of the linker symbols are taken, never their values.
    let span = |start: *const u32, end: *const u32| (end as usize).wrapping_sub(start as usize);
    Layout {
        text: span(addr_of!(__stext), addr_of!(__etext)),
        rodata: span(addr_of!(__srodata), addr_of!(__erodata)),
        data: span(addr_of!(__sdata), addr_of!(__edata)),
        bss: span(addr_of!(__sbss), addr_of!(__ebss)),
        uninit: span(addr_of!(__suninit), addr_of!(__euninit)),
    }
}

/// Painted region: `[low, high)` as addresses, set by [`paint`].
pub struct Painted {
    low: usize,
    high: usize,
    top: usize,
}

/// Paints the unused thread stack. Call once, early, from thread code on the thread stack.
#[inline(never)]
pub fn paint() -> Painted {
    let (end, start) = crate::stack::bounds();
    let sp = cortex_m::register::psp::read() as usize;
    let high = sp.saturating_sub(GUARD) & !3;
    let low = high.saturating_sub(MAX_PAINT).max((end + 3) & !3);
    let mut at = low;
    while at < high {
        // SAFETY: [low, high) lies in the thread stack region below the live stack frames,
        // so nothing else uses these words now.
        unsafe { write_volatile(at as *mut u32, PATTERN) };
        at += 4;
    }
    Painted {
        low,
        high,
        top: start,
    }
}

impl Painted {
    /// Deepest stack use seen so far, in bytes below the initial stack pointer.
    pub fn peak(&self) -> usize {
        let mut at = self.low;
        while at < self.high {
            // SAFETY: the same words that `paint` wrote; reading them is always valid.
            if unsafe { read_volatile(at as *const u32) } != PATTERN {
                break;
            }
            at += 4;
        }
        self.top - at
    }

    /// Bytes of the thread stack region.
    pub fn limit(&self) -> usize {
        let (end, start) = crate::stack::bounds();
        start - end
    }

    /// Deepest stack use that painting can detect.
    pub fn painted_to(&self) -> usize {
        self.top - self.low
    }

    /// Prints the `stack` record.
    pub fn report(&self) {
        crate::tw!(
            "stack peak_bytes={} limit_bytes={} detectable_bytes={}",
            self.peak(),
            self.limit(),
            self.painted_to()
        );
    }
}
