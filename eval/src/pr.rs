//! Precision-recall curves from scored, labelled items.
//!
//! For a threshold `t`, with `TP(t)` and `FP(t)` the positive and negative items
//! whose score is `>= t`, and `N` the number of positives that exist (for sheet
//! evaluation: every ground-truth symbol, found or not):
//!
//! ```text
//! precision(t) = TP(t) / (TP(t) + FP(t))      recall(t) = TP(t) / N
//! ```
//!
//! The curve has one point per distinct score, in descending threshold order
//! (increasing recall). Tied scores are one threshold, so the curve does not
//! depend on the order in which tied items are listed; scikit-learn's
//! `precision_recall_curve` groups ties the same way. When `N = 0` the curve
//! still lists its points with recall 0, and every metric built on it
//! (AP, operating points) returns `None`.

use crate::error::{Result, finite};
use serde::{Deserialize, Serialize};

/// One point of a PR curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PrPoint {
    /// Items with score `>= threshold` are called positive.
    pub threshold: f64,
    /// Positives among the called items.
    pub tp: u64,
    /// Negatives among the called items.
    pub fp: u64,
    /// `tp / (tp + fp)`.
    pub precision: f64,
    /// `tp / n_positives` (0 when there are no positives).
    pub recall: f64,
}

/// A PR curve: points in descending threshold order.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PrCurve {
    /// Number of positives that exist (the recall denominator).
    pub n_positives: u64,
    /// One point per distinct score, highest threshold first.
    pub points: Vec<PrPoint>,
}

impl PrCurve {
    /// The point with the lowest threshold that is `>= threshold`: what a user
    /// gets by keeping every item scored at or above `threshold`. `None` when no
    /// item reaches it.
    pub fn at_threshold(&self, threshold: f64) -> Option<&PrPoint> {
        self.points.iter().rev().find(|p| p.threshold >= threshold)
    }
}

/// Builds the PR curve of `items` (`(score, is_positive)`) given the number of
/// positives that exist. Errors on a non-finite score or when fewer positives
/// exist than are labelled positive.
pub fn pr_curve(items: &[(f64, bool)], n_positives: u64) -> Result<PrCurve> {
    for (i, (s, _)) in items.iter().enumerate() {
        finite(|| format!("scored item #{i}, score"), *s)?;
    }
    let labelled = items.iter().filter(|(_, y)| *y).count() as u64;
    if labelled > n_positives {
        return Err(crate::error::setting(
            "n_positives",
            format!(
                "{labelled} items are labelled positive but only {n_positives} positives exist"
            ),
        ));
    }
    let mut sorted: Vec<(f64, bool)> = items.to_vec();
    sorted.sort_by(|a, b| b.0.total_cmp(&a.0));
    let mut points = Vec::new();
    let (mut tp, mut fp) = (0u64, 0u64);
    let mut i = 0;
    while i < sorted.len() {
        let t = sorted[i].0;
        while i < sorted.len() && sorted[i].0 == t {
            if sorted[i].1 {
                tp += 1;
            } else {
                fp += 1;
            }
            i += 1;
        }
        points.push(PrPoint {
            threshold: t,
            tp,
            fp,
            precision: tp as f64 / (tp + fp) as f64,
            recall: if n_positives == 0 {
                0.0
            } else {
                tp as f64 / n_positives as f64
            },
        });
    }
    Ok(PrCurve {
        n_positives,
        points,
    })
}

/// F1 score `2PR / (P + R)`, 0 when both are 0.
pub fn f1(precision: f64, recall: f64) -> f64 {
    if precision + recall > 0.0 {
        2.0 * precision * recall / (precision + recall)
    } else {
        0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Naive twin: for every distinct score, count the items at or above it.
    fn brute_force(items: &[(f64, bool)], n_pos: u64) -> Vec<PrPoint> {
        let mut thresholds: Vec<f64> = items.iter().map(|i| i.0).collect();
        thresholds.sort_by(|a, b| b.total_cmp(a));
        thresholds.dedup();
        thresholds
            .into_iter()
            .map(|t| {
                let tp = items.iter().filter(|i| i.0 >= t && i.1).count() as u64;
                let fp = items.iter().filter(|i| i.0 >= t && !i.1).count() as u64;
                PrPoint {
                    threshold: t,
                    tp,
                    fp,
                    precision: tp as f64 / (tp + fp) as f64,
                    recall: if n_pos == 0 {
                        0.0
                    } else {
                        tp as f64 / n_pos as f64
                    },
                }
            })
            .collect()
    }

    #[test]
    fn small_curve_by_hand() {
        // Scores 0.9(+) 0.8(-) 0.8(+) 0.3(-), 3 positives exist (one never scored).
        // t=0.9: 1/1, recall 1/3; t=0.8: 2/3, 2/3; t=0.3: 2/4, 2/3 (hand calculation).
        let c = pr_curve(&[(0.9, true), (0.8, false), (0.8, true), (0.3, false)], 3).unwrap();
        let got: Vec<(f64, f64)> = c.points.iter().map(|p| (p.precision, p.recall)).collect();
        assert_eq!(
            got,
            vec![(1.0, 1.0 / 3.0), (2.0 / 3.0, 2.0 / 3.0), (0.5, 2.0 / 3.0)]
        );
        assert_eq!(c.at_threshold(0.5).unwrap().threshold, 0.8);
        assert!(c.at_threshold(0.95).is_none());
    }

    #[test]
    fn rejects_nan_and_too_few_positives() {
        assert!(pr_curve(&[(f64::NAN, true)], 1).is_err());
        assert!(pr_curve(&[(0.5, true), (0.4, true)], 1).is_err());
    }

    proptest! {
        #[test]
        fn matches_brute_force_sweep(
            items in prop::collection::vec((0u8..20, any::<bool>()), 0..60),
            extra in 0u64..5,
        ) {
            // Scores on a coarse grid so ties are frequent.
            let items: Vec<(f64, bool)> = items.into_iter().map(|(s, y)| (f64::from(s) / 20.0, y)).collect();
            let n_pos = items.iter().filter(|i| i.1).count() as u64 + extra;
            let c = pr_curve(&items, n_pos).unwrap();
            prop_assert_eq!(c.points, brute_force(&items, n_pos));
        }

        #[test]
        fn order_of_items_does_not_matter(
            items in prop::collection::vec((0u8..10, any::<bool>()), 1..40),
            seed in any::<u64>(),
        ) {
            let items: Vec<(f64, bool)> = items.into_iter().map(|(s, y)| (f64::from(s) / 10.0, y)).collect();
            let n_pos = items.iter().filter(|i| i.1).count() as u64;
            let mut shuffled = items.clone();
            symtrust_labels::SeededRng::new(seed).shuffle(&mut shuffled);
            prop_assert_eq!(pr_curve(&items, n_pos).unwrap(), pr_curve(&shuffled, n_pos).unwrap());
        }
    }
}
