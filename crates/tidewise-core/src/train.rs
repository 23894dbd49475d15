//! The per-sample learning step (batch size 1, as a chip learns), epochs and evaluation.

use crate::backend::Backend;
use crate::class::{Class, Tag};
use crate::kernels::{argmax, forward, output_target, update_layer};
use crate::network::Net;
use crate::part::Part;
use crate::rng::{streams, Stream};
use crate::rules::{displacements, train_feedback, Rule};

/// A labelled data set already encoded into the input's activation format
/// ([`Tag::act`]`(0)`): `labels.len()` rows of
/// `features.len() / labels.len()` values.
#[derive(Clone, Copy, Debug)]
pub struct Samples<'d, S> {
    /// Row-major features.
    pub features: &'d [S],
    /// Class labels.
    pub labels: &'d [u16],
}

impl<'d, S> Samples<'d, S> {
    /// Number of samples.
    pub fn len(&self) -> usize {
        self.labels.len()
    }
    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.labels.is_empty()
    }
    /// Features of sample `i`.
    pub fn row(&self, i: usize) -> &'d [S] {
        let n = self.features.len() / self.labels.len().max(1);
        self.features.get(i * n..(i + 1) * n).unwrap_or(&[])
    }
}

/// Where the float arm first produced a NaN or an infinity.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct NonFinite {
    /// Sample index within the epoch's order (0-based).
    pub step: u32,
    /// Weight layer (0-based) being computed.
    pub layer: usize,
    /// Tensor class being written.
    pub class: Class,
}

/// How a run steps through its data.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct Schedule {
    /// Learning rule.
    pub rule: Rule,
    /// Feedback-training steps per sample (K).
    pub feedback_steps: u8,
}

/// Sums over one epoch.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct EpochStats {
    /// Sum of the per-sample losses `½‖h_L − y‖²`, before each sample's update.
    pub loss_sum: f64,
    /// Samples predicted right, before each sample's update.
    pub correct: u32,
    /// Samples seen.
    pub samples: u32,
}

impl EpochStats {
    /// Mean loss.
    pub fn loss(&self) -> f64 {
        self.loss_sum / f64::from(self.samples.max(1))
    }
}

/// The random streams of one arm: sample order and feedback noise.
#[derive(Clone, Debug)]
pub struct Streams {
    /// Sample order.
    pub order: Stream,
    /// Feedback noise.
    pub noise: Stream,
}

impl Streams {
    /// The streams of a run seeded with `seed` (the same for both arms).
    pub fn new(seed: u64) -> Streams {
        Streams {
            order: Stream::new(seed, streams::ORDER),
            noise: Stream::new(seed, streams::NOISE),
        }
    }
}

/// One sample: forward, output target, `K` feedback steps, targets, and (unless
/// `feedback_only`) the forward update. Returns the sample's loss and whether it was right.
pub fn train_sample<B: Backend>(
    net: &mut Net<'_, B::S>,
    be: &mut B,
    schedule: &Schedule,
    x: &[B::S],
    label: usize,
    noise: &mut Stream,
    feedback_only: bool,
) -> (f64, bool) {
    forward(net, be, x);
    let (loss, correct) = output_target(net, be, label);
    for _ in 0..schedule.feedback_steps {
        train_feedback(schedule.rule, net, be, noise);
    }
    if !feedback_only {
        displacements(schedule.rule, net, be);
        for l in 1..=net.plan.layers() {
            update_layer(net, be, l);
        }
    }
    (loss, correct)
}

/// Shuffles `order` (Fisher-Yates from the order stream).
pub fn shuffle(order: &mut [u32], rng: &mut Stream) {
    for i in (1..order.len()).rev() {
        let j = rng.below(u32::try_from(i + 1).unwrap_or(u32::MAX)) as usize;
        // `below` draws in 0..=i; the `min` and `get_mut` only let the compiler see it.
        if let Some(head) = order.get_mut(..=i) {
            head.swap(i, j.min(i));
        }
    }
}

