//! The whole `main.rs` of a board, as one macro: the embedded job and its sizes, the static
//! arena, order buffer and learner, the entry point (which moves the thread code to the thread
//! stack, [`crate::stack`]) and the exception handlers are the same on every board; only the
//! name and the core clock differ.

/// Expands to a board's firmware: `tidewise_board::firmware!("mps2-an386", 25_000_000);`
/// in a `#![no_std] #![no_main]` crate that depends on `cortex-m`, `cortex-m-rt` and
/// `tidewise-board` and builds with `boards/common/board-build.rs`.
#[macro_export]
macro_rules! firmware {
    ($name:expr, $clock_hz:expr) => {
        /// Word container, arena and order-buffer sizes of the embedded job (from the build
        /// script).
        mod job {
            include!(concat!(env!("OUT_DIR"), "/job.rs"));
        }

        /// The job blob embedded at build time from `TIDEWISE_JOB` (empty when unset), at a
        /// 4-byte boundary so that its arrays are read in place.
        static JOB: &$crate::Aligned<[u8]> =
            &$crate::Aligned(*include_bytes!(concat!(env!("OUT_DIR"), "/job.bin")));

        const BOARD: $crate::BoardInfo = $crate::BoardInfo {
            name: $name,
            clock_hz: $clock_hz,
        };

        /// The learner, with its back end, off the stack: not zeroed at reset, written once
        /// before use.
        #[link_section = ".uninit.tidewise_learner"]
        static mut LEARNER: $crate::learn::Slot<job::Word> = core::mem::MaybeUninit::uninit();

        #[cortex_m_rt::entry]
        fn main() -> ! {
            // cortex-m-rt turns these into `&'static mut` references, taken once.
            static mut ARENA: [job::Word; job::ARENA_WORDS] = [0; job::ARENA_WORDS];
            static mut ORDER: [u32; job::ORDER_LEN] = [0; job::ORDER_LEN];
            match cortex_m::Peripherals::take() {
                // Opaque to the optimiser: it must neither fold the decoder over the constant
                // blob nor drop the blob's bytes from the image.
                Some(p) => $crate::start($crate::Task {
                    board: &BOARD,
                    syst: p.SYST,
                    job: core::hint::black_box(&JOB.0),
                    arena: ARENA,
                    order: ORDER,
                    // SAFETY: `main` runs once and is the only code that names LEARNER.
                    learner: unsafe { &mut *core::ptr::addr_of_mut!(LEARNER) },
                }),
                None => $crate::exit::exit($crate::exit::FAULT),
            }
        }

        #[cortex_m_rt::exception]
        fn SysTick() {
            $crate::counter::on_systick();
        }

        #[cortex_m_rt::exception]
        unsafe fn HardFault(frame: &cortex_m_rt::ExceptionFrame) -> ! {
            $crate::exit::hard_fault(frame)
        }

        #[cortex_m_rt::exception]
        unsafe fn DefaultHandler(irqn: i16) {
            $crate::exit::unexpected_irq(irqn)
        }
    };
}
