//! Validation metrics the training loop decides on: accuracy and macro F1.
//!
//! Macro F1 averages the per-class F1 over the classes that occur in the truth
//! or the predictions, each class counting once whatever its size, so a model
//! cannot score well by calling everything background. This is the definition
//! of scikit-learn's `f1_score(average="macro")`. (The full crop-level and
//! sheet-level metrics live in the eval crate; this is only what early
//! stopping needs.)

use serde::{Deserialize, Serialize};

/// A square confusion table: `counts[truth][predicted]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Confusion {
    /// Counts indexed by true class, then predicted class.
    pub counts: Vec<Vec<u64>>,
}

impl Confusion {
    /// Tallies predictions against truths over `classes` classes.
    pub fn new(classes: usize, truth: &[usize], predicted: &[usize]) -> Self {
        let mut counts = vec![vec![0; classes]; classes];
        for (t, p) in truth.iter().zip(predicted) {
            counts[*t][*p] += 1;
        }
        Self { counts }
    }

    /// Fraction of correct predictions (0 for no samples).
    pub fn accuracy(&self) -> f64 {
        let total: u64 = self.counts.iter().flatten().sum();
        let right: u64 = (0..self.counts.len()).map(|i| self.counts[i][i]).sum();
        if total == 0 {
            0.0
        } else {
            right as f64 / total as f64
        }
    }

    /// Per-class F1 (`None` for a class absent from truth and predictions).
    pub fn per_class_f1(&self) -> Vec<Option<f64>> {
        let k = self.counts.len();
        (0..k)
            .map(|c| {
                let tp = self.counts[c][c] as f64;
                let support: u64 = self.counts[c].iter().sum();
                let predicted: u64 = (0..k).map(|t| self.counts[t][c]).sum();
                if support == 0 && predicted == 0 {
                    None
                } else {
                    Some(2.0 * tp / (support + predicted) as f64)
                }
            })
            .collect()
    }

    /// Mean F1 over the classes present in truth or predictions.
    pub fn macro_f1(&self) -> f64 {
        let present: Vec<f64> = self.per_class_f1().into_iter().flatten().collect();
        if present.is_empty() {
            0.0
        } else {
            present.iter().sum::<f64>() / present.len() as f64
        }
    }
}

/// Validation figures of one epoch.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ValidationMetrics {
    /// Mean cross-entropy over validation crops (unweighted).
    pub loss: f64,
    /// Fraction of validation crops classified correctly.
    pub accuracy: f64,
    /// Macro F1 over classes present.
    pub macro_f1: f64,
    /// F1 per class in model order (`null` where a class is absent).
    pub per_class_f1: Vec<Option<f64>>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_the_scikit_learn_f1_score_example() {
        // scikit-learn `f1_score` docstring example (from memory, scikit-learn 1.x):
        // y_true = [0, 1, 2, 0, 1, 2], y_pred = [0, 2, 1, 0, 0, 1]
        // -> macro 0.2666..., per class [0.8, 0, 0].
        let c = Confusion::new(3, &[0, 1, 2, 0, 1, 2], &[0, 2, 1, 0, 0, 1]);
        assert!((c.macro_f1() - 0.8 / 3.0).abs() < 1e-12);
        assert_eq!(c.per_class_f1()[0], Some(0.8));
        assert!((c.accuracy() - 2.0 / 6.0).abs() < 1e-12);
    }

    #[test]
    fn absent_classes_do_not_count() {
        // Hand calculation: class 2 never occurs; classes 0 and 1 are perfect.
        let c = Confusion::new(3, &[0, 1, 1], &[0, 1, 1]);
        assert_eq!(c.per_class_f1()[2], None);
        assert_eq!(c.macro_f1(), 1.0);
    }
}
