//! The in-memory labelled data set every source produces.

use super::DataError;

/// A labelled data set in memory: row-major `f32` features (all finite) and one class
/// index per row, each below `n_classes`.
#[derive(Debug, Clone, PartialEq)]
pub struct Dataset {
    /// Features per row.
    pub n_features: usize,
    /// Number of classes; every label is below it.
    pub n_classes: usize,
    /// `len() * n_features` values, row after row.
    pub features: Vec<f32>,
    /// One class index per row.
    pub labels: Vec<u16>,
    /// Where the data came from (a path or a generator name), used in messages.
    pub source: String,
}

impl Dataset {
    /// Builds a data set after checking it (see [`Dataset::validate`]).
    pub fn new(
        n_features: usize,
        n_classes: usize,
        features: Vec<f32>,
        labels: Vec<u16>,
        source: impl Into<String>,
    ) -> Result<Dataset, DataError> {
        let ds = Dataset {
            n_features,
            n_classes,
            features,
            labels,
            source: source.into(),
        };
        ds.validate()?;
        Ok(ds)
    }

    /// Checks that the parts agree: `features.len()` is `len() * n_features`, every feature is
    /// finite, every label is below `n_classes`, and `n_features` and `n_classes` are at least 1.
    /// The fields are public, so code that takes a data set from elsewhere can check it here.
    pub fn validate(&self) -> Result<(), DataError> {
        let invalid = |reason: String| DataError::Invalid {
            origin: self.source.clone(),
            reason,
        };
        let n = self.n_features;
        if n == 0 {
            return Err(invalid("n_features is 0; expected at least 1".into()));
        }
        if self.n_classes == 0 {
            return Err(invalid("n_classes is 0; expected at least 1".into()));
        }
        if self.labels.len().checked_mul(n) != Some(self.features.len()) {
            return Err(invalid(format!(
                "{} feature values for {} rows of {} features; expected rows x features",
                self.features.len(),
                self.labels.len(),
                n
            )));
        }
        if let Some(i) = self.features.iter().position(|v| !v.is_finite()) {
            return Err(invalid(format!(
                "feature value {} at row {}, feature {} is not finite",
                self.features[i],
                i / n,
                i % n
            )));
        }
        if let Some(i) = self
            .labels
            .iter()
            .position(|&l| usize::from(l) >= self.n_classes)
        {
            return Err(invalid(format!(
                "label {} at row {} is not below n_classes = {}",
                self.labels[i], i, self.n_classes
            )));
        }
        Ok(())
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.labels.len()
    }

    /// True when there are no rows.
    pub fn is_empty(&self) -> bool {
        self.labels.is_empty()
    }

    /// The features of row `i`. Panics if `i >= len()`, like slice indexing.
    pub fn row(&self, i: usize) -> &[f32] {
        &self.features[i * self.n_features..(i + 1) * self.n_features]
    }

    /// Rows per class, indexed by class.
    pub fn class_counts(&self) -> Vec<usize> {
        let mut counts = vec![0usize; self.n_classes];
        for &l in &self.labels {
            if let Some(c) = counts.get_mut(usize::from(l)) {
                *c += 1;
            }
        }
        counts
    }

    /// A new data set holding the given rows, in the given order.
    /// Indices must be below `len()` (the split and subset code only passes such indices).
    pub(crate) fn select(&self, rows: &[usize], source: String) -> Dataset {
        let mut features = Vec::with_capacity(rows.len() * self.n_features);
        let mut labels = Vec::with_capacity(rows.len());
        for &i in rows {
            features.extend_from_slice(self.row(i));
            labels.push(self.labels[i]);
        }
        Dataset {
            n_features: self.n_features,
            n_classes: self.n_classes,
            features,
            labels,
            source,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn new_checks_parts() {
        let ok = Dataset::new(2, 3, vec![1.0, 2.0, 3.0, 4.0], vec![0, 2], "t").unwrap();
        assert_eq!(ok.len(), 2);
        assert_eq!(ok.row(1), &[3.0, 4.0]);
        assert_eq!(ok.class_counts(), vec![1, 0, 1]);
        let e = Dataset::new(2, 3, vec![1.0, 2.0, 3.0], vec![0, 2], "t").unwrap_err();
        assert!(e.to_string().contains("3 feature values for 2 rows"), "{e}");
        let e = Dataset::new(2, 2, vec![1.0, 2.0, 3.0, 4.0], vec![0, 2], "t").unwrap_err();
        assert!(e.to_string().contains("label 2 at row 1"), "{e}");
        let e = Dataset::new(1, 2, vec![f32::NAN], vec![0], "t").unwrap_err();
        assert!(
            e.to_string().contains("row 0, feature 0 is not finite"),
            "{e}"
        );
    }
}
