//! Job blobs: one fixed-point training run (design, schedule, seed, and the data already
//! encoded into the input layer's activation format) packed into bytes that a board embeds in flash and
//! decodes without a heap.
//!
//! # Layout
//! All integers are little-endian. Arrays start at multiples of [`ALIGN`] bytes from the
//! start of the blob, so a board that places the blob at a 4-byte boundary can read them in
//! place as `&[i8]`, `&[i16]`, `&[i32]` and `&[u16]`.
//!
//! | bytes | content |
//! |---|---|
//! | 0..4 | magic [`MAGIC`] |
//! | 4..6 | format version [`VERSION`] |
//! | 6..8 | header length `h` |
//! | 8..12 | total blob length, checksum included |
//! | 12..12+h | [`Header`], postcard-encoded |
//! | | zero padding to a multiple of [`ALIGN`] |
//! | | train features: `train_samples × inputs` raw words of `container_bits / 8` bytes; padding |
//! | | train labels: one `u16` per sample; padding |
//! | | test features; padding |
//! | | test labels; padding |
//! | | initial parameters: `init_words` raw words in `Net::params` order (forward weights, biases, feedback weights, feedback biases), absent when 0; padding |
//! | last 4 | FNV-1a 32 of every byte before it |
//!
//! A job with initial parameters (a host run from `net.init`) is set up exactly as one without:
//! `train::setup` draws and encodes the seeded parameters, so the rounding stream advances
//! the same way; [`Job::load_init`] then overwrites them with the stored words.
//!
//! [`decode`] checks, in this order: the magic, the version, the stored length against the
//! blob's, the checksum, the header (network sizes, formats and per-layer formats,
//! accumulator, container), the layout the header implies against the stored length, the
//! padding, every label and the count of initial parameters; each failure is a [`JobError`],
//! never a panic.

use crate::activation::Activation;
use crate::backend::{container_bits, FixedConfig, Word};
use crate::class::{Class, MAX_LAYERS};
use crate::format::Format;
use crate::network::{Hyper, Net};
use crate::part::Part;
use crate::plan::{Plan, PlanError, Shape};
use crate::rules::Rule;
use crate::train::{Samples, Schedule};

/// The first four bytes of every job.
pub const MAGIC: [u8; 4] = *b"TWJB";
/// Version of this layout; a decoder accepts exactly this version.
pub const VERSION: u16 = 4;
/// Alignment of every array in the blob, in bytes.
pub const ALIGN: usize = 4;
/// Bytes before the header: magic, version, header length, total length.
pub const PREAMBLE: usize = 12;
/// Bytes of the trailing checksum.
pub const CHECKSUM: usize = 4;
/// Largest encoded header the encoder writes (about 100 bytes for a uniform design, up to
/// about 210 with a format for every layer of every per-layer class).
pub const MAX_HEADER: usize = 512;

/// Everything about a run except its data.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Header {
    /// Layer sizes: input, hidden..., output (the plan's shape).
    pub sizes: heapless::Vec<u16, { MAX_LAYERS + 1 }>,
    /// Learning rule (the plan's).
    pub rule: Rule,
    /// Hidden activation.
    pub hidden: Activation,
    /// Output activation.
    pub output: Activation,
    /// Hyper-parameters, as the host's design holds them.
    pub hyper: Hyper,
    /// Rule and feedback steps per sample.
    pub schedule: Schedule,
    /// Leading epochs that train only the feedback.
    pub warmup_epochs: u16,
    /// Epochs, warm-up included.
    pub epochs: u16,
    /// The run seed (initialisation, order, noise, rounding).
    pub seed: u64,
    /// Formats, rounding, accumulator and per-layer formats (version 2 on).
    pub fixed: FixedConfig,
    /// Container of every stored word: 8, 16 or 32 (what [`container_bits`] gives for `fixed`).
    pub container_bits: u8,
    /// Training samples.
    pub train_samples: u32,
    /// Test samples.
    pub test_samples: u32,
    /// Initial raw parameter words stored after the test labels: 0 (the parameters are drawn
    /// from the seed) or every learned parameter of the plan.
    pub init_words: u32,
}

