//! Confusion matrix of per-pixel labels and the scores derived from it: pixel accuracy,
//! per-class IoU (Jaccard index) and per-class accuracy (recall), and their means.
//!
//! Means follow the reference pipeline's convention (and scikit-learn's
//! `balanced_accuracy_score` for the class accuracy): a class that never occurs is left out
//! rather than counted as 0 or 1, because a scene without, say, water says nothing about how
//! well water is segmented.

use crate::error::{GroveError, Result};
use serde::{Deserialize, Serialize};

/// Pixel counts by (true class, predicted class) for `n_classes` classes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ConfusionMatrix {
    n_classes: usize,
    /// `counts[t * n_classes + p]`: rows are truth, columns prediction.
    counts: Vec<u64>,
}

impl ConfusionMatrix {
    /// An all-zero matrix for classes `0..n_classes`.
    pub fn new(n_classes: usize) -> Self {
        ConfusionMatrix {
            n_classes,
            counts: vec![0; n_classes * n_classes],
        }
    }

    /// Counts pixel pairs `(truth[i], pred[i])`, skipping pixels whose truth equals `ignore`
    /// (the "unlabelled" value, e.g. `Some(255)`); their prediction is not examined.
    ///
    /// Errors (and the matrix is left unchanged): different lengths; a labelled truth value or
    /// any prediction outside `0..n_classes`.
    pub fn add<T, P>(&mut self, truth: &[T], pred: &[P], ignore: Option<u32>) -> Result<()>
    where
        T: Copy + Into<u32>,
        P: Copy + Into<u32>,
    {
        if truth.len() != pred.len() {
            return Err(GroveError::Data(format!(
                "confusion matrix: {} true labels but {} predictions",
                truth.len(),
                pred.len()
            )));
        }
        let n = self.n_classes;
        let mut local = vec![0u64; n * n];
        for (i, (&t, &p)) in truth.iter().zip(pred).enumerate() {
            let (t, p): (u32, u32) = (t.into(), p.into());
            if Some(t) == ignore {
                continue;
            }
            if t as usize >= n || p as usize >= n {
                return Err(GroveError::Data(format!(
                    "confusion matrix: pixel {i} has truth {t} / prediction {p}, but there are \
                     only {n} classes"
                )));
            }
            local[t as usize * n + p as usize] += 1;
        }
        self.counts
            .iter_mut()
            .zip(&local)
            .for_each(|(a, b)| *a += b);
        Ok(())
    }

    /// Adds another matrix's counts (e.g. from another image or fold).
    /// Error if the class counts differ.
    pub fn merge(&mut self, other: &ConfusionMatrix) -> Result<()> {
        if other.n_classes != self.n_classes {
            return Err(GroveError::Data(format!(
                "cannot merge confusion matrices of {} and {} classes",
                self.n_classes, other.n_classes
            )));
        }
        self.counts
            .iter_mut()
            .zip(&other.counts)
            .for_each(|(a, b)| *a += b);
        Ok(())
    }

    /// Number of classes.
    pub fn n_classes(&self) -> usize {
        self.n_classes
    }

    /// Row-major counts, rows truth, columns prediction.
    pub fn counts(&self) -> &[u64] {
        &self.counts
    }

    /// Pixels of true class `t` predicted as `p`.
    pub fn get(&self, t: usize, p: usize) -> u64 {
        self.counts[t * self.n_classes + p]
    }

    /// All counted (labelled) pixels.
    pub fn total(&self) -> u64 {
        self.counts.iter().sum()
    }

    /// Pixels whose truth is `c` (row sum).
    pub fn truth_count(&self, c: usize) -> u64 {
        self.counts[c * self.n_classes..(c + 1) * self.n_classes]
            .iter()
            .sum()
    }

    /// Pixels predicted as `c` (column sum).
    pub fn predicted_count(&self, c: usize) -> u64 {
        (0..self.n_classes).map(|t| self.get(t, c)).sum()
    }