/// One epoch over `data` in a fresh shuffled order. `order` is working space of
/// `data.len()` entries (a static buffer on a board). Stops at the first non-finite value.
pub fn train_epoch<B: Backend>(
    net: &mut Net<'_, B::S>,
    be: &mut B,
    schedule: &Schedule,
    data: Samples<'_, B::S>,
    order: &mut [u32],
    rng: &mut Streams,
    feedback_only: bool,
) -> Result<EpochStats, NonFinite> {
    let n = data.len().min(order.len());
    let order = order.part_mut(..n);
    for (i, o) in order.iter_mut().enumerate() {
        *o = i as u32;
    }
    shuffle(order, &mut rng.order);
    let mut stats = EpochStats::default();
    for (step, &i) in order.iter().enumerate() {
        let i = i as usize;
        let Some(&label) = data.labels.get(i) else {
            continue;
        };
        let label = usize::from(label);
        let (loss, correct) = train_sample(
            net,
            be,
            schedule,
            data.row(i),
            label,
            &mut rng.noise,
            feedback_only,
        );
        if let Some((layer, class)) = be.fault() {
            return Err(NonFinite {
                step: step as u32,
                layer,
                class,
            });
        }
        stats.loss_sum += loss;
        stats.correct += u32::from(correct);
        stats.samples += 1;
    }
    Ok(stats)
}

/// Samples of `data` the network classifies right.
pub fn evaluate<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, data: Samples<'_, B::S>) -> u32 {
    let mut correct = 0;
    for i in 0..data.len() {
        forward(net, be, data.row(i));
        if argmax(net.output()) == usize::from(data.labels[i]) {
            correct += 1;
        }
    }
    correct
}

/// Lays out a network in `arena` and draws its initial parameters: the one start sequence
/// the host arms and the boards share, so their rounding streams agree from the first step.
pub fn setup<'a, B: Backend>(
    plan: crate::plan::Plan,
    hyper: &crate::network::Hyper,
    arena: &'a mut [B::S],
    be: &mut B,
    seed: u64,
) -> Result<Net<'a, B::S>, crate::plan::PlanError> {
    let mut net = Net::new(plan, hyper, arena, be)?;
    init_params(&mut net, be, seed);
    be.reset_counters();
    Ok(net)
}

/// Initial parameters: forward and feedback matrices uniform in ±√(6/(fan_in + fan_out))
/// (the uniform range of "Understanding the difficulty of training deep feedforward neural
/// networks", AISTATS 2010, recalled from memory; `docs/references.md` \[6\]), biases zero,
/// drawn as `f32` from the init stream in a fixed order and encoded by `be`, so the fixed arm
/// starts from the float initialisation rounded into its formats.
pub fn init_params<B: Backend>(net: &mut Net<'_, B::S>, be: &mut B, seed: u64) {
    let mut rng = Stream::new(seed, streams::INIT);
    let plan = net.plan;
    let mut fill = |be: &mut B, tag: Tag, m: &mut [B::S], rows: usize, cols: usize| {
        let limit = crate::network::sqrt_f32(6.0 / (rows + cols).max(1) as f32);
        for v in m.iter_mut() {
            let u = (rng.next_u32() >> 8) as f32 * (1.0 / 8_388_608.0) - 1.0;
            *v = be.encode(tag, u * limit);
        }
    };
    for l in 1..=plan.layers() {
        be.set_layer(l - 1);
        fill(
            be,
            Tag::weights(l),
            net.w.part_mut(plan.w_range(l)),
            plan.n(l),
            plan.n(l - 1),
        );
    }
    for i in 1..plan.layers() {
        be.set_layer(i - 1);
        fill(
            be,
            Tag::feedback(i),
            net.fw.part_mut(plan.fb_range(i)),
            plan.n(i),
            plan.fb_cols(i),
        );
    }
}

/// FNV-1a (64-bit) over the learned parameters' raw bits, each as 4 little-endian bytes
/// (sign-extended words, or `f32` bit patterns), in [`Net::params`] order: the digest by
/// which a board's final weights are compared with the host's.
pub fn digest<B: Backend>(net: &Net<'_, B::S>) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for part in net.params() {
        for &v in part {
            for byte in B::raw_bits(v).to_le_bytes() {
                h ^= u64::from(byte);
                h = h.wrapping_mul(0x0000_0100_0000_01b3);
            }
        }
    }
    h
}