/// Why a job blob was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum JobError {
    /// The blob is shorter than its preamble or than the length it states.
    Truncated {
        /// Bytes needed.
        need: usize,
        /// Bytes present.
        have: usize,
    },
    /// Bytes follow the stated end of the blob.
    Trailing {
        /// Stated length.
        stated: usize,
        /// Bytes present.
        have: usize,
    },
    /// The first four bytes are not [`MAGIC`]: not a job.
    Magic,
    /// The blob was written by another layout version.
    Version {
        /// Version in the blob.
        found: u16,
        /// The version this decoder reads.
        supported: u16,
    },
    /// The checksum does not match the contents.
    Checksum {
        /// Checksum stored in the blob.
        stored: u32,
        /// Checksum of the contents.
        computed: u32,
    },
    /// The header cannot be decoded, or does not fill its stated length.
    Header,
    /// The header's network sizes are not a valid network.
    Plan(PlanError),
    /// The schedule names another rule than the plan.
    Schedule,
    /// A hyper-parameter is not a finite number (by position in [`Hyper`]: lr, lr_feedback,
    /// beta, sigma, decay).
    Hyper(&'static str),
    /// A class's format has a word or fraction count outside the allowed range.
    Format(Class),
    /// A per-layer format is out of range, or names a layer the network does not have.
    LayerFormat {
        /// The class.
        class: Class,
        /// The layer (0 = input).
        layer: usize,
        /// Layers of the network (weight layers L).
        layers: usize,
    },
    /// The accumulator width is outside 2 to 64 bits.
    AccBits(u8),
    /// The stated container is not the one the formats need.
    ContainerField {
        /// Container bits in the header.
        stated: u8,
        /// Container bits the formats need.
        needed: u32,
    },
    /// The job's words need another container than the firmware was built for.
    Container {
        /// Container bits of the job.
        job: u8,
        /// Container bits of this firmware.
        firmware: u32,
    },
    /// The header's sizes imply another blob length than the stated one.
    Layout {
        /// Length the header implies.
        implied: usize,
        /// Length the preamble states.
        stated: usize,
    },
    /// A padding byte is not zero.
    Padding {
        /// Offset of the byte.
        offset: usize,
    },
    /// A label names no output.
    Label {
        /// Test (`true`) or train split.
        test: bool,
        /// Sample index.
        index: usize,
        /// The label.
        label: u16,
        /// Outputs of the network.
        outputs: usize,
    },
    /// A data array does not have the length the header states (encoder input).
    DataLength {
        /// Test (`true`) or train split.
        test: bool,
        /// Values expected.
        expected: usize,
        /// Values given.
        found: usize,
    },
    /// The output buffer is too small (encoder).
    Space {
        /// Bytes needed.
        need: usize,
        /// Bytes available.
        have: usize,
    },
    /// The network needs more arena words than the firmware has.
    Arena {
        /// Words needed.
        need: usize,
        /// Words available.
        have: usize,
    },
    /// The training split needs a longer order buffer than the firmware has.
    Order {
        /// Entries needed (one per training sample).
        need: usize,
        /// Entries available.
        have: usize,
    },
    /// A count does not fit the blob's 32-bit fields or this machine's address space.
    TooLarge,
    /// The initial parameters are neither absent nor one word per learned parameter.
    InitLength {
        /// Words the plan's learned parameters take.
        expected: usize,
        /// Words stated or given.
        found: usize,
    },
}

impl core::fmt::Display for JobError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match *self {
            JobError::Truncated { need, have } => {
                write!(f, "job truncated: {have} bytes, {need} needed")
            }
            JobError::Trailing { stated, have } => write!(
                f,
                "job has {have} bytes but states a length of {stated}: extra bytes at the end"
            ),
            JobError::Magic => f.write_str("not a job: the magic bytes are not \"TWJB\""),
            JobError::Version { found, supported } => write!(
                f,
                "job layout version {found}, but this firmware reads version {supported}: rebuild the job and the firmware from one source"
            ),
            JobError::Checksum { stored, computed } => write!(
                f,
                "job checksum mismatch: stored 0x{stored:08x}, contents give 0x{computed:08x} (corrupted job)"
            ),
            JobError::Header => f.write_str("job header cannot be decoded"),
            JobError::Plan(e) => write!(f, "job network: {e}"),
            JobError::Schedule => f.write_str("job schedule names another rule than its plan"),
            JobError::Hyper(name) => write!(f, "job hyper-parameter {name} is not finite"),
            JobError::Format(c) => write!(f, "job format of {} is out of range", c.name()),
            JobError::LayerFormat {
                class,
                layer,
                layers,
            } => write!(
                f,
                "job format of {} for layer {layer} is out of range or names no layer of a network with {layers} weight layers (weights and biases: 1 to {layers}, activations: 0 to {layers})",
                class.name()
            ),
            JobError::AccBits(b) => write!(
                f,
                "job accumulator of {b} bits is outside the allowed 2 to 64 bits"
            ),
            JobError::ContainerField { stated, needed } => write!(
                f,
                "job states {stated}-bit containers but its formats need {needed}-bit ones"
            ),
            JobError::Container { job, firmware } => write!(
                f,
                "job words need {job}-bit containers but this firmware was built for {firmware}-bit ones"
            ),
            JobError::Layout { implied, stated } => write!(
                f,
                "job header implies {implied} bytes but the blob states {stated}"
            ),
            JobError::Padding { offset } => {
                write!(f, "job padding byte at offset {offset} is not zero")
            }
            JobError::Label {
                test,
                index,
                label,
                outputs,
            } => write!(
                f,
                "job {} label {index} is {label}, but the network has {outputs} outputs",
                if test { "test" } else { "train" }
            ),
            JobError::DataLength {
                test,
                expected,
                found,
            } => write!(
                f,
                "job {} data has {found} values, {expected} expected",
                if test { "test" } else { "train" }
            ),
            JobError::Space { need, have } => {
                write!(f, "job needs {need} bytes, the buffer holds {have}")
            }
            JobError::Arena { need, have } => write!(
                f,
                "the network needs {need} arena words, this firmware has {have}"
            ),
            JobError::Order { need, have } => write!(
                f,
                "the training split has {need} samples, this firmware's order buffer holds {have}"
            ),
            JobError::TooLarge => f.write_str("job sizes overflow the blob's fields"),
            JobError::InitLength { expected, found } => write!(
                f,
                "job carries {found} initial parameter words, but its network has {expected} learned parameters (0 or {expected} allowed)"
            ),
        }
    }
}

/// FNV-1a, 32-bit (offset basis 0x811c9dc5, prime 0x01000193): the job checksum ("The FNV
/// Non-Cryptographic Hash Algorithm", IETF Internet-Draft, `docs/references.md` \[30\]).
pub fn fnv1a32(bytes: &[u8]) -> u32 {
    let mut h: u32 = 0x811c_9dc5;
    for &b in bytes {
        h ^= u32::from(b);
        h = h.wrapping_mul(0x0100_0193);
    }
    h
}

fn pad(n: usize) -> Option<usize> {
    n.checked_add(ALIGN - 1).map(|v| v / ALIGN * ALIGN)
}

/// Where the arrays lie in a blob.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Layout {
    train_x: (usize, usize),
    train_y: (usize, usize),
    test_x: (usize, usize),
    test_y: (usize, usize),
    init: (usize, usize),
    /// Offset of the checksum.
    end: usize,
}

