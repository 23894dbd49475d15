//! Named, seeded xorshift streams, and the counter-based stochastic-rounding thresholds.
//!
//! Every random draw in a run comes from one of these streams, each derived from the run
//! seed and a stream number, so that the float and the fixed arm can share initialisation,
//! sample order and feedback noise while only the fixed arm draws stochastic-rounding bits.
//!
//! # Stochastic-rounding thresholds
//!
//! Stochastic rounding does not draw from a stream: its threshold is a pure function
//! [`threshold`]`(key, n)` of a 64-bit key and a 64-bit position `n`. The key is
//! [`key`]`(seed, stream)` of the run seed and the stream the fixed back end rounds on
//! ([`streams::ROUNDING`] in training, [`streams::DATA`] when encoding the data set,
//! [`streams::LOADED`] when encoding parameters loaded from a file); the position is the back
//! end's counter (`Fixed::draws`), which starts at 0. Because a threshold depends on its
//! position only, hardware can form any number of them in parallel, indexed by position.
//!
//! **Draw order.** Every rounding *site* of the fixed back end takes exactly one position,
//! in program order, whether or not its rounding needs a threshold (a zero remainder, a left
//! shift, floor or nearest rounding, or a skipped element still take theirs):
//!
//! * `encode`, `mul`, `add`, `sub`, `shift`, `convert` (also between equal formats) and
//!   `noise`: one position for their one result;
//! * `dot`: one position for its result; when a bias with more fraction bits than the
//!   products is aligned to them, that rounding uses the same position in lane 1
//!   ([`threshold_lane`]), the result lane 0;
//! * `update` of a row of `n` elements (the shorter of the row and the input): position
//!   `base` rounds the step `eta · delta`, and element `j` takes `base + 1 + j`, so the row
//!   uses `base ..= base + n` (also when the step is zero, or an input is zero);
//! * `decay` of a row of `n` elements: element `j` takes `base + j` (also when `k` is zero).
//!
//! A threshold of `s <= 32` bits is the top `s` bits of lane 0; one of 33 to 64 bits is lane
//! 0 followed by lane 1 (`(t0 << 32 | t1) >> (64 - s)`). A remainder of more than 64 bits is
//! compared on its top 64 bits, which biases the rounding-up probability down by less than
//! 2^-64.

use rand_core::{Rng, SeedableRng};
use rand_xorshift::XorShiftRng;

/// Stream numbers of a run.
pub mod streams {
    /// Initial weights.
    pub const INIT: u64 = 1;
    /// Sample order within each epoch.
    pub const ORDER: u64 = 2;
    /// Noise injected for feedback training.
    pub const NOISE: u64 = 3;
    /// Stochastic rounding bits of training (fixed arm only).
    pub const ROUNDING: u64 = 4;
    /// Stochastic rounding bits of encoding the data set (kept apart from training's, so a
    /// board that receives the data already encoded draws the same training bits).
    pub const DATA: u64 = 5;
    /// Stochastic rounding bits of encoding initial parameters loaded from a file (`net.init`
    /// on the host), in `Net::params` order, after `train::setup` has drawn and encoded the
    /// seeded ones: the training stream is then where it is without a file, and a board
    /// receives the loaded parameters as raw words.
    pub const LOADED: u64 = 6;
}

/// A seeded xorshift128 generator (the `rand_xorshift` crate).
#[derive(Clone, Debug)]
pub struct Stream(XorShiftRng);

/// The splitmix64 finaliser: spreads a seed over all 64 bits.
const fn splitmix64(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

impl Stream {
    /// The stream numbered `stream` of the run seeded with `seed`.
    pub fn new(seed: u64, stream: u64) -> Stream {
        let a = splitmix64(seed ^ splitmix64(stream));
        let b = splitmix64(a);
        let mut bytes = [0u8; 16];
        bytes[..8].copy_from_slice(&a.to_le_bytes());
        bytes[8..].copy_from_slice(&b.to_le_bytes());
        Stream(XorShiftRng::from_seed(bytes))
    }

    /// 32 uniform bits.
    #[inline]
    pub fn next_u32(&mut self) -> u32 {
        self.0.next_u32()
    }

    /// 64 uniform bits.
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        self.0.next_u64()
    }

    /// A uniform integer in `0..n` (`n > 0`), by multiply-shift range reduction (tiny bias, no
    /// division): "Fast Random Integer Generation in an Interval", ACM Transactions on Modeling
    /// and Computer Simulation, 2019 (recalled from memory; `docs/references.md` \[29\]).
    #[inline]
    pub fn below(&mut self, n: u32) -> u32 {
        ((u64::from(self.next_u32()) * u64::from(n)) >> 32) as u32
    }

    /// A Gaussian-like integer draw: the sum of four uniform 16-bit values, centred.
    ///
    /// The result `z` lies in [-131070, 131070]; `z / 65536` has mean 0 and variance
    /// 4/12 = 1/3 (Irwin-Hall with four terms), so `z · √3 / 65536` has unit variance.
    /// It costs two 32-bit draws and three additions, which suits hardware.
    #[inline]
    pub fn irwin_hall4(&mut self) -> i32 {
        let a = self.next_u32();
        let b = self.next_u32();
        let sum = (a & 0xffff) + (a >> 16) + (b & 0xffff) + (b >> 16);
        sum as i32 - 131_070
    }
}

