//! A C interface over the core's streaming learner (`tidewise_core::learner`).
//!
//! A learner lives in a buffer the caller provides: `tw_learner_size` reports the bytes a
//! configuration needs, `tw_learner_new` builds the learner there and hands back a handle.
//! Samples, scores and parameters cross the boundary as `int32_t` raw words (value =
//! word · 2^-frac of the tensor's format). Every call returns a [`TwStatus`]; a refused
//! call changes nothing. No call allocates, and none can panic on any input: arguments are
//! checked (NULL, alignment, lengths, ranges, codes) before use, and the core does not panic.
//!
//! Builds: the host static library with the default `std` feature (std supplies the panic
//! handler); a `no_std` static library for a C toolchain with `--no-default-features
//! --features panic-halt` (a handler that halts); a Rust firmware links the rlib with
//! neither and keeps its own panic handler. A panic handler is the final binary's job: the
//! calls have no panic path, so the handler only has to exist.
#![cfg_attr(not(feature = "std"), no_std)]
#![warn(missing_docs)]
#![deny(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

mod config;
mod slot;
mod status;

use core::ffi::c_char;

pub use config::*;
use slot::{Any, Slot, MAGIC};
pub use status::TwStatus;

/// A learner built by `tw_learner_new` (opaque: it lives in the caller's buffer).
pub struct TwLearner {
    _private: [u8; 0],
}

#[cfg(all(feature = "panic-halt", not(feature = "std"), not(test)))]
#[panic_handler]
fn halt(_: &core::panic::PanicInfo) -> ! {
    loop {
        core::hint::spin_loop();
    }
}

/// Reads the C configuration and its sizes.
///
/// # Safety
/// `cfg` is NULL or points at a valid `TwConfig` whose `sizes` is NULL or valid for
/// `n_sizes` entries.
unsafe fn core_config(cfg: *const TwConfig) -> Result<tidewise_core::learner::Config, TwStatus> {
    // SAFETY: by the contract; alignment is checked first.
    let c = unsafe { aligned(cfg)?.as_ref() }.ok_or(TwStatus::TwNullPointer)?;
    let sizes = unsafe { slice(c.sizes, c.n_sizes)? };
    c.to_core(sizes)
}

fn aligned<T>(p: *const T) -> Result<*const T, TwStatus> {
    if p.is_null() {
        Err(TwStatus::TwNullPointer)
    } else if !p.is_aligned() {
        Err(TwStatus::TwMisaligned)
    } else {
        Ok(p)
    }
}

/// # Safety
/// `p` is NULL or valid for reads of `n` values.
unsafe fn slice<'a, T>(p: *const T, n: usize) -> Result<&'a [T], TwStatus> {
    let p = aligned(p)?;
    // SAFETY: by the contract.
    Ok(unsafe { core::slice::from_raw_parts(p, n) })
}

/// # Safety
/// `p` is NULL or valid for writes of `n` values.
unsafe fn slice_mut<'a, T>(p: *mut T, n: usize) -> Result<&'a mut [T], TwStatus> {
    let p = aligned(p)?.cast_mut();
    // SAFETY: by the contract.
    Ok(unsafe { core::slice::from_raw_parts_mut(p, n) })
}

/// # Safety
/// `out` is NULL or valid for a write of `T`.
unsafe fn put<T>(out: *mut T, v: T) -> Result<(), TwStatus> {
    let p = aligned(out)?.cast_mut();
    // SAFETY: by the contract.
    unsafe { p.write(v) };
    Ok(())
}

/// # Safety
/// `l` is NULL or a handle from `tw_learner_new` whose buffer is still the learner's.
unsafe fn handle<'a>(l: *mut TwLearner) -> Result<&'a mut Slot, TwStatus> {
    let p = aligned(l.cast::<Slot>())?.cast_mut();
    // SAFETY: by the contract.
    let slot = unsafe { &mut *p };
    if slot.magic != MAGIC {
        return Err(TwStatus::TwBadHandle);
    }
    Ok(slot)
}

