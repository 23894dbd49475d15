//! The UCI optical handwritten digits (8 x 8 images, pixels 0..16, 10 classes, 1797 samples),
//! from the copy embedded in `smartcore` (no download); `docs/references.md` \[32\].

use super::{DataError, Dataset};

/// Name used as [`Dataset::source`] for the digits.
pub const DIGITS_SOURCE: &str = "digits (UCI Optical Recognition of Handwritten Digits, 1797 x 64)";

/// Loads the 1797 digits: 64 features (row-major 8 x 8 pixels, values 0..16 as `f32`, unscaled)
/// and labels 0..9, in the order of the published set.
pub fn digits() -> Result<Dataset, DataError> {
    let d = smartcore::dataset::digits::load_dataset();
    let invalid = |reason: String| DataError::Invalid {
        origin: DIGITS_SOURCE.to_string(),
        reason,
    };
    if d.num_features != 64 || d.num_samples != d.target.len() {
        return Err(invalid(format!(
            "embedded copy has {} samples x {} features and {} targets; expected N x 64 and N targets",
            d.num_samples,
            d.num_features,
            d.target.len()
        )));
    }
    let mut labels = Vec::with_capacity(d.target.len());
    for (i, &t) in d.target.iter().enumerate() {
        if !(t.fract() == 0.0 && (0.0..=9.0).contains(&t)) {
            return Err(invalid(format!(
                "target {t} of sample {i} is not a digit 0..9"
            )));
        }
        labels.push(t as u16);
    }
    Dataset::new(64, 10, d.data, labels, DIGITS_SOURCE)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Check values: UCI Machine Learning Repository, "Optical Recognition of Handwritten
    // Digits" (1998), as shipped in scikit-learn `load_digits`; the counts and sums were
    // computed with scikit-learn 1.9.1 and smartcore 0.4.10, which agree.
    #[test]
    fn digits_match_published_set() {
        let ds = digits().unwrap();
        assert_eq!(ds.len(), 1797);
        assert_eq!(ds.n_features, 64);
        assert_eq!(ds.n_classes, 10);
        assert_eq!(
            ds.class_counts(),
            vec![178, 182, 177, 183, 181, 182, 181, 179, 174, 180]
        );
        assert_eq!(ds.labels[0], 0);
        assert_eq!(&ds.row(0)[..8], &[0.0, 0.0, 5.0, 13.0, 9.0, 1.0, 0.0, 0.0]);
        let sum0: f64 = ds.row(0).iter().map(|&v| f64::from(v)).sum();
        assert_eq!(sum0, 294.0);
        assert_eq!(ds.labels[100], 4);
        let total: f64 = ds.features.iter().map(|&v| f64::from(v)).sum();
        assert_eq!(total, 561_718.0);
        assert!(ds
            .features
            .iter()
            .all(|&v| (0.0..=16.0).contains(&v) && v.fract() == 0.0));
    }
}