/// The key of the stochastic-rounding thresholds of stream `stream` of the run seeded with
/// `seed` (the same mix of seed and stream as [`Stream::new`]'s first state word).
pub const fn key(seed: u64, stream: u64) -> u64 {
    splitmix64(seed ^ splitmix64(stream))
}

/// The MurmurHash3 32-bit finaliser `fmix32`, a bijection of `u32` in which every input bit
/// affects every output bit ("MurmurHash3", SMHasher test suite, public domain, 2011,
/// `docs/references.md` \[31\];
/// constants recalled from memory, checked in the tests against the published
/// MurmurHash3_x86_32 vectors of the empty input, which reduce to `fmix32(seed)`). Two
/// 32x32->32 multiplies, shifts and xors: cheap on a Cortex-M0.
#[inline(always)]
const fn fmix32(mut h: u32) -> u32 {
    h ^= h >> 16;
    h = h.wrapping_mul(0x85eb_ca6b);
    h ^= h >> 13;
    h = h.wrapping_mul(0xc2b2_ae35);
    h ^ (h >> 16)
}

/// The golden-ratio Weyl increment of 32 bits (a fact of the trade: ⌊2^32 / φ⌋).
const GOLDEN32: u32 = 0x9e37_79b9;

/// The stochastic-rounding threshold at position `n` under `key`: 32 uniform bits (lane 0).
///
/// Two rounds of `fmix32` over a keyed counter, in 32-bit words only (four 32x32->32
/// multiplies, no 64-bit helper): `h = fmix32(n_lo ^ k_lo)`, then
/// `fmix32(h ^ k_hi ^ n_hi · φ32)`. For a fixed key the map from the low counter word is a
/// bijection, so 2^32 consecutive positions give every threshold exactly once.
#[inline(always)]
pub const fn threshold(key: u64, n: u64) -> u32 {
    threshold_lane(key, n, 0)
}

/// The threshold at position `n` in lane `lane` (0 or 1): lane 1 is lane 0 under the key
/// with its low word complemented, the low half of a 64-bit threshold and the bias
/// alignment's threshold in a dot product (see the module doc).
#[inline(always)]
pub const fn threshold_lane(key: u64, n: u64, lane: u32) -> u32 {
    let (k_lo, k_hi) = (key as u32 ^ lane.wrapping_neg(), (key >> 32) as u32);
    let (n_lo, n_hi) = (n as u32, (n >> 32) as u32);
    let h = fmix32(n_lo ^ k_lo);
    fmix32(h ^ k_hi ^ n_hi.wrapping_mul(GOLDEN32))
}

/// The lane-0 thresholds of a run of consecutive positions `base..base + n` that share the
/// counter's high word, with the per-row part of [`threshold_lane`] done once: what a row
/// kernel needs to form a whole row's thresholds in vector lanes.
#[derive(Clone, Copy, Debug)]
pub struct RowKeys {
    base_lo: u32,
    k_lo: u32,
    c: u32,
}

impl RowKeys {
    /// The keys of positions `base..base + n` under `key`; `None` when the run carries into
    /// the counter's high word (then the caller forms thresholds one by one).
    #[inline(always)]
    pub const fn new(key: u64, base: u64, n: u64) -> Option<RowKeys> {
        let base_lo = base as u32;
        if base_lo as u64 + n > 1 << 32 {
            return None;
        }
        let n_hi = (base >> 32) as u32;
        Some(RowKeys {
            base_lo,
            k_lo: key as u32,
            c: (key >> 32) as u32 ^ n_hi.wrapping_mul(GOLDEN32),
        })
    }

    /// [`threshold`]`(key, base + j)`, for `j < n`.
    #[inline(always)]
    pub const fn at(&self, j: u32) -> u32 {
        fmix32(fmix32(self.base_lo.wrapping_add(j) ^ self.k_lo) ^ self.c)
    }
}