fn status(r: Result<(), TwStatus>) -> TwStatus {
    match r {
        Ok(()) => TwStatus::TwOk,
        Err(s) => s,
    }
}

/// Runs `$body` with `$i` bound to the slot's `Inner`, whatever its container.
macro_rules! each {
    ($slot:expr, $i:ident => $body:expr) => {
        match &mut $slot.any {
            Any::W8($i) => $body,
            Any::W16($i) => $body,
            Any::W32($i) => $body,
        }
    };
}

/// Writes the bytes a learner of `cfg` needs to `size_needed` (any alignment of the buffer;
/// the learner aligns itself inside it).
///
/// # Safety
/// `cfg` is NULL or a valid `TwConfig` (its `sizes` valid for `n_sizes` entries);
/// `size_needed` is NULL or valid for a write.
#[no_mangle]
pub unsafe extern "C" fn tw_learner_size(
    cfg: *const TwConfig,
    size_needed: *mut usize,
) -> TwStatus {
    status((|| unsafe {
        let cfg = core_config(cfg)?;
        put(size_needed, slot::buffer_bytes(&cfg)?)
    })())
}

/// Builds a learner of `cfg` in `buf` (`len` bytes), its parameters drawn from the seed as
/// the host's fixed arm draws them, and writes its handle to `learner`. `size_needed`, when
/// not NULL, receives the bytes needed (also when the buffer is too small). The buffer must
/// stay untouched and in place while the learner is used; there is nothing to free.
///
/// # Safety
/// `cfg` as in `tw_learner_size`; `buf` is NULL or valid for writes of `len` bytes for the
/// learner's life; `learner` and `size_needed` are NULL or valid for a write.
#[no_mangle]
pub unsafe extern "C" fn tw_learner_new(
    cfg: *const TwConfig,
    buf: *mut core::ffi::c_void,
    len: usize,
    learner: *mut *mut TwLearner,
    size_needed: *mut usize,
) -> TwStatus {
    status((|| unsafe {
        let cfg = core_config(cfg)?;
        if !size_needed.is_null() {
            put(size_needed, slot::buffer_bytes(&cfg)?)?;
        }
        aligned(learner)?;
        if buf.is_null() {
            return Err(TwStatus::TwNullPointer);
        }
        let s = slot::build(&cfg, buf.cast(), len)?;
        put(learner, s.cast::<TwLearner>())
    })())
}

/// Writes the inputs a sample has and the classes (outputs) of the network.
///
/// # Safety
/// `learner` is NULL or a live handle; the out-pointers NULL or valid for a write.
#[no_mangle]
pub unsafe extern "C" fn tw_learner_shape(
    learner: *mut TwLearner,
    inputs: *mut usize,
    classes: *mut usize,
) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        let (i, c) = each!(s, x => (x.learner.inputs(), x.learner.classes()));
        put(inputs, i)?;
        put(classes, c)
    })())
}

/// Learns one sample: `sample` holds `len` raw input words (the activation format's word,
/// the network's inputs), `label` is 0 to classes - 1. `correct`, when not NULL, receives
/// whether the network classified the sample right before the update.
///
/// # Safety
/// `learner` is NULL or a live handle; `sample` NULL or valid for `len` reads; `correct`
/// NULL or valid for a write.
#[no_mangle]
pub unsafe extern "C" fn tw_learn(
    learner: *mut TwLearner,
    sample: *const i32,
    len: usize,
    label: usize,
    correct: *mut bool,
) -> TwStatus {
    unsafe { step(learner, sample, len, label, correct, false) }
}

/// Trains only the feedback on one sample (the warm-up of rules that learn it); arguments
/// as `tw_learn`.
///
/// # Safety
/// As `tw_learn`.
#[no_mangle]
pub unsafe extern "C" fn tw_learn_feedback(
    learner: *mut TwLearner,
    sample: *const i32,
    len: usize,
    label: usize,
    correct: *mut bool,
) -> TwStatus {
    unsafe { step(learner, sample, len, label, correct, true) }
}