impl Layout {
    fn of(header: &Header, header_len: usize) -> Option<Layout> {
        let inputs = usize::from(*header.sizes.first()?);
        let word = usize::from(header.container_bits / 8);
        let mut at = pad(PREAMBLE.checked_add(header_len)?)?;
        let mut span = |bytes: usize| -> Option<(usize, usize)> {
            let start = at;
            at = pad(start.checked_add(bytes)?)?;
            Some((start, bytes))
        };
        let (ntr, nte) = (
            usize::try_from(header.train_samples).ok()?,
            usize::try_from(header.test_samples).ok()?,
        );
        let train_x = span(ntr.checked_mul(inputs)?.checked_mul(word)?)?;
        let train_y = span(ntr.checked_mul(2)?)?;
        let test_x = span(nte.checked_mul(inputs)?.checked_mul(word)?)?;
        let test_y = span(nte.checked_mul(2)?)?;
        let init = span(usize::try_from(header.init_words).ok()?.checked_mul(word)?)?;
        let end = at;
        // The total must fit the 32-bit length field.
        u32::try_from(end.checked_add(CHECKSUM)?).ok()?;
        Some(Layout {
            train_x,
            train_y,
            test_x,
            test_y,
            init,
            end,
        })
    }
}

impl Header {
    /// The layer sizes of `plan`, as the header stores them.
    pub fn sizes_of(plan: &Plan) -> heapless::Vec<u16, { MAX_LAYERS + 1 }> {
        let mut v = heapless::Vec::new();
        for &n in plan.shape.sizes() {
            // A shape has at most MAX_LAYERS + 1 sizes, the capacity.
            let _ = v.push(n);
        }
        v
    }

    /// Checks every field and returns the plan: sizes, schedule, hyper-parameters, formats,
    /// accumulator and container (not yet against a firmware).
    pub fn validate(&self) -> Result<Plan, JobError> {
        let mut sizes: heapless::Vec<usize, { MAX_LAYERS + 1 }> = heapless::Vec::new();
        for &n in &self.sizes {
            // Both vectors have the same capacity (`collect` would assert it).
            let _ = sizes.push(usize::from(n));
        }
        let shape = Shape::new(&sizes).map_err(JobError::Plan)?;
        if self.schedule.rule != self.rule {
            return Err(JobError::Schedule);
        }
        let h = &self.hyper;
        for (name, v) in [
            ("lr", h.lr),
            ("lr_feedback", h.lr_feedback),
            ("beta", h.beta),
            ("sigma", h.sigma),
            ("decay", h.decay),
        ] {
            if !v.is_finite() {
                return Err(JobError::Hyper(name));
            }
        }
        for c in Class::ALL {
            let f = self.fixed.classes[c.index()].format;
            if Format::with_overflow(f.word(), f.frac(), f.overflow()).is_err() {
                return Err(JobError::Format(c));
            }
        }
        let layers = shape.layers();
        for (class, layer, f) in self.fixed.layers.entries() {
            let first = if class == Class::Act { 0 } else { 1 };
            if layer < first
                || layer > layers
                || Format::with_overflow(f.word(), f.frac(), f.overflow()).is_err()
            {
                return Err(JobError::LayerFormat {
                    class,
                    layer,
                    layers,
                });
            }
        }
        if !(2..=64).contains(&self.fixed.acc_bits) {
            return Err(JobError::AccBits(self.fixed.acc_bits));
        }
        let needed = container_bits(&self.fixed);
        if u32::from(self.container_bits) != needed {
            return Err(JobError::ContainerField {
                stated: self.container_bits,
                needed,
            });
        }
        let plan = Plan::new(shape, self.rule, self.hidden, self.output);
        let expected = learned_params(&plan);
        let found = usize::try_from(self.init_words).map_err(|_| JobError::TooLarge)?;
        if found != 0 && found != expected {
            return Err(JobError::InitLength { expected, found });
        }
        Ok(plan)
    }
}

/// Learned parameters of a plan: forward weights, biases, feedback weights and biases.
pub fn learned_params(plan: &Plan) -> usize {
    let c = plan.counts();
    c.forward_weights + c.biases + c.feedback_weights
}

/// One split of a decoded job, its arrays still raw bytes inside the blob.
#[derive(Clone, Copy, Debug)]
pub struct RawSamples<'a> {
    /// Features: `samples × inputs` little-endian words of `word_bytes` each.
    pub features: &'a [u8],
    /// Labels: `samples` little-endian `u16`.
    pub labels: &'a [u8],
    /// Samples.
    pub samples: usize,
    /// Features per sample.
    pub inputs: usize,
    /// Bytes per word: 1, 2 or 4.
    pub word_bytes: usize,
}

fn read_word(bytes: &[u8]) -> i64 {
    match *bytes {
        [a] => i64::from(a as i8),
        [a, b] => i64::from(i16::from_le_bytes([a, b])),
        [a, b, c, d] => i64::from(i32::from_le_bytes([a, b, c, d])),
        _ => 0,
    }
}

impl RawSamples<'_> {
    /// Label of sample `i` (0 past the end).
    pub fn label(&self, i: usize) -> u16 {
        match self.labels.get(2 * i..2 * i + 2) {
            Some(&[a, b]) => u16::from_le_bytes([a, b]),
            _ => 0,
        }
    }

    /// Copies the features into `out` (at least `samples × inputs` words) as words of `W`.
    pub fn copy_features<W: Word>(&self, out: &mut [W]) -> Result<(), JobError> {
        let n = self.features.len() / self.word_bytes.max(1);
        if usize::try_from(W::BITS).ok() != Some(8 * self.word_bytes) {
            return Err(JobError::Container {
                job: (8 * self.word_bytes) as u8,
                firmware: W::BITS,
            });
        }
        let have = out.len();
        let dst = out.get_mut(..n).ok_or(JobError::Space { need: n, have })?;
        for (d, s) in dst
            .iter_mut()
            .zip(self.features.chunks_exact(self.word_bytes))
        {
            *d = W::put(read_word(s));
        }
        Ok(())
    }

    /// Copies the labels into `out` (at least `samples` entries).
    pub fn copy_labels(&self, out: &mut [u16]) -> Result<(), JobError> {
        let have = out.len();
        let dst = out.get_mut(..self.samples).ok_or(JobError::Space {
            need: self.samples,
            have,
        })?;
        for (d, s) in dst.iter_mut().zip(self.labels.chunks_exact(2)) {
            *d = u16::from_le_bytes([s[0], s[1]]);
        }
        Ok(())
    }
}