/// A source of uniform thresholds for one stochastic rounding of a remainder of `s` bits.
pub trait Thresholds {
    /// A uniform threshold of `s` bits, `s` in 1..=64.
    fn bits(&mut self, s: u32) -> u64;
}

impl Thresholds for Stream {
    /// One 32-bit draw when `s <= 32`, else 64 bits.
    #[inline(always)]
    fn bits(&mut self, s: u32) -> u64 {
        if s <= 32 {
            u64::from(self.next_u32() >> (32 - s))
        } else {
            self.next_u64() >> (64 - s)
        }
    }
}

/// One position of the counter-based thresholds: what one rounding site uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Position {
    /// The key ([`key`]).
    pub key: u64,
    /// The position.
    pub n: u64,
    /// The lane of a threshold of up to 32 bits (0 or 1).
    pub lane: u32,
}

impl Position {
    /// The threshold of `s` bits (1..=64) at this position, as the module doc describes.
    #[inline(always)]
    pub const fn threshold_bits(&self, s: u32) -> u64 {
        if s <= 32 {
            (threshold_lane(self.key, self.n, self.lane) >> (32 - s)) as u64
        } else {
            let hi = threshold_lane(self.key, self.n, 0) as u64;
            let lo = threshold_lane(self.key, self.n, 1) as u64;
            ((hi << 32) | lo) >> (64 - s)
        }
    }
}

impl Thresholds for Position {
    #[inline(always)]
    fn bits(&mut self, s: u32) -> u64 {
        self.threshold_bits(s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let mut a = Stream::new(42, streams::INIT);
        let mut b = Stream::new(42, streams::INIT);
        let mut c = Stream::new(42, streams::ORDER);
        let (x, y, z) = (a.next_u64(), b.next_u64(), c.next_u64());
        assert_eq!(x, y);
        assert_ne!(x, z);
    }

    #[test]
    fn fmix32_matches_murmur3_vectors() {
        // MurmurHash3_x86_32("", seed) = fmix32(seed ^ 0): seed 1 -> 0x514E28B7, seed
        // 0xFFFFFFFF -> 0x81F16F39, seed 0 -> 0 (SMHasher verification vectors, recalled
        // from memory).
        assert_eq!(fmix32(0), 0);
        assert_eq!(fmix32(1), 0x514e_28b7);
        assert_eq!(fmix32(0xffff_ffff), 0x81f1_6f39);
    }

    #[test]
    fn row_keys_are_the_positional_thresholds() {
        let k = key(9, streams::ROUNDING);
        for base in [0u64, 77, (5 << 32) + 3, (1 << 32) - 10] {
            let n = 10;
            let keys = RowKeys::new(k, base, n).expect("no carry");
            for j in 0..n {
                assert_eq!(keys.at(j as u32), threshold(k, base + j), "{base} {j}");
            }
        }
        assert!(RowKeys::new(k, (1 << 32) - 10, 11).is_none());
    }

    #[test]
    fn thresholds_are_positional_and_balanced() {
        let k = key(42, streams::ROUNDING);
        assert_eq!(threshold(k, 7), threshold(k, 7));
        assert_ne!(threshold(k, 7), threshold(k, 8));
        assert_ne!(threshold(k, 7), threshold(key(42, streams::DATA), 7));
        assert_ne!(threshold(k, 7), threshold_lane(k, 7, 1));
        assert_ne!(threshold(k, 7), threshold(k, 7 + (1 << 32)));
        // Fact of the trade: each of 16 bins of N uniform draws holds N/16 ± 5·sqrt(N·15/256).
        let n = 1u64 << 16;
        let mut bins = [0u32; 16];
        for i in 0..n {
            bins[(threshold(k, i) >> 28) as usize] += 1;
        }
        let (mean, sd) = (n as f64 / 16.0, (n as f64 * 15.0 / 256.0).sqrt());
        for b in bins {
            assert!((f64::from(b) - mean).abs() < 5.0 * sd, "{bins:?}");
        }
    }

    #[test]
    fn irwin_hall_moments() {
        // Fact of the trade: Irwin-Hall(4) centred has variance 4/12; mean 0.
        let mut s = Stream::new(7, streams::NOISE);
        let n = 200_000;
        let (mut sum, mut sq) = (0f64, 0f64);
        for _ in 0..n {
            let z = f64::from(s.irwin_hall4()) / 65536.0;
            sum += z;
            sq += z * z;
        }
        let mean = sum / n as f64;
        let var = sq / n as f64 - mean * mean;
        // Standard error of the mean is sqrt(1/3 / n) = 0.0013; allow 5 of them.
        assert!(mean.abs() < 0.0065, "mean {mean}");
        assert!((var - 1.0 / 3.0).abs() < 0.01, "variance {var}");
    }
}
