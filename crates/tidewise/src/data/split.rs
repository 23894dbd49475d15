//! Train/test split and min-max scaling.

use super::rng::SplitMix64;
use super::{DataError, Dataset};

/// Splits into (train, test), stratified by class and deterministic in `seed`.
///
/// For each class with `n` rows, `round(n * test_fraction)` rows (half away from zero), capped
/// at `n - 1` so every class keeps at least one training row, go to the test split; which rows
/// is decided by a Fisher-Yates shuffle of that class's rows from a SplitMix64 stream seeded
/// with `seed` (classes drawn in class order from the one stream). Both splits keep the
/// original row order. `test_fraction` must be strictly between 0 and 1, neither split may
/// come out empty, and `ds` must pass [`Dataset::validate`].
pub fn split(ds: &Dataset, test_fraction: f32, seed: u64) -> Result<(Dataset, Dataset), DataError> {
    if !(test_fraction > 0.0 && test_fraction < 1.0) {
        return Err(DataError::BadFraction {
            value: test_fraction,
        });
    }
    ds.validate()?;
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); ds.n_classes];
    for (i, &l) in ds.labels.iter().enumerate() {
        by_class[usize::from(l)].push(i);
    }
    let mut rng = SplitMix64::new(seed);
    let mut in_test = vec![false; ds.len()];
    for rows in &mut by_class {
        let n = rows.len();
        if n == 0 {
            continue;
        }
        let want = (n as f64 * f64::from(test_fraction)).round() as usize;
        let k = want.min(n - 1);
        for i in (1..n).rev() {
            let j = rng.below(i + 1);
            rows.swap(i, j);
        }
        for &r in &rows[..k] {
            in_test[r] = true;
        }
    }
    let (test_rows, train_rows): (Vec<usize>, Vec<usize>) =
        (0..ds.len()).partition(|&i| in_test[i]);
    for (side, rows) in [("training", &train_rows), ("test", &test_rows)] {
        if rows.is_empty() {
            return Err(DataError::EmptySplit {
                origin: ds.source.clone(),
                rows: ds.len(),
                fraction: test_fraction,
                side,
            });
        }
    }
    Ok((
        ds.select(&train_rows, format!("{} (train)", ds.source)),
        ds.select(&test_rows, format!("{} (test)", ds.source)),
    ))
}

/// Per-feature min-max scaling fitted on the training split: feature `j` maps from
/// `[min[j], max[j]]` linearly onto `[0, hi]`. Values outside the fitted range (test data) are
/// clamped into it first; a feature that is constant in training (`min == max`) maps to 0.
#[derive(Debug, Clone, PartialEq)]
pub struct Scaling {
    /// Smallest training value per feature.
    pub min: Vec<f32>,
    /// Largest training value per feature.
    pub max: Vec<f32>,
    /// Upper end of the target range.
    pub hi: f32,
}

impl Scaling {
    /// Fits the ranges on `train`. `hi` should be finite and positive (use [`Scaling::try_fit`]
    /// for a user-given bound); with any other `hi` every feature maps to 0. An empty training
    /// set gives ranges of zero width, so every feature maps to 0.
    pub fn fit(train: &Dataset, hi: f32) -> Scaling {
        let n = train.n_features;
        let (mut min, mut max) = if train.is_empty() {
            (vec![0.0; n], vec![0.0; n])
        } else {
            (vec![f32::INFINITY; n], vec![f32::NEG_INFINITY; n])
        };
        // chunks_exact (not row()) so that inconsistent public fields cannot cause a panic.
        for row in train.features.chunks_exact(n.max(1)) {
            for (j, &v) in row.iter().enumerate().take(n) {
                min[j] = min[j].min(v);
                max[j] = max[j].max(v);
            }
        }
        Scaling { min, max, hi }
    }

    /// As [`Scaling::fit`], with `hi` checked to be finite and greater than 0.
    pub fn try_fit(train: &Dataset, hi: f32) -> Result<Scaling, DataError> {
        if !(hi.is_finite() && hi > 0.0) {
            return Err(DataError::BadScaleBound { hi });
        }
        Ok(Scaling::fit(train, hi))
    }

    /// Scales `ds` in place. A data set of another width is left unchanged (use
    /// [`Scaling::try_apply`] to get the error).
    pub fn apply(&self, ds: &mut Dataset) {
        let _ = self.try_apply(ds);
    }

    /// Scales `ds` in place, or reports a width mismatch without touching it.
    pub fn try_apply(&self, ds: &mut Dataset) -> Result<(), DataError> {
        let n = self.min.len();
        if ds.n_features != n || self.max.len() != n {
            return Err(DataError::WidthMismatch {
                origin: ds.source.clone(),
                expected: n,
                found: ds.n_features,
            });
        }
        let hi = if self.hi.is_finite() && self.hi > 0.0 {
            f64::from(self.hi)
        } else {
            0.0
        };
        for row in ds.features.chunks_exact_mut(n) {
            for (j, v) in row.iter_mut().enumerate() {
                *v = scale_one(*v, self.min[j], self.max[j], hi);
            }
        }
        Ok(())
    }
}