/// A decoded, checked job. Its arrays borrow the blob.
#[derive(Clone, Debug)]
pub struct Job<'a> {
    /// The header.
    pub header: Header,
    /// The network plan the header describes.
    pub plan: Plan,
    /// Training split.
    pub train: RawSamples<'a>,
    /// Test split.
    pub test: RawSamples<'a>,
    /// Initial parameters: `init_words` little-endian words (empty when none).
    pub init: &'a [u8],
}

impl Job<'_> {
    /// Epochs at the start that train only the feedback.
    pub fn warmup(&self) -> u16 {
        self.header.warmup_epochs
    }

    /// Checks that a firmware with `arena_words` arena words and an order buffer of
    /// `order_len` entries can run this job.
    pub fn check_capacity(&self, arena_words: usize, order_len: usize) -> Result<(), JobError> {
        let need = self.plan.counts().total();
        if need > arena_words {
            return Err(JobError::Arena {
                need,
                have: arena_words,
            });
        }
        if self.train.samples > order_len {
            return Err(JobError::Order {
                need: self.train.samples,
                have: order_len,
            });
        }
        Ok(())
    }

    /// Overwrites the learned parameters of `net` (set up for this job's plan) with the job's
    /// initial words, in [`Net::params`] order. Returns whether the job had any.
    pub fn load_init<W: Word>(&self, net: &mut Net<'_, W>) -> Result<bool, JobError> {
        if self.init.is_empty() {
            return Ok(false);
        }
        let word_bytes = usize::from(self.header.container_bits / 8);
        if usize::try_from(W::BITS).ok() != Some(8 * word_bytes) {
            return Err(JobError::Container {
                job: self.header.container_bits,
                firmware: W::BITS,
            });
        }
        let params = net.params_mut();
        let expected: usize = params.iter().map(|p| p.len()).sum();
        let found = self.init.len() / word_bytes.max(1);
        if found != expected {
            return Err(JobError::InitLength { expected, found });
        }
        let mut words = self.init.chunks_exact(word_bytes.max(1));
        for part in params {
            for (d, s) in part.iter_mut().zip(&mut words) {
                *d = W::put(read_word(s));
            }
        }
        Ok(true)
    }
}

/// Offset of the first nonzero byte in `bytes[from..to]` (none when the range is empty).
fn nonzero(bytes: &[u8], from: usize, to: usize) -> Option<usize> {
    bytes
        .part(from..to)
        .iter()
        .position(|&b| b != 0)
        .map(|p| from + p)
}

fn u16_at(bytes: &[u8], at: usize) -> u16 {
    u16::from_le_bytes([bytes[at], bytes[at + 1]])
}

fn u32_at(bytes: &[u8], at: usize) -> u32 {
    u32::from_le_bytes([bytes[at], bytes[at + 1], bytes[at + 2], bytes[at + 3]])
}

/// Decodes and checks a job for a firmware whose words are `firmware_bits`-bit containers.
pub fn decode(bytes: &[u8], firmware_bits: u32) -> Result<Job<'_>, JobError> {
    decode_for(bytes, Some(firmware_bits))
}

/// Decodes and checks a job for any container (how a build script sizes the firmware for
/// the job it embeds).
pub fn inspect(bytes: &[u8]) -> Result<Job<'_>, JobError> {
    decode_for(bytes, None)
}

