//! The streaming learner: one network in a caller-provided buffer that learns or infers one
//! sample at a time, as deployed firmware receives them.
//!
//! Size the buffer with [`arena_words`] (a pure function of the configuration, so a static can
//! be sized up front), build with [`Learner::new`], then call [`Learner::learn`] and
//! [`Learner::infer`] per sample. Samples are raw words already in the input's activation
//! format ([`crate::class::Tag::act`]`(0)`); [`Learner::encode`] converts reals. The weights
//! are read and written as raw words in [`Net::params`] order with [`Learner::read_params`]
//! and [`Learner::write_params`].
//!
//! The learner runs the same start (`train::setup`) and the same per-sample step
//! (`train::train_sample`) as the host's fixed arm, so the same samples in the same order give
//! the same raw weights; the packed-job firmware trains its jobs through it.

use crate::backend::{Backend, ConfigError, Fixed, FixedConfig, Word};
use crate::class::Tag;
use crate::kernels::{argmax, forward};
use crate::network::{Hyper, Net};
use crate::plan::{Plan, PlanError};
use crate::rng::Stream;
use crate::train::{self, Samples, Schedule, Streams};

/// Everything that decides a learner's results: network, rule, formats and seed.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Config {
    /// Layer sizes, rule and activations.
    pub plan: Plan,
    /// Learning hyper-parameters.
    pub hyper: Hyper,
    /// Feedback steps per sample (the rule is the plan's).
    pub feedback_steps: u8,
    /// Fixed-point formats, rounding and accumulator.
    pub fixed: FixedConfig,
    /// Run seed: initialisation, feedback noise, rounding bits.
    pub seed: u64,
}

impl Config {
    /// A configuration from layer sizes (input, hidden..., output); refuses sizes that are
    /// not a network.
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        sizes: &[usize],
        rule: crate::rules::Rule,
        hidden: crate::activation::Activation,
        output: crate::activation::Activation,
        hyper: Hyper,
        feedback_steps: u8,
        fixed: FixedConfig,
        seed: u64,
    ) -> Result<Config, LearnerError> {
        let shape = crate::plan::Shape::new(sizes).map_err(LearnerError::Sizes)?;
        Ok(Config {
            plan: Plan::new(shape, rule, hidden, output),
            hyper,
            feedback_steps,
            fixed,
            seed,
        })
    }

    /// The schedule of this configuration.
    pub fn schedule(&self) -> Schedule {
        Schedule {
            rule: self.plan.rule,
            feedback_steps: self.feedback_steps,
        }
    }
}

/// Buffer words a learner of `cfg` needs (`Plan::counts().total()`): the arena holds the
/// parameters, the activations and every working vector, nothing else. Multiply by the
/// container's bytes (`container_bits(&cfg.fixed) / 8`) for a byte count.
pub fn arena_words(cfg: &Config) -> usize {
    cfg.plan.counts().total()
}

/// Learned parameter words (forward weights and biases, feedback weights and biases): the
/// length [`Learner::read_params`] writes and [`Learner::write_params`] reads.
pub fn param_words(plan: &Plan) -> usize {
    let c = plan.counts();
    c.forward_weights + c.biases + c.feedback_weights
}

/// Why a learner call was refused. Nothing has changed when a call returns one.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LearnerError {
    /// The layer sizes are not a network.
    Sizes(PlanError),
    /// The buffer holds fewer words than the network needs.
    Buffer {
        /// Words needed ([`arena_words`]).
        need: usize,
        /// Words given.
        have: usize,
    },
    /// The fixed back end refused the formats.
    Config(ConfigError),
    /// A sample has the wrong number of values.
    Sample {
        /// Values given.
        len: usize,
        /// The network's inputs.
        inputs: usize,
    },
    /// A label is not a class of the network.
    Label {
        /// Label given.
        label: usize,
        /// Classes: labels run from 0 to `classes - 1`.
        classes: usize,
    },
    /// An output buffer has the wrong length.
    Output {
        /// Words given.
        len: usize,
        /// Words expected.
        need: usize,
    },
    /// The formats' words do not fit the learner's container.
    Container {
        /// Bits the formats need.
        need: u32,
        /// Bits of the container.
        have: u32,
    },
}

