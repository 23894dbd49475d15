//! Named, seeded xorshift streams.
//!
//! Every random draw in a run comes from one of these streams, each derived from the run
//! seed and a stream number, so that the float and the fixed arm can share initialisation,
//! sample order and feedback noise while only the fixed arm draws stochastic-rounding bits.

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

    /// A uniform integer in `0..n` (`n > 0`), by Lemire's multiply-shift (tiny bias, no division).
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