fn decode_for(bytes: &[u8], firmware_bits: Option<u32>) -> Result<Job<'_>, JobError> {
    let have = bytes.len();
    if have < PREAMBLE + CHECKSUM {
        return Err(JobError::Truncated {
            need: PREAMBLE + CHECKSUM,
            have,
        });
    }
    if bytes[..4] != MAGIC {
        return Err(JobError::Magic);
    }
    let version = u16_at(bytes, 4);
    if version != VERSION {
        return Err(JobError::Version {
            found: version,
            supported: VERSION,
        });
    }
    let header_len = usize::from(u16_at(bytes, 6));
    let stated = usize::try_from(u32_at(bytes, 8)).map_err(|_| JobError::TooLarge)?;
    if have < stated {
        return Err(JobError::Truncated { need: stated, have });
    }
    if have > stated {
        return Err(JobError::Trailing { stated, have });
    }
    if stated < PREAMBLE + CHECKSUM {
        return Err(JobError::Truncated {
            need: PREAMBLE + CHECKSUM,
            have: stated,
        });
    }
    let body = stated - CHECKSUM;
    let stored = u32_at(bytes, body);
    let computed = fnv1a32(&bytes[..body]);
    if stored != computed {
        return Err(JobError::Checksum { stored, computed });
    }
    let raw_header = bytes
        .get(PREAMBLE..PREAMBLE + header_len)
        .filter(|_| PREAMBLE + header_len <= body)
        .ok_or(JobError::Header)?;
    let (header, rest) =
        postcard::take_from_bytes::<Header>(raw_header).map_err(|_| JobError::Header)?;
    if !rest.is_empty() {
        return Err(JobError::Header);
    }
    let plan = header.validate()?;
    if let Some(firmware) = firmware_bits.filter(|&b| b != u32::from(header.container_bits)) {
        return Err(JobError::Container {
            job: header.container_bits,
            firmware,
        });
    }
    let layout = Layout::of(&header, header_len).ok_or(JobError::TooLarge)?;
    if layout.end != body {
        return Err(JobError::Layout {
            implied: layout.end + CHECKSUM,
            stated,
        });
    }
    // Every byte not covered by the header or an array is padding and must be zero.
    let mut covered = PREAMBLE + header_len;
    for (start, len) in [
        layout.train_x,
        layout.train_y,
        layout.test_x,
        layout.test_y,
        layout.init,
    ] {
        if let Some(offset) = nonzero(bytes, covered, start) {
            return Err(JobError::Padding { offset });
        }
        covered = start + len;
    }
    if let Some(offset) = nonzero(bytes, covered, body) {
        return Err(JobError::Padding { offset });
    }
    let inputs = plan.n(0);
    let word_bytes = usize::from(header.container_bits / 8);
    let split = |x: (usize, usize), y: (usize, usize), samples: u32| RawSamples {
        features: bytes.part(x.0..x.0 + x.1),
        labels: bytes.part(y.0..y.0 + y.1),
        samples: samples as usize,
        inputs,
        word_bytes,
    };
    let train = split(layout.train_x, layout.train_y, header.train_samples);
    let test = split(layout.test_x, layout.test_y, header.test_samples);
    let outputs = plan.shape.outputs();
    for (is_test, s) in [(false, &train), (true, &test)] {
        for index in 0..s.samples {
            let label = s.label(index);
            if usize::from(label) >= outputs {
                return Err(JobError::Label {
                    test: is_test,
                    index,
                    label,
                    outputs,
                });
            }
        }
    }
    let init = bytes.part(layout.init.0..layout.init.0 + layout.init.1);
    Ok(Job {
        header,
        plan,
        train,
        test,
        init,
    })
}

/// Encodes the header into `buf`, returning its length.
fn header_bytes(header: &Header, buf: &mut [u8; MAX_HEADER]) -> Result<usize, JobError> {
    postcard::to_slice(header, buf)
        .map(|s| s.len())
        .map_err(|_| JobError::TooLarge)
}

/// Bytes [`encode`] writes for `header`.
pub fn encoded_len(header: &Header) -> Result<usize, JobError> {
    let mut buf = [0u8; MAX_HEADER];
    let h = header_bytes(header, &mut buf)?;
    let layout = Layout::of(header, h).ok_or(JobError::TooLarge)?;
    Ok(layout.end + CHECKSUM)
}

/// Packs `header` and the encoded splits into `out`, returning the bytes written.
/// `header.train_samples` and `header.test_samples` must be the splits' lengths, the words
/// must be `header.container_bits` wide (`W::BITS`), and `header.init_words` must be 0.
pub fn encode<W: Word>(
    header: &Header,
    train: Samples<'_, W>,
    test: Samples<'_, W>,
    out: &mut [u8],
) -> Result<usize, JobError> {
    encode_with_init(header, train, test, &[], out)
}

/// [`encode`] with initial parameters: `init` holds `header.init_words` words in
/// [`Net::params`] order (empty for none).
pub fn encode_with_init<W: Word>(
    header: &Header,
    train: Samples<'_, W>,
    test: Samples<'_, W>,
    init: &[W],
    out: &mut [u8],
) -> Result<usize, JobError> {
    let plan = header.validate()?;
    if usize::try_from(header.init_words).ok() != Some(init.len()) {
        return Err(JobError::InitLength {
            expected: learned_params(&plan),
            found: init.len(),
        });
    }
    if u32::from(header.container_bits) != W::BITS {
        return Err(JobError::Container {
            job: header.container_bits,
            firmware: W::BITS,
        });
    }
    let inputs = plan.n(0);
    let outputs = plan.shape.outputs();
    for (is_test, s, n) in [
        (false, &train, header.train_samples),
        (true, &test, header.test_samples),
    ] {
        let n = n as usize;
        if s.labels.len() != n {
            return Err(JobError::DataLength {
                test: is_test,
                expected: n,
                found: s.labels.len(),
            });
        }
        let values = n.checked_mul(inputs).ok_or(JobError::TooLarge)?;
        if s.features.len() != values {
            return Err(JobError::DataLength {
                test: is_test,
                expected: values,
                found: s.features.len(),
            });
        }
        if let Some((index, &label)) = s
            .labels
            .iter()
            .enumerate()
            .find(|(_, &l)| usize::from(l) >= outputs)
        {
            return Err(JobError::Label {
                test: is_test,
                index,
                label,
                outputs,
            });
        }
    }
    let mut hbuf = [0u8; MAX_HEADER];
    let h = header_bytes(header, &mut hbuf)?;
    let layout = Layout::of(header, h).ok_or(JobError::TooLarge)?;
    let total = layout.end + CHECKSUM;
    let have = out.len();
    let out = out
        .get_mut(..total)
        .ok_or(JobError::Space { need: total, have })?;
    out.fill(0);
    out[..4].copy_from_slice(&MAGIC);
    out[4..6].copy_from_slice(&VERSION.to_le_bytes());
    out[6..8].copy_from_slice(&(h as u16).to_le_bytes());
    out[8..12].copy_from_slice(&(total as u32).to_le_bytes());
    out[PREAMBLE..PREAMBLE + h].copy_from_slice(&hbuf[..h]);
    let word = usize::from(header.container_bits / 8);
    for ((start, _), s) in [
        (layout.train_x, train.features),
        (layout.test_x, test.features),
        (layout.init, init),
    ] {
        for (dst, v) in out[start..].chunks_exact_mut(word).zip(s) {
            // Two's complement: the low bytes of the sign-extended word are the word.
            dst.copy_from_slice(&v.get().to_le_bytes()[..word]);
        }
    }
    for ((start, _), s) in [(layout.train_y, &train), (layout.test_y, &test)] {
        for (dst, l) in out[start..].chunks_exact_mut(2).zip(s.labels) {
            dst.copy_from_slice(&l.to_le_bytes());
        }
    }
    let sum = fnv1a32(&out[..layout.end]);
    out[layout.end..total].copy_from_slice(&sum.to_le_bytes());
    Ok(total)
}