impl core::fmt::Display for LearnerError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match *self {
            LearnerError::Sizes(e) => write!(f, "sizes: {e}"),
            LearnerError::Buffer { need, have } => write!(
                f,
                "the buffer holds {have} words but this network needs {need}"
            ),
            LearnerError::Config(e) => write!(f, "formats: {e}"),
            LearnerError::Sample { len, inputs } => write!(
                f,
                "a sample has {len} values but the network takes {inputs}"
            ),
            LearnerError::Label { label, classes } => write!(
                f,
                "label {label} is not a class: labels run from 0 to {}",
                classes.saturating_sub(1)
            ),
            LearnerError::Output { len, need } => {
                write!(f, "the output buffer holds {len} words; {need} are needed")
            }
            LearnerError::Container { need, have } => write!(
                f,
                "the formats need {need}-bit words but the learner stores {have}-bit words"
            ),
        }
    }
}

/// One network learning sample by sample on a back end `B`.
pub struct Learner<'a, B: Backend> {
    net: Net<'a, B::S>,
    be: B,
    schedule: Schedule,
    streams: Streams,
}

impl<'a, W: Word> Learner<'a, Fixed<W>> {
    /// A fixed-point learner of `cfg` in `arena` (at least [`arena_words`] words), its
    /// parameters drawn from the seed as the host's fixed arm draws them.
    // Inlined so that a board builds the learner in place (one copy of the back end on the
    // stack, not one per call level).
    #[inline(always)]
    pub fn new(cfg: &Config, arena: &'a mut [W]) -> Result<Self, LearnerError> {
        let need = crate::backend::container_bits(&cfg.fixed);
        if need > W::BITS {
            return Err(LearnerError::Container {
                need,
                have: W::BITS,
            });
        }
        let be = Fixed::<W>::new(cfg.fixed, cfg.seed).map_err(LearnerError::Config)?;
        Learner::with_backend(cfg, arena, be)
    }
}

impl<'a, B: Backend> Learner<'a, B> {
    /// A learner of `cfg` in `arena` on the back end `be`.
    #[inline(always)]
    pub fn with_backend(
        cfg: &Config,
        arena: &'a mut [B::S],
        mut be: B,
    ) -> Result<Self, LearnerError> {
        let need = arena_words(cfg);
        if arena.len() < need {
            return Err(LearnerError::Buffer {
                need,
                have: arena.len(),
            });
        }
        let net =
            train::setup(cfg.plan, &cfg.hyper, arena, &mut be, cfg.seed).map_err(|e| match e {
                PlanError::Arena(need, have) => LearnerError::Buffer { need, have },
                other => LearnerError::Sizes(other),
            })?;
        Ok(Learner {
            net,
            be,
            schedule: cfg.schedule(),
            streams: Streams::new(cfg.seed),
        })
    }