unsafe fn step(
    learner: *mut TwLearner,
    sample: *const i32,
    len: usize,
    label: usize,
    correct: *mut bool,
    feedback_only: bool,
) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        let x = slice(sample, len)?;
        if !correct.is_null() {
            aligned(correct)?;
        }
        let right = each!(s, i => i.learn(x, label, feedback_only))?;
        if !correct.is_null() {
            put(correct, right)?;
        }
        Ok(())
    })())
}

/// Infers one sample (`len` raw input words): the class (largest output, the first on ties)
/// goes to `class`; when `scores` is not NULL the raw output words (activation format) go
/// there, `n_scores` being the classes.
///
/// # Safety
/// `learner` is NULL or a live handle; `sample` NULL or valid for `len` reads; `class` NULL
/// or valid for a write; `scores` NULL or valid for `n_scores` writes.
#[no_mangle]
pub unsafe extern "C" fn tw_infer(
    learner: *mut TwLearner,
    sample: *const i32,
    len: usize,
    class: *mut usize,
    scores: *mut i32,
    n_scores: usize,
) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        let x = slice(sample, len)?;
        aligned(class)?;
        let scores = if scores.is_null() {
            None
        } else {
            Some(slice_mut(scores, n_scores)?)
        };
        let c = each!(s, i => i.infer(x, scores))?;
        put(class, c)
    })())
}

/// Writes the number of learned parameter words (forward weights, forward biases, feedback
/// weights, feedback biases) to `count`.
///
/// # Safety
/// `learner` is NULL or a live handle; `count` NULL or valid for a write.
#[no_mangle]
pub unsafe extern "C" fn tw_param_count(learner: *mut TwLearner, count: *mut usize) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        put(count, each!(s, i => i.param_count()))
    })())
}

/// Copies the learned parameters as raw words into `out` (`len` = `tw_param_count`), in
/// the order forward weights, forward biases, feedback weights, feedback biases.
///
/// # Safety
/// `learner` is NULL or a live handle; `out` NULL or valid for `len` writes.
#[no_mangle]
pub unsafe extern "C" fn tw_read_params(
    learner: *mut TwLearner,
    out: *mut i32,
    len: usize,
) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        let out = slice_mut(out, len)?;
        each!(s, i => i.read_params(out))
    })())
}

/// Replaces the learned parameters with `words` (`len` = `tw_param_count`, the order of
/// `tw_read_params`). Each word must fit the learner's container; it is taken as a word of
/// its tensor's format as it is.
///
/// # Safety
/// `learner` is NULL or a live handle; `words` NULL or valid for `len` reads.
#[no_mangle]
pub unsafe extern "C" fn tw_write_params(
    learner: *mut TwLearner,
    words: *const i32,
    len: usize,
) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        let words = slice(words, len)?;
        each!(s, i => i.write_params(words))
    })())
}

/// Writes the FNV-1a digest of the learned parameters to `digest`: the figure the host's
/// `train` reports for its fixed arm.
///
/// # Safety
/// `learner` is NULL or a live handle; `digest` NULL or valid for a write.
#[no_mangle]
pub unsafe extern "C" fn tw_digest(learner: *mut TwLearner, digest: *mut u64) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        put(digest, each!(s, i => i.learner.digest()))
    })())
}

/// Fills `order` with 0 to `n` - 1 shuffled from the learner's order stream: the order in
/// which the host's epoch visits `n` samples, so streaming samples in it reproduces the host.
///
/// # Safety
/// `learner` is NULL or a live handle; `order` NULL or valid for `n` writes.
#[no_mangle]
pub unsafe extern "C" fn tw_epoch_order(
    learner: *mut TwLearner,
    order: *mut u32,
    n: usize,
) -> TwStatus {
    status((|| unsafe {
        let s = handle(learner)?;
        let order = slice_mut(order, n)?;
        each!(s, i => i.order(order));
        Ok(())
    })())
}

/// A NUL-terminated English sentence for `status` (static storage).
#[no_mangle]
pub extern "C" fn tw_status_text(status: TwStatus) -> *const c_char {
    status.text().as_ptr().cast()
}