#[cfg(test)]
mod tests {
    extern crate std;
    use super::*;
    use crate::backend::ClassSpec;
    use crate::class::CLASSES;
    use crate::format::Overflow;
    use crate::round::Rounding;
    use std::format;
    use std::string::ToString;

    fn config(word: u8, frac: u8) -> FixedConfig {
        let spec = ClassSpec {
            format: Format::new(word, frac).unwrap(),
            rounding: Rounding::Stochastic,
        };
        let mut classes = [spec; CLASSES];
        classes[Class::Step.index()].format = Format::new(32, 28).unwrap();
        FixedConfig::uniform(classes, 32, Overflow::Saturate)
    }

    fn header(word: u8, train: u32, test: u32) -> Header {
        let shape = Shape::new(&[3, 4, 2]).unwrap();
        let plan = Plan::new(
            shape,
            Rule::DtpDirect,
            Activation::Tanh,
            Activation::Identity,
        );
        let fixed = config(word, word - 4);
        Header {
            sizes: Header::sizes_of(&plan),
            rule: plan.rule,
            hidden: plan.hidden,
            output: plan.output,
            hyper: Hyper {
                lr: 0.02,
                lr_feedback: 0.01,
                beta: 1.0,
                sigma: 0.1,
                decay: 0.01,
                feedback_steps: 1,
                lr_fan_in: 0,
                regulariser: Default::default(),
            },
            schedule: Schedule {
                rule: plan.rule,
                feedback_steps: 1,
            },
            warmup_epochs: 1,
            epochs: 3,
            seed: 0x0123_4567_89ab_cdef,
            container_bits: container_bits(&fixed) as u8,
            fixed,
            train_samples: train,
            test_samples: test,
            init_words: 0,
        }
    }

    /// A blob with 5 train and 2 test samples of 3 features, and what it was made from.
    struct Blob16 {
        header: Header,
        train_x: [i16; 15],
        train_y: [u16; 5],
        test_x: [i16; 6],
        test_y: [u16; 2],
        out: [u8; 1024],
        len: usize,
    }

    /// Words counting through the 16-bit range, labels of both classes.
    fn blob16() -> Blob16 {
        let header = header(16, 5, 2);
        let train_x: [i16; 15] = core::array::from_fn(|i| i as i16 * 1000 - 7);
        let train_y = [0, 1, 1, 0, 1];
        let test_x: [i16; 6] = core::array::from_fn(|i| -(i as i16) * 4321);
        let test_y = [1, 0];
        let mut out = [0u8; 1024];
        let len = encode(
            &header,
            Samples {
                features: &train_x,
                labels: &train_y,
            },
            Samples {
                features: &test_x,
                labels: &test_y,
            },
            &mut out,
        )
        .unwrap();
        Blob16 {
            header,
            train_x,
            train_y,
            test_x,
            test_y,
            out,
            len,
        }
    }

    #[test]
    fn round_trip() {
        let Blob16 {
            header: h,
            train_x: tx,
            train_y: ty,
            test_x: sx,
            test_y: sy,
            out,
            len: n,
        } = blob16();
        assert_eq!(n, encoded_len(&h).unwrap());
        let blob = &out[..n];
        assert_eq!(&blob[..4], b"TWJB");
        let job = decode(blob, 16).unwrap();
        assert_eq!(job.header, h);
        assert_eq!(job.plan.shape.sizes(), &[3, 4, 2]);
        assert_eq!(job.train.samples, 5);
        let mut x = [0i16; 15];
        job.train.copy_features(&mut x).unwrap();
        assert_eq!(x, tx);
        let mut y = [0u16; 5];
        job.train.copy_labels(&mut y).unwrap();
        assert_eq!(y, ty);
        let mut x = [0i16; 6];
        job.test.copy_features(&mut x).unwrap();
        assert_eq!(x, sx);
        assert_eq!([job.test.label(0), job.test.label(1)], sy);
        // Every array starts at a multiple of ALIGN bytes from the blob's start.
        for s in [job.train.features, job.train.labels, job.test.features] {
            assert_eq!((s.as_ptr() as usize - blob.as_ptr() as usize) % ALIGN, 0);
        }
        assert!(job.check_capacity(job.plan.counts().total(), 5).is_ok());
        assert_eq!(
            job.check_capacity(10, 5),
            Err(JobError::Arena {
                need: job.plan.counts().total(),
                have: 10
            })
        );
        assert_eq!(
            job.check_capacity(10_000, 4),
            Err(JobError::Order { need: 5, have: 4 })
        );
    }

