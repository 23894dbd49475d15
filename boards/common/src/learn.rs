//! Training a job on the board through the core's streaming learner
//! (`tidewise_core::learner`), which runs the same core calls in the same order as the host's
//! fixed arm (`crates/tidewise/src/arms.rs`), so the final parameters, and every per-epoch
//! figure, are bit-identical to the host's.
//!
//! The data stays where the job blob lies (flash): its arrays are 4-byte aligned inside the
//! blob and the blob is placed at a 4-byte boundary ([`Aligned`]), so they are read in place
//! as words. The network lives in a static arena and the sample order in a static buffer,
//! both sized at build time for the embedded job; the learner itself (its fixed back end
//! with the `[layer][class]` format table and the event counters, over a kilobyte) lives in
//! a static [`Slot`], not on the stack.

use core::mem::MaybeUninit;

use bytemuck::Pod;
use tidewise_core::backend::{Backend, Fixed, Word};
use tidewise_core::job::{self, JobError};
use tidewise_core::learner::{Config, Learner, LearnerError};
use tidewise_core::train::Samples;

use crate::counter::Counter;
use crate::tw;

/// A value placed at a 4-byte boundary: `static JOB: &Aligned<[u8]> = &Aligned(*include_bytes!(..))`.
#[repr(C, align(4))]
pub struct Aligned<T: ?Sized>(pub T);

/// Static storage for the job's learner: `static mut LEARNER: Slot<Word> =
/// MaybeUninit::uninit();` in `.uninit` (not zeroed, no initial values in flash), written
/// once by [`learn`].
pub type Slot<W> = MaybeUninit<Learner<'static, Fixed<W>>>;

/// Why a job could not be trained.
pub enum LearnError {
    /// The decoder refused the blob.
    Job(JobError),
    /// A data array cannot be read in place (the blob is not 4-byte aligned).
    Unaligned(&'static str),
    /// The learner refused the job's formats or network.
    Learner(LearnerError),
    /// The order buffer holds fewer entries than the job has training samples.
    OrderBuffer {
        /// Training samples in the job.
        needed: usize,
        /// Entries in the firmware's order buffer.
        available: usize,
    },
}

impl core::fmt::Display for LearnError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            LearnError::Job(e) => write!(f, "{e}"),
            LearnError::Unaligned(what) => {
                write!(
                    f,
                    "the job's {what} cannot be read in place: misaligned blob"
                )
            }
            LearnError::Learner(e) => write!(f, "job: {e}"),
            LearnError::OrderBuffer { needed, available } => write!(
                f,
                "the job has {needed} training samples, but the order buffer holds {available}"
            ),
        }
    }
}

impl From<JobError> for LearnError {
    fn from(e: JobError) -> Self {
        LearnError::Job(e)
    }
}

/// Layer sizes as `64x16x10`.
struct Sizes<'a>(&'a [u16]);

impl core::fmt::Display for Sizes<'_> {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        for (i, n) in self.0.iter().enumerate() {
            if i > 0 {
                f.write_str("x")?;
            }
            write!(f, "{n}")?;
        }
        Ok(())
    }
}

fn words<'a, T: Pod>(bytes: &'a [u8], what: &'static str) -> Result<&'a [T], LearnError> {
    bytemuck::try_cast_slice(bytes).map_err(|_| LearnError::Unaligned(what))
}

/// Builds the job's learner into `slot` in a frame of its own, so its configuration and the
/// temporaries of its construction (copies of the back end's format table) are off the stack
/// while it trains.
#[inline(never)]
fn build<'s, W: Word>(
    job: &job::Job<'_>,
    arena: &'static mut [W],
    slot: &'s mut Slot<W>,
) -> Result<&'s mut Learner<'static, Fixed<W>>, LearnError> {
    let h = &job.header;
    let cfg = Config {
        plan: job.plan,
        hyper: h.hyper,
        feedback_steps: h.schedule.feedback_steps,
        fixed: h.fixed,
        seed: h.seed,
    };
    Ok(slot.write(Learner::new(&cfg, arena).map_err(LearnError::Learner)?))
}