/// In f64 so that `max - min` cannot overflow for any pair of finite f32.
fn scale_one(v: f32, min: f32, max: f32, hi: f64) -> f32 {
    let (v, lo, up) = (f64::from(v), f64::from(min), f64::from(max));
    if up <= lo {
        return 0.0;
    }
    let t = ((v.clamp(lo, up) - lo) / (up - lo)).clamp(0.0, 1.0);
    ((t * hi) as f32).min(hi as f32)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn toy(n_per_class: &[usize]) -> Dataset {
        let mut features = Vec::new();
        let mut labels = Vec::new();
        for (c, &n) in n_per_class.iter().enumerate() {
            for i in 0..n {
                features.push((c * 1000 + i) as f32);
                features.push(c as f32);
                labels.push(c as u16);
            }
        }
        Dataset::new(2, n_per_class.len(), features, labels, "toy").unwrap()
    }

    #[test]
    fn split_is_stratified_and_deterministic() {
        let ds = toy(&[100, 50, 10, 1]);
        let (train, test) = split(&ds, 0.2, 7).unwrap();
        assert_eq!(test.class_counts(), vec![20, 10, 2, 0]);
        assert_eq!(train.class_counts(), vec![80, 40, 8, 1]);
        assert_eq!(train.len() + test.len(), ds.len());
        // Every row lands in exactly one split.
        let mut ids: Vec<u32> = train
            .features
            .chunks(2)
            .chain(test.features.chunks(2))
            .map(|r| r[0] as u32)
            .collect();
        ids.sort_unstable();
        let mut want: Vec<u32> = ds.features.chunks(2).map(|r| r[0] as u32).collect();
        want.sort_unstable();
        assert_eq!(ids, want);
        // Same seed, same split; other seed, other test rows.
        let (train2, test2) = split(&ds, 0.2, 7).unwrap();
        assert_eq!((train2, test2.clone()), (train, test.clone()));
        let (_, test3) = split(&ds, 0.2, 8).unwrap();
        assert_ne!(test3.features, test.features);
        // Original order kept.
        let first: Vec<f32> = test.features.chunks(2).map(|r| r[0]).collect();
        assert!(first.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(test.source, "toy (test)");
    }

    #[test]
    fn split_rejects_bad_fraction_and_empty_sides() {
        let ds = toy(&[10, 10]);
        for bad in [0.0, 1.0, -0.1, 1.5, f32::NAN] {
            let e = split(&ds, bad, 1).unwrap_err().to_string();
            assert!(e.contains("strictly between 0 and 1"), "{e}");
        }
        let e = split(&ds, 0.01, 1).unwrap_err().to_string();
        assert!(e.contains("test split empty"), "{e}");
        // A class of one row stays in training even with a large fraction.
        let (train, test) = split(&toy(&[1, 4]), 0.9, 1).unwrap();
        assert_eq!(train.class_counts(), vec![1, 1]);
        assert_eq!(test.class_counts(), vec![0, 3]);
    }

    #[test]
    fn scaling_maps_to_range_and_clamps() {
        let train =
            Dataset::new(3, 1, vec![-2.0, 5.0, 1.0, 2.0, 5.0, 3.0], vec![0, 0], "tr").unwrap();
        let s = Scaling::fit(&train, 127.0);
        assert_eq!(s.min, vec![-2.0, 5.0, 1.0]);
        assert_eq!(s.max, vec![2.0, 5.0, 3.0]);
        let mut tr = train.clone();
        s.apply(&mut tr);
        assert_eq!(tr.features, vec![0.0, 0.0, 0.0, 127.0, 0.0, 127.0]);
        let mut test =
            Dataset::new(3, 1, vec![0.0, 9.0, 10.0, -7.0, 5.0, 2.5], vec![0, 0], "te").unwrap();
        s.apply(&mut test);
        assert_eq!(test.features, vec![63.5, 0.0, 127.0, 0.0, 0.0, 95.25]);
        assert!(test.features.iter().all(|&v| (0.0..=127.0).contains(&v)));
    }

    #[test]
    fn scaling_extremes_and_errors() {
        let train = Dataset::new(1, 1, vec![-f32::MAX, f32::MAX], vec![0, 0], "tr").unwrap();
        let s = Scaling::fit(&train, 1.0);
        let mut d = Dataset::new(1, 1, vec![0.0, f32::MAX, -f32::MAX], vec![0, 0, 0], "d").unwrap();
        s.apply(&mut d);
        assert_eq!(d.features, vec![0.5, 1.0, 0.0]);
        assert!(Scaling::try_fit(&train, f32::NAN).is_err());
        assert!(Scaling::try_fit(&train, 0.0)
            .unwrap_err()
            .to_string()
            .contains("greater than 0"));
        let mut wide = Dataset::new(2, 1, vec![1.0, 2.0], vec![0], "w").unwrap();
        let e = s.try_apply(&mut wide).unwrap_err().to_string();
        assert!(e.contains("2 features, expected 1"), "{e}");
        assert_eq!(wide.features, vec![1.0, 2.0]);
    }

    #[test]
    fn scaling_on_digits_fits_training_range() {
        // Outside data: the UCI digits (see digits.rs); pixels 0..16.
        let ds = super::super::digits().unwrap();
        let (mut train, mut test) = split(&ds, 0.25, 3).unwrap();
        assert_eq!(train.len() + test.len(), 1797);
        let s = Scaling::fit(&train, 1.0);
        s.apply(&mut train);
        s.apply(&mut test);
        for j in 0..64 {
            let col: Vec<f32> = (0..train.len()).map(|i| train.row(i)[j]).collect();
            let (lo, up) = col
                .iter()
                .fold((f32::MAX, f32::MIN), |(a, b), &v| (a.min(v), b.max(v)));
            if s.max[j] > s.min[j] {
                assert_eq!((lo, up), (0.0, 1.0), "feature {j}");
            } else {
                assert_eq!((lo, up), (0.0, 0.0), "feature {j}");
            }
        }
        assert!(test.features.iter().all(|&v| (0.0..=1.0).contains(&v)));
    }
}