    #[test]
    fn initial_parameters_round_trip_and_load() {
        let mut h = header(16, 1, 1);
        let plan = h.validate().unwrap();
        let n = learned_params(&plan);
        assert_eq!(n, 3 * 4 + 4 * 2 + (4 + 2) + 4 * 2);
        let init: [i16; 34] = core::array::from_fn(|i| (i as i16 - 17) * 977);
        assert_eq!(init.len(), n);
        let (tx, sx) = ([1i16, 2, 3], [4i16, 5, 6]);
        let (train, test) = (
            Samples {
                features: &tx[..],
                labels: &[1][..],
            },
            Samples {
                features: &sx[..],
                labels: &[0][..],
            },
        );
        let mut out = [0u8; 1024];
        // The header must state the words it carries.
        assert_eq!(
            encode_with_init(&h, train, test, &init, &mut out),
            Err(JobError::InitLength {
                expected: n,
                found: n
            })
        );
        h.init_words = n as u32 - 1;
        assert_eq!(
            h.validate(),
            Err(JobError::InitLength {
                expected: n,
                found: n - 1
            })
        );
        h.init_words = n as u32;
        let len = encode_with_init(&h, train, test, &init, &mut out).unwrap();
        assert_eq!(len, encoded_len(&h).unwrap());
        let job = decode(&out[..len], 16).unwrap();
        assert_eq!(job.init.len(), 2 * n);
        assert_eq!(
            (job.init.as_ptr() as usize - out.as_ptr() as usize) % ALIGN,
            0
        );
        let mut arena = [0i16; 512];
        let mut be = crate::backend::Fixed::<i16>::new(h.fixed, h.seed).unwrap();
        let mut net = crate::train::setup(plan, &h.hyper, &mut arena, &mut be, h.seed).unwrap();
        assert!(job.load_init(&mut net).unwrap());
        let params = |net: &Net<'_, i16>| {
            let mut all = [0i16; 34];
            for (d, s) in all.iter_mut().zip(net.params().into_iter().flatten()) {
                *d = *s;
            }
            all
        };
        assert_eq!(params(&net), init);
        // Without initial words the drawn parameters stay.
        h.init_words = 0;
        let len = encode(&h, train, test, &mut out).unwrap();
        let job = decode(&out[..len], 16).unwrap();
        assert!(!job.load_init(&mut net).unwrap());
        assert_eq!(params(&net), init);
    }

    #[test]
    fn round_trip_in_8_and_32_bits() {
        for word in [8u8, 32] {
            let h = header(word, 2, 1);
            let mut out = [0u8; 512];
            let n = if word == 8 {
                let tx: [i8; 6] = [-128, -1, 0, 1, 127, 5];
                let sx: [i8; 3] = [3, -3, 100];
                let n = encode(
                    &h,
                    Samples {
                        features: &tx,
                        labels: &[0, 1],
                    },
                    Samples {
                        features: &sx,
                        labels: &[1],
                    },
                    &mut out,
                )
                .unwrap();
                let job = decode(&out[..n], 8).unwrap();
                let mut x = [0i8; 6];
                job.train.copy_features(&mut x).unwrap();
                assert_eq!(x, tx);
                n
            } else {
                let tx: [i32; 6] = [i32::MIN, -1, 0, 1, i32::MAX, 70_000];
                let sx: [i32; 3] = [3, -3, -70_000];
                let n = encode(
                    &h,
                    Samples {
                        features: &tx,
                        labels: &[0, 1],
                    },
                    Samples {
                        features: &sx,
                        labels: &[1],
                    },
                    &mut out,
                )
                .unwrap();
                let job = decode(&out[..n], 32).unwrap();
                let mut x = [0i32; 3];
                job.test.copy_features(&mut x).unwrap();
                assert_eq!(x, sx);
                n
            };
            assert_eq!(n % ALIGN, 0);
        }
    }

    #[test]
    fn corrupted_byte_is_a_checksum_error() {
        let Blob16 {
            mut out, len: n, ..
        } = blob16();
        // A byte inside the train features.
        let at = n - CHECKSUM - 20;
        out[at] ^= 0x10;
        assert!(matches!(
            decode(&out[..n], 16),
            Err(JobError::Checksum { .. })
        ));
    }

    #[test]
    fn every_single_byte_change_is_refused() {
        // FNV-1a maps a one-byte change anywhere to another hash (each step is a bijection of
        // the state), so no flipped byte may decode; none may panic either.
        let Blob16 { out, len: n, .. } = blob16();
        for at in 0..n {
            for flip in [0x01u8, 0x80, 0xff] {
                let mut b = out;
                b[at] ^= flip;
                assert!(
                    decode(&b[..n], 16).is_err(),
                    "byte {at} ^ {flip:#x} accepted"
                );
            }
        }
    }

    #[test]
    fn truncated_and_extended() {
        let Blob16 { out, len: n, .. } = blob16();
        for len in [0, 3, 11, 15, n / 2, n - 1] {
            assert!(
                matches!(decode(&out[..len], 16), Err(JobError::Truncated { .. })),
                "{len}"
            );
        }
        assert_eq!(
            decode(&out[..n + 1], 16).unwrap_err(),
            JobError::Trailing {
                stated: n,
                have: n + 1
            }
        );
    }

    #[test]
    fn wrong_version_and_magic() {
        let Blob16 {
            mut out, len: n, ..
        } = blob16();
        let mut b = out;
        for old in [VERSION - 1, VERSION + 1] {
            b[4..6].copy_from_slice(&old.to_le_bytes());
            assert_eq!(
                decode(&b[..n], 16).unwrap_err(),
                JobError::Version {
                    found: old,
                    supported: VERSION
                }
            );
        }
        out[0] = b'X';
        assert_eq!(decode(&out[..n], 16).unwrap_err(), JobError::Magic);
    }

    #[test]
    fn wrong_container() {
        let Blob16 { out, len: n, .. } = blob16();
        for firmware in [8, 32] {
            assert_eq!(
                decode(&out[..n], firmware).unwrap_err(),
                JobError::Container { job: 16, firmware }
            );
        }
        assert_eq!(inspect(&out[..n]).unwrap().header.container_bits, 16);
        let job = decode(&out[..n], 16).unwrap();
        let mut x = [0i8; 15];
        assert!(matches!(
            job.train.copy_features(&mut x),
            Err(JobError::Container { .. })
        ));
        // A header that states a container its formats do not need is refused by the encoder.
        let mut h = header(16, 0, 0);
        h.container_bits = 32;
        let mut buf = [0u8; 256];
        let none: Samples<'_, i32> = Samples {
            features: &[],
            labels: &[],
        };
        assert_eq!(
            encode(&h, none, none, &mut buf).unwrap_err(),
            JobError::ContainerField {
                stated: 32,
                needed: 16
            }
        );
    }

    #[test]
    fn bad_headers_are_refused_after_a_valid_checksum() {
        // Re-seal the blob after each edit so that the header checks, not the checksum, speak.
        fn reseal(b: &mut [u8], n: usize) {
            let sum = fnv1a32(&b[..n - CHECKSUM]);
            b[n - CHECKSUM..n].copy_from_slice(&sum.to_le_bytes());
        }
        let Blob16 {
            header: h,
            out,
            len: n,
            ..
        } = blob16();
        // A label past the outputs.
        let job = decode(&out[..n], 16).unwrap();
        let at = job.train.labels.as_ptr() as usize - out.as_ptr() as usize;
        let mut b = out;
        b[at] = 9;
        reseal(&mut b, n);
        assert_eq!(
            decode(&b[..n], 16).unwrap_err(),
            JobError::Label {
                test: false,
                index: 0,
                label: 9,
                outputs: 2
            }
        );
        // A non-zero padding byte after the 10-byte label array.
        let mut b = out;
        b[at + 10] = 1;
        reseal(&mut b, n);
        assert_eq!(
            decode(&b[..n], 16).unwrap_err(),
            JobError::Padding { offset: at + 10 }
        );
        // A header whose sample counts disagree with the stated length.
        let mut more = h.clone();
        more.train_samples = 6;
        let mut hb = [0u8; MAX_HEADER];
        let len = postcard::to_slice(&more, &mut hb).unwrap().len();
        let mut b = out;
        b[PREAMBLE..PREAMBLE + len].copy_from_slice(&hb[..len]);
        reseal(&mut b, n);
        assert!(matches!(decode(&b[..n], 16), Err(JobError::Layout { .. })));
        // Garbage in the header itself.
        let mut b = out;
        b[PREAMBLE] = 0xff;
        reseal(&mut b, n);
        assert!(decode(&b[..n], 16).is_err());
    }

    #[test]
    fn per_layer_formats_travel_and_are_checked() {
        let none: Samples<'_, i32> = Samples {
            features: &[],
            labels: &[],
        };
        let mut h = header(16, 0, 0);
        h.fixed.layers.forward_weights[1] = Some(Format::new(8, 6).unwrap());
        h.fixed.layers.forward_weights[2] = Some(Format::new(24, 20).unwrap());
        h.fixed.layers.activations[0] = Some(Format::new(12, 9).unwrap());
        h.fixed.layers.activations[2] = Some(Format::with_overflow(6, 5, Overflow::Wrap).unwrap());
        // The widest stored word (24 bits) decides the container.
        assert_eq!(container_bits(&h.fixed), 32);
        h.container_bits = 32;
        let mut buf = [0u8; 1024];
        let n = encode(&h, none, none, &mut buf).unwrap();
        let job = decode(&buf[..n], 32).unwrap();
        assert_eq!(job.header, h);
        assert_eq!(
            job.header.fixed.layers.get(Class::Act, 2).unwrap().frac(),
            5
        );
        // Entries naming layers the 3-4-2 network does not have are refused by name.
        for (class, layer) in [(Class::Forward, 0), (Class::Bias, 3), (Class::Act, 3)] {
            let mut bad = h.clone();
            if let Some(v) = bad.fixed.layers.of_mut(class) {
                v[layer] = Some(Format::new(16, 8).unwrap());
            }
            let err = encode(&bad, none, none, &mut buf).unwrap_err();
            assert_eq!(
                err,
                JobError::LayerFormat {
                    class,
                    layer,
                    layers: 2
                }
            );
            let text = err.to_string();
            assert!(
                text.contains(class.name()) && text.contains(&format!("layer {layer}")),
                "{text}"
            );
        }
    }

    #[test]
    fn encoder_checks_its_inputs() {
        let h = header(16, 2, 1);
        let tx = [0i16; 6];
        let sx = [0i16; 3];
        let train = Samples {
            features: &tx,
            labels: &[0, 1],
        };
        let test = Samples {
            features: &sx,
            labels: &[1],
        };
        let mut small = [0u8; 16];
        assert!(matches!(
            encode(&h, train, test, &mut small),
            Err(JobError::Space { .. })
        ));
        let mut out = [0u8; 512];
        let short = Samples {
            features: &tx[..5],
            labels: &[0, 1],
        };
        assert_eq!(
            encode(&h, short, test, &mut out).unwrap_err(),
            JobError::DataLength {
                test: false,
                expected: 6,
                found: 5
            }
        );
        let bad = Samples {
            features: &sx,
            labels: &[2],
        };
        assert!(matches!(
            encode(&h, train, bad, &mut out),
            Err(JobError::Label { test: true, .. })
        ));
        let mut nan = h.clone();
        nan.hyper.sigma = f32::NAN;
        assert_eq!(
            encode(&nan, train, test, &mut out).unwrap_err(),
            JobError::Hyper("sigma")
        );
        let mut sched = h;
        sched.schedule.rule = Rule::Bp;
        assert_eq!(
            encode(&sched, train, test, &mut out).unwrap_err(),
            JobError::Schedule
        );
    }

    #[test]
    fn fnv1a32_vectors() {
        // Test vectors of "The FNV Non-Cryptographic Hash Algorithm", IETF Internet-Draft,
        // 2019 (vectors and year recalled from memory; docs/references.md [30]).
        assert_eq!(fnv1a32(b""), 0x811c_9dc5);
        assert_eq!(fnv1a32(b"a"), 0xe40c_292c);
        assert_eq!(fnv1a32(b"foobar"), 0xbf9c_f968);
    }
}