/// Decodes `blob`, trains it as the host's fixed arm does and prints the `learn`, `epoch`
/// and `result` records. `arena`, `order` and `slot` are the firmware's static buffers.
#[inline(never)]
pub fn learn<W: Word + Pod>(
    clock: &Counter,
    blob: &[u8],
    arena: &'static mut [W],
    order: &mut [u32],
    slot: &mut Slot<W>,
) -> Result<(), LearnError> {
    let job = job::decode(blob, W::BITS)?;
    job.check_capacity(arena.len(), order.len())?;
    let h = &job.header;
    let train_set: Samples<'_, W> = Samples {
        features: words(job.train.features, "train features")?,
        labels: words(job.train.labels, "train labels")?,
    };
    let test_set: Samples<'_, W> = Samples {
        features: words(job.test.features, "test features")?,
        labels: words(job.test.labels, "test labels")?,
    };
    let need = job.plan.counts().total();
    tw!(
        "learn rule={} sizes={} container_bits={} train={} test={} epochs={} warmup={} feedback_steps={} need_words={} arena_words={} arena_bytes={} order_len={} order_bytes={}",
        job.plan.rule.name(),
        Sizes(job.plan.shape.sizes()),
        W::BITS,
        job.train.samples,
        job.test.samples,
        h.epochs,
        h.warmup_epochs,
        h.schedule.feedback_steps,
        need,
        arena.len(),
        core::mem::size_of_val(arena),
        order.len(),
        core::mem::size_of_val(order)
    );

    // The host's fixed arm, step for step (`arms::run_arm`), through the learner.
    let learner = build(&job, arena, slot)?;
    // Parameters loaded on the host (`net.init`) replace the drawn ones after the same
    // setup, so the rounding stream is where the host's is.
    job.load_init(learner.net_mut())?;
    let available = order.len();
    let order = order
        .get_mut(..job.train.samples)
        .ok_or(LearnError::OrderBuffer {
            needed: job.train.samples,
            available,
        })?;
    let (mut train_ticks, mut trained) = (0u64, 0u64);
    for epoch in 1..=h.epochs {
        learner.backend_mut().reset_counters();
        let feedback_only = epoch <= h.warmup_epochs;
        let t0 = clock.now();
        let stats = learner.epoch(train_set, order, feedback_only);
        let t1 = clock.now();
        // The fixed back end never reports a non-finite value; keep the sums of an early stop.
        let (loss, samples) = match stats {
            Ok(s) => (s.loss(), s.samples),
            Err(_) => (f64::NAN, 0),
        };
        let correct = learner.evaluate(test_set);
        let t2 = clock.now();
        let c = learner.backend().counters();
        tw!(
            "epoch n={} warmup={} samples={} loss_bits=0x{:016x} correct={} tested={} saturations={} lost={} updates={} train_ticks={} train_instr={} eval_ticks={} eval_instr={}",
            epoch,
            u8::from(feedback_only),
            samples,
            loss.to_bits(),
            correct,
            test_set.len(),
            c.total_saturations(),
            c.total_lost(),
            c.total_updates(),
            t1 - t0,
            clock.instructions(t1 - t0),
            t2 - t1,
            clock.instructions(t2 - t1)
        );
        if !feedback_only {
            train_ticks += t1 - t0;
            trained += u64::from(samples);
        }
    }
    let per_sample = clock.instructions(train_ticks) / trained.max(1);
    tw!(
        "result digest=0x{:016x} trained_samples={} train_ticks={} train_instr={} instr_per_sample={}",
        learner.digest(),
        trained,
        train_ticks,
        clock.instructions(train_ticks),
        per_sample
    );
    Ok(())
}