    /// The network (plan, parameters, last activations).
    pub fn net(&self) -> &Net<'a, B::S> {
        &self.net
    }

    /// The network, mutable (for loading parameters of another layout).
    pub fn net_mut(&mut self) -> &mut Net<'a, B::S> {
        &mut self.net
    }

    /// The back end (counters).
    pub fn backend(&self) -> &B {
        &self.be
    }

    /// The back end, mutable (resetting counters).
    pub fn backend_mut(&mut self) -> &mut B {
        &mut self.be
    }

    /// Inputs a sample has.
    pub fn inputs(&self) -> usize {
        self.net.plan.shape.inputs()
    }

    /// Classes (outputs).
    pub fn classes(&self) -> usize {
        self.net.plan.shape.outputs()
    }

    fn check_sample(&self, sample: &[B::S]) -> Result<(), LearnerError> {
        let inputs = self.inputs();
        if sample.len() != inputs {
            return Err(LearnerError::Sample {
                len: sample.len(),
                inputs,
            });
        }
        Ok(())
    }

    fn check_label(&self, label: usize) -> Result<(), LearnerError> {
        let classes = self.classes();
        if label >= classes {
            return Err(LearnerError::Label { label, classes });
        }
        Ok(())
    }

    /// Encodes real inputs into raw input words with `encoder` (a back end of the same
    /// formats; the host's data encoder draws its rounding bits from `rng::streams::DATA`, so
    /// the learner's own rounding stream is not moved). `values` and `out` hold
    /// [`Learner::inputs`] values each.
    pub fn encode(
        &self,
        values: &[f32],
        out: &mut [B::S],
        encoder: &mut B,
    ) -> Result<(), LearnerError> {
        let inputs = self.inputs();
        if values.len() != inputs {
            return Err(LearnerError::Sample {
                len: values.len(),
                inputs,
            });
        }
        if out.len() != inputs {
            return Err(LearnerError::Output {
                len: out.len(),
                need: inputs,
            });
        }
        for (o, &v) in out.iter_mut().zip(values) {
            *o = encoder.encode(Tag::act(0), v);
        }
        Ok(())
    }

    /// Learns one sample: forward pass, output target, the rule's feedback steps and the
    /// forward update. Returns whether the network classified it right before the update.
    pub fn learn(&mut self, sample: &[B::S], label: usize) -> Result<bool, LearnerError> {
        self.step(sample, label, false)
    }

    /// Trains only the feedback on one sample (the warm-up of rules that learn it).
    pub fn learn_feedback(&mut self, sample: &[B::S], label: usize) -> Result<bool, LearnerError> {
        self.step(sample, label, true)
    }

    fn step(
        &mut self,
        sample: &[B::S],
        label: usize,
        feedback_only: bool,
    ) -> Result<bool, LearnerError> {
        self.check_sample(sample)?;
        self.check_label(label)?;
        let (_, correct) = train::train_sample(
            &mut self.net,
            &mut self.be,
            &self.schedule,
            sample,
            label,
            &mut self.streams.noise,
            feedback_only,
        );
        Ok(correct)
    }

    /// The network's class for `sample` (largest output; the first on ties).
    pub fn infer(&mut self, sample: &[B::S]) -> Result<usize, LearnerError> {
        self.check_sample(sample)?;
        forward(&mut self.net, &mut self.be, sample);
        Ok(argmax(self.net.output()))
    }

    /// The outputs for `sample`, as raw words in the output's activation format, into
    /// `scores` ([`Learner::classes`] words). Returns the class.
    pub fn scores(&mut self, sample: &[B::S], scores: &mut [B::S]) -> Result<usize, LearnerError> {
        let need = self.classes();
        if scores.len() != need {
            return Err(LearnerError::Output {
                len: scores.len(),
                need,
            });
        }
        let class = self.infer(sample)?;
        for (s, &o) in scores.iter_mut().zip(self.net.output()) {
            *s = o;
        }
        Ok(class)
    }

    /// One epoch over `data` in a fresh order shuffled from the learner's order stream, the
    /// host arm's epoch (`train::train_epoch`). `order` is working space of `data.len()`
    /// entries.
    #[inline(never)]
    pub fn epoch(
        &mut self,
        data: Samples<'_, B::S>,
        order: &mut [u32],
        feedback_only: bool,
    ) -> Result<train::EpochStats, train::NonFinite> {
        train::train_epoch(
            &mut self.net,
            &mut self.be,
            &self.schedule,
            data,
            order,
            &mut self.streams,
            feedback_only,
        )
    }

    /// Samples of `data` classified right (`train::evaluate`).
    #[inline(never)]
    pub fn evaluate(&mut self, data: Samples<'_, B::S>) -> u32 {
        train::evaluate(&mut self.net, &mut self.be, data)
    }

    /// The order stream, for a caller that shuffles its own data the way [`Learner::epoch`]
    /// does (`train::shuffle`).
    pub fn order_stream(&mut self) -> &mut Stream {
        &mut self.streams.order
    }

    /// Copies the learned parameters into `out` ([`param_words`] words) in [`Net::params`]
    /// order: forward weights, forward biases, feedback weights, feedback biases.
    pub fn read_params(&self, out: &mut [B::S]) -> Result<(), LearnerError> {
        let need = param_words(&self.net.plan);
        if out.len() != need {
            return Err(LearnerError::Output {
                len: out.len(),
                need,
            });
        }
        let mut dst = out.iter_mut();
        for part in self.net.params() {
            for (&s, d) in part.iter().zip(&mut dst) {
                *d = s;
            }
        }
        Ok(())
    }

    /// Replaces the learned parameters with `words` ([`param_words`] words, the order of
    /// [`Learner::read_params`]). The words are taken as they are: each must be a valid
    /// word of its tensor's format.
    pub fn write_params(&mut self, words: &[B::S]) -> Result<(), LearnerError> {
        let need = param_words(&self.net.plan);
        if words.len() != need {
            return Err(LearnerError::Output {
                len: words.len(),
                need,
            });
        }
        let mut src = words.iter();
        for part in self.net.params_mut() {
            for (d, &s) in part.iter_mut().zip(&mut src) {
                *d = s;
            }
        }
        Ok(())
    }

    /// FNV-1a digest of the learned parameters (`train::digest`), the figure by which a
    /// board's weights are compared with the host's.
    pub fn digest(&self) -> u64 {
        train::digest::<B>(&self.net)
    }
}
