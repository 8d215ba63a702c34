//! ROC curve and the area under it.
//!
//! With `P` positives and `N` negatives, the point at threshold `t` is
//! `(FPR, TPR) = (FP(t) / N, TP(t) / P)`, one point per distinct score, starting
//! from `(0, 0)`. The area is the trapezoidal sum over those points, which equals
//! the Mann-Whitney probability that a random positive outscores a random
//! negative, ties counting one half:
//! `AUC = (#{s+ > s-} + 0.5 * #{s+ = s-}) / (P * N)`; the tests check the
//! trapezoid against that pair count. `None` when either class is absent.

use crate::error::{Result, finite};
use serde::{Deserialize, Serialize};

/// One ROC point.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct RocPoint {
    /// Items scored `>= threshold` are called positive (`None` for the origin,
    /// where none is; kept out of band so the curve serialises to plain JSON).
    pub threshold: Option<f64>,
    /// False-positive rate.
    pub fpr: f64,
    /// True-positive rate (recall).
    pub tpr: f64,
}

/// A ROC curve with its area.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RocCurve {
    /// Points from `(0, 0)` to `(1, 1)`.
    pub points: Vec<RocPoint>,
    /// Area under the curve; `None` when all items are of one kind.
    pub auc: Option<f64>,
}

/// ROC curve of `(score, is_positive)` items.
pub fn roc_curve(items: &[(f64, bool)]) -> Result<RocCurve> {
    for (i, (s, _)) in items.iter().enumerate() {
        finite(|| format!("scored item #{i}, score"), *s)?;
    }
    let n_pos = items.iter().filter(|i| i.1).count() as f64;
    let n_neg = items.len() as f64 - n_pos;
    let mut sorted = items.to_vec();
    sorted.sort_by(|a, b| b.0.total_cmp(&a.0));
    let rate = |k: f64, n: f64| if n > 0.0 { k / n } else { 0.0 };
    let mut points = vec![RocPoint {
        threshold: None,
        fpr: 0.0,
        tpr: 0.0,
    }];
    let (mut tp, mut fp) = (0.0, 0.0);
    let mut auc = 0.0;
    let mut i = 0;
    while i < sorted.len() {
        let t = sorted[i].0;
        while i < sorted.len() && sorted[i].0 == t {
            if sorted[i].1 {
                tp += 1.0;
            } else {
                fp += 1.0;
            }
            i += 1;
        }
        let prev = *points.last().expect("origin is present");
        let p = RocPoint {
            threshold: Some(t),
            fpr: rate(fp, n_neg),
            tpr: rate(tp, n_pos),
        };
        auc += (p.fpr - prev.fpr) * (p.tpr + prev.tpr) / 2.0;
        points.push(p);
    }
    let auc = (n_pos > 0.0 && n_neg > 0.0).then_some(auc);
    Ok(RocCurve { points, auc })
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Naive twin: count every positive-negative pair.
    fn pair_count_auc(items: &[(f64, bool)]) -> Option<f64> {
        let pos: Vec<f64> = items.iter().filter(|i| i.1).map(|i| i.0).collect();
        let neg: Vec<f64> = items.iter().filter(|i| !i.1).map(|i| i.0).collect();
        if pos.is_empty() || neg.is_empty() {
            return None;
        }
        let mut wins = 0.0;
        for p in &pos {
            for n in &neg {
                wins += if p > n {
                    1.0
                } else if p == n {
                    0.5
                } else {
                    0.0
                };
            }
        }
        Some(wins / (pos.len() * neg.len()) as f64)
    }

    #[test]
    fn hand_example() {
        // Positives 0.8, 0.4; negatives 0.6, 0.2: pairs won 3 of 4 -> 0.75.
        let r = roc_curve(&[(0.8, true), (0.6, false), (0.4, true), (0.2, false)]).unwrap();
        assert_eq!(r.auc, Some(0.75));
        assert_eq!(roc_curve(&[(0.8, true)]).unwrap().auc, None);
    }

    proptest! {
        #[test]
        fn trapezoid_equals_pair_count(items in prop::collection::vec((0u8..10, any::<bool>()), 0..50)) {
            let items: Vec<(f64, bool)> = items.into_iter().map(|(s, y)| (f64::from(s) / 10.0, y)).collect();
            let fast = roc_curve(&items).unwrap().auc;
            let slow = pair_count_auc(&items);
            match (fast, slow) {
                (Some(a), Some(b)) => prop_assert!((a - b).abs() < 1e-12, "{} vs {}", a, b),
                (a, b) => prop_assert_eq!(a, b),
            }
        }
    }
}