    /// `Σ_c n_cc / Σ n` — the fraction of labelled pixels predicted correctly; None if empty.
    pub fn pixel_accuracy(&self) -> Option<f64> {
        let total = self.total();
        let correct: u64 = (0..self.n_classes).map(|c| self.get(c, c)).sum();
        (total > 0).then(|| correct as f64 / total as f64)
    }

    /// IoU (Jaccard index) per class: `tp / (truth + predicted − tp)`; None when the class
    /// occurs in neither truth nor prediction.
    pub fn per_class_iou(&self) -> Vec<Option<f64>> {
        (0..self.n_classes)
            .map(|c| {
                let tp = self.get(c, c);
                let union = self.truth_count(c) + self.predicted_count(c) - tp;
                (union > 0).then(|| tp as f64 / union as f64)
            })
            .collect()
    }

    /// Mean IoU over the classes present in truth or prediction (the reference pipeline's
    /// convention; absent classes are skipped, not scored); None if there are none.
    pub fn mean_iou(&self) -> Option<f64> {
        mean_of_present(&self.per_class_iou())
    }

    /// Accuracy (recall) per class: `tp / truth`; None when the class is absent from truth.
    pub fn per_class_accuracy(&self) -> Vec<Option<f64>> {
        (0..self.n_classes)
            .map(|c| {
                let truth = self.truth_count(c);
                (truth > 0).then(|| self.get(c, c) as f64 / truth as f64)
            })
            .collect()
    }

    /// Mean class accuracy over the classes present in truth (= scikit-learn's
    /// `balanced_accuracy_score`); None if no pixel is labelled.
    pub fn mean_class_accuracy(&self) -> Option<f64> {
        mean_of_present(&self.per_class_accuracy())
    }
}

fn mean_of_present(values: &[Option<f64>]) -> Option<f64> {
    let present: Vec<f64> = values.iter().flatten().copied().collect();
    (!present.is_empty()).then(|| present.iter().sum::<f64>() / present.len() as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Worked example by hand (2 classes + ignore): truth [0,0,1,1,255], pred [0,1,1,1,0]
    /// → [[1,1],[0,2]]; accuracy 3/4; IoU 1/2, 2/3; recall 1/2, 1.
    #[test]
    fn small_worked_example() {
        let mut cm = ConfusionMatrix::new(2);
        cm.add(&[0u8, 0, 1, 1, 255], &[0u8, 1, 1, 1, 0], Some(255))
            .unwrap();
        assert_eq!(cm.counts(), &[1, 1, 0, 2]);
        assert_eq!(cm.pixel_accuracy(), Some(0.75));
        assert_eq!(cm.per_class_iou(), vec![Some(0.5), Some(2.0 / 3.0)]);
        assert_eq!(cm.per_class_accuracy(), vec![Some(0.5), Some(1.0)]);
        assert_eq!(cm.mean_class_accuracy(), Some(0.75));
    }

    #[test]
    fn errors_leave_matrix_unchanged_and_merge_adds() {
        let mut cm = ConfusionMatrix::new(3);
        cm.add(&[0u8, 1], &[0u32, 2], None).unwrap();
        let before = cm.clone();
        assert!(cm.add(&[0u8, 1], &[0u8], None).is_err());
        assert!(cm.add(&[0u8, 3], &[0u8, 0], None).is_err());
        assert!(cm.add(&[0u16, 1], &[0u16, 7], Some(9)).is_err());
        assert_eq!(cm, before);
        let mut twice = cm.clone();
        twice.merge(&cm).unwrap();
        assert_eq!(twice.get(1, 2), 2);
        assert_eq!(twice.total(), 4);
        assert!(twice.merge(&ConfusionMatrix::new(2)).is_err());
        let empty = ConfusionMatrix::new(3);
        assert_eq!(empty.pixel_accuracy(), None);
        assert_eq!(empty.mean_iou(), None);
        assert_eq!(empty.mean_class_accuracy(), None);
    }
}
