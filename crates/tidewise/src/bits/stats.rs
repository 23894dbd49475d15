//! The acceptance decision: a one-sided upper confidence bound on the mean paired gap.
//!
//! Each replicate `i` (one training seed, one split seed) gives a paired gap
//! `d_i = float_i − fixed_i` in accuracy points: both arms saw the same initialisation, sample
//! order, noise and test split, so what they share cancels. A design is accepted when
//! `mean(d) + t(level, n − 1) · sd(d) / √n ≤ tolerance`: the non-inferiority test of ICH E9
//! "Statistical Principles for Clinical Trials" (1998; `docs/references.md` \[23\]), with
//! the t-based bound over paired observations. With `R` confirmation rounds (each on new replicates, accepting the first
//! design that passes) every round is tested at `1 − (1 − confidence) / R` (Bonferroni), so the
//! chance of accepting any design whose true gap exceeds the tolerance stays at most
//! `1 − confidence` over all rounds.

use serde::Serialize;
use statrs::distribution::{ContinuousCDF, StudentsT};

/// The `p` quantile of Student's t with `df` degrees of freedom (`0 < p < 1`, `df ≥ 1`), from
/// `statrs`; `None` outside that domain.
pub fn t_quantile(p: f64, df: f64) -> Option<f64> {
    if !(p > 0.0 && p < 1.0 && df >= 1.0 && df.is_finite()) {
        return None;
    }
    let t = StudentsT::new(0.0, 1.0, df).ok()?;
    let q = t.inverse_cdf(p);
    q.is_finite().then_some(q)
}

/// The confidence level of each of `rounds` looks when the family keeps `confidence`
/// (Bonferroni: the error `1 − confidence` shared equally).
pub fn per_round_level(confidence: f64, rounds: u32) -> f64 {
    1.0 - (1.0 - confidence) / f64::from(rounds.max(1))
}

/// A one-sided upper confidence bound on a mean.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Bound {
    /// Observations.
    pub n: usize,
    /// Their mean.
    pub mean: f64,
    /// Their sample standard deviation (0 for one observation).
    pub sd: f64,
    /// The one-sided level of the bound (e.g. 0.95).
    pub level: f64,
    /// The t quantile used (`t(level, n − 1)`).
    pub t: f64,
    /// `mean + t · sd / √n` (infinite for fewer than two observations).
    pub upper: f64,
}

impl Bound {
    /// The bound of `xs` at `level`.
    pub fn of(xs: &[f64], level: f64) -> Bound {
        let n = xs.len();
        let mean = xs.iter().sum::<f64>() / n.max(1) as f64;
        let sd = if n > 1 {
            (xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
        } else {
            0.0
        };
        let t = if n > 1 {
            t_quantile(level, (n - 1) as f64).unwrap_or(f64::INFINITY)
        } else {
            f64::INFINITY
        };
        let upper = if n > 1 {
            mean + t * sd / (n as f64).sqrt()
        } else {
            f64::INFINITY
        };
        Bound {
            n,
            mean,
            sd,
            level,
            t,
            upper,
        }
    }

    /// Whether the bound is at or below `tolerance`. Accuracies are multiples of one test
    /// sample, so a bound can equal the tolerance in real arithmetic and miss it by a rounding
    /// error of the float sums; a margin far below one sample absorbs that.
    pub fn accepts(&self, tolerance: f64) -> bool {
        self.upper <= tolerance + 1e-9
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bound_by_hand() {
        // mean 1, sd 1 (values 0, 1, 2), n = 3: t(0.95, 2) = 2.920 (table value).
        let b = Bound::of(&[0.0, 1.0, 2.0], 0.95);
        assert_eq!((b.n, b.mean, b.sd), (3, 1.0, 1.0));
        assert!((b.t - 2.919_986).abs() < 1e-5, "{}", b.t);
        assert!((b.upper - (1.0 + b.t / 3f64.sqrt())).abs() < 1e-12);
        assert!(
            !Bound::of(&[0.5], 0.95).accepts(10.0),
            "one run proves nothing"
        );
        assert_eq!(per_round_level(0.95, 1), 0.95);
        assert!((per_round_level(0.95, 5) - 0.99).abs() < 1e-12);
        assert!(t_quantile(1.0, 3.0).is_none() && t_quantile(0.9, 0.0).is_none());
    }
}
