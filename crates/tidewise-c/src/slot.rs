//! The learner as it lives in the caller's buffer: a [`Slot`] at the buffer's first aligned
//! address, then the arena, then one sample of working space.

use core::mem::{align_of, size_of};

use tidewise_core::backend::{container_bits, Fixed, Word};
use tidewise_core::class::Tag;
use tidewise_core::learner::{arena_words, param_words, Config, Learner};
use tidewise_core::train::shuffle;

use crate::status::TwStatus;

/// Marks a slot written by `tw_learner_new` ("TWLN").
pub(crate) const MAGIC: u32 = 0x5457_4c4e;

/// A learner of one container width and its sample space.
pub struct Inner<W: Word + 'static> {
    /// The learner; its arena is in the caller's buffer, after the slot.
    pub learner: Learner<'static, Fixed<W>>,
    /// One sample, converted from the caller's `int32_t` words.
    pub x: &'static mut [W],
    /// Raw range of an input word (the input activation format's word).
    pub x_min: i64,
    /// See `x_min`.
    pub x_max: i64,
}

/// The learner, by container.
pub enum Any {
    /// 8-bit words.
    W8(Inner<i8>),
    /// 16-bit words.
    W16(Inner<i16>),
    /// 32-bit words.
    W32(Inner<i32>),
}

/// What the handle points at.
pub struct Slot {
    /// [`MAGIC`] once built.
    pub magic: u32,
    /// The learner.
    pub any: Any,
}

/// Bytes of the container for `cfg`'s formats (1, 2 or 4), or a refusal past 32 bits.
pub fn word_bytes(cfg: &Config) -> Result<usize, TwStatus> {
    match container_bits(&cfg.fixed) {
        b @ (8 | 16 | 32) => Ok(b as usize / 8),
        _ => Err(TwStatus::TwBadFormat),
    }
}

/// Buffer bytes a learner of `cfg` needs at any alignment of the buffer.
pub fn buffer_bytes(cfg: &Config) -> Result<usize, TwStatus> {
    let words = arena_words(cfg).saturating_add(cfg.plan.shape.inputs());
    Ok((align_of::<Slot>() - 1)
        .saturating_add(size_of::<Slot>())
        .saturating_add(words.saturating_mul(word_bytes(cfg)?)))
}

/// Builds the learner in `buf`, which holds at least [`buffer_bytes`] bytes.
///
/// # Safety
/// `buf` is valid for writes of `len` bytes, is not used by the caller while the learner
/// lives, and outlives every use of the returned slot.
pub unsafe fn build(cfg: &Config, buf: *mut u8, len: usize) -> Result<*mut Slot, TwStatus> {
    let need = buffer_bytes(cfg)?;
    if len < need {
        return Err(TwStatus::TwBufferTooSmall);
    }
    let pad = buf.align_offset(align_of::<Slot>());
    // SAFETY: pad < align_of::<Slot>() and the buffer holds the padding, the slot and the
    // words (checked above); the arena starts at a multiple of the slot's alignment, which
    // is at least a word's.
    unsafe {
        let slot = buf.add(pad).cast::<Slot>();
        let words = buf.add(pad + size_of::<Slot>());
        let any = match word_bytes(cfg)? {
            1 => Any::W8(inner::<i8>(cfg, words.cast())?),
            2 => Any::W16(inner::<i16>(cfg, words.cast())?),
            _ => Any::W32(inner::<i32>(cfg, words.cast())?),
        };
        slot.write(Slot { magic: MAGIC, any });
        Ok(slot)
    }
}

/// # Safety
/// `words` is aligned for `W` and valid for `arena_words + inputs` words for `'static` (as
/// far as the caller's promise goes).
unsafe fn inner<W: Word + 'static>(cfg: &Config, words: *mut W) -> Result<Inner<W>, TwStatus> {
    let n = arena_words(cfg);
    let inputs = cfg.plan.shape.inputs();
    // SAFETY: by the function's contract; the two slices do not overlap.
    let (arena, x) = unsafe {
        for i in 0..n + inputs {
            words.add(i).write(W::default());
        }
        (
            core::slice::from_raw_parts_mut(words, n),
            core::slice::from_raw_parts_mut(words.add(n), inputs),
        )
    };
    let learner = Learner::new(cfg, arena).map_err(TwStatus::from)?;
    let bits = u32::from(cfg.fixed.spec(Tag::act(0)).format.word());
    let x_max = (1i64 << (bits - 1)) - 1;
    Ok(Inner {
        learner,
        x,
        x_min: -x_max - 1,
        x_max,
    })
}

impl<W: Word + 'static> Inner<W> {
    /// Converts `sample` into the sample space, refusing words outside the input format.
    fn load(&mut self, sample: &[i32]) -> Result<(), TwStatus> {
        if sample.len() != self.x.len() {
            return Err(TwStatus::TwWrongLength);
        }
        if sample
            .iter()
            .any(|&v| i64::from(v) < self.x_min || i64::from(v) > self.x_max)
        {
            return Err(TwStatus::TwValueOutOfRange);
        }
        for (d, &v) in self.x.iter_mut().zip(sample) {
            *d = W::put(i64::from(v));
        }
        Ok(())
    }

    /// Learns one sample (only the feedback when `feedback_only`); whether it was classified
    /// right before the update.
    pub fn learn(
        &mut self,
        sample: &[i32],
        label: usize,
        feedback_only: bool,
    ) -> Result<bool, TwStatus> {
        if label >= self.learner.classes() {
            return Err(TwStatus::TwLabelOutOfRange);
        }
        self.load(sample)?;
        let r = if feedback_only {
            self.learner.learn_feedback(self.x, label)
        } else {
            self.learner.learn(self.x, label)
        };
        r.map_err(TwStatus::from)
    }

    /// The class of `sample`; the raw output words into `scores` when given.
    pub fn infer(&mut self, sample: &[i32], scores: Option<&mut [i32]>) -> Result<usize, TwStatus> {
        if let Some(s) = &scores {
            if s.len() != self.learner.classes() {
                return Err(TwStatus::TwWrongLength);
            }
        }
        self.load(sample)?;
        let class = self.learner.infer(self.x).map_err(TwStatus::from)?;
        if let Some(s) = scores {
            for (d, &o) in s.iter_mut().zip(self.learner.net().output()) {
                // The container is at most 32 bits wide.
                *d = o.get() as i32;
            }
        }
        Ok(class)
    }

    /// Learned parameter words.
    pub fn param_count(&self) -> usize {
        param_words(&self.learner.net().plan)
    }

    /// Copies the parameters out as `int32_t` words.
    pub fn read_params(&self, out: &mut [i32]) -> Result<(), TwStatus> {
        if out.len() != self.param_count() {
            return Err(TwStatus::TwWrongLength);
        }
        let src = self.learner.net().params().into_iter().flatten();
        for (d, &s) in out.iter_mut().zip(src) {
            *d = s.get() as i32;
        }
        Ok(())
    }

    /// Replaces the parameters with `words`, each within the container's range.
    pub fn write_params(&mut self, words: &[i32]) -> Result<(), TwStatus> {
        if words.len() != self.param_count() {
            return Err(TwStatus::TwWrongLength);
        }
        let max = (1i64 << (W::BITS - 1)) - 1;
        if words
            .iter()
            .any(|&v| i64::from(v) > max || i64::from(v) < -max - 1)
        {
            return Err(TwStatus::TwValueOutOfRange);
        }
        let dst = self.learner.net_mut().params_mut().into_iter().flatten();
        for (d, &s) in dst.zip(words) {
            *d = W::put(i64::from(s));
        }
        Ok(())
    }

    /// `0..n` shuffled from the learner's order stream, as the host's epoch shuffles.
    pub fn order(&mut self, order: &mut [u32]) {
        for (i, o) in order.iter_mut().enumerate() {
            *o = u32::try_from(i).unwrap_or(u32::MAX);
        }
        shuffle(order, self.learner.order_stream());
    }
}
