//! Operating points: which threshold to run the detector at, read off a PR curve.
//!
//! Only thresholds that exist on the curve are offered (a threshold a user can
//! actually set, with the precision and recall it really achieves; no
//! interpolation):
//!
//! - **F1-max**: the point maximising `F1 = 2PR / (P + R)`.
//! - **precision at required recall `R*`**: among points with `recall >= R*`,
//!   the one with the highest precision.
//! - **recall at required precision `P*`**: among points with
//!   `precision >= P*`, the one with the highest recall.
//!
//! Ties go to the higher threshold (fewer detections for the same figure). Each
//! is `None` when no positives exist or no point meets the requirement.

use crate::error::{Result, in_range};
use crate::pr::{PrCurve, PrPoint, f1};
use serde::{Deserialize, Serialize};

/// A threshold and what the detector achieves there.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct OperatingPoint {
    /// Keep detections scored `>= threshold`.
    pub threshold: f64,
    /// Precision at that threshold.
    pub precision: f64,
    /// Recall at that threshold.
    pub recall: f64,
    /// F1 at that threshold.
    pub f1: f64,
}

impl From<&PrPoint> for OperatingPoint {
    fn from(p: &PrPoint) -> Self {
        Self {
            threshold: p.threshold,
            precision: p.precision,
            recall: p.recall,
            f1: f1(p.precision, p.recall),
        }
    }
}

/// Picks the best point by `key` (larger is better) among those passing `keep`;
/// the curve is in descending threshold order, so keeping the first maximum
/// gives ties to the higher threshold.
fn best_by(
    curve: &PrCurve,
    keep: impl Fn(&PrPoint) -> bool,
    key: impl Fn(&PrPoint) -> f64,
) -> Option<OperatingPoint> {
    if curve.n_positives == 0 {
        return None;
    }
    let mut best: Option<&PrPoint> = None;
    for p in curve.points.iter().filter(|p| keep(p)) {
        if best.is_none_or(|b| key(p) > key(b)) {
            best = Some(p);
        }
    }
    best.map(OperatingPoint::from)
}

/// The point with the highest F1.
pub fn f1_max(curve: &PrCurve) -> Option<OperatingPoint> {
    best_by(curve, |_| true, |p| f1(p.precision, p.recall))
}

/// The highest precision among points with `recall >= required_recall`.
pub fn precision_at_recall(
    curve: &PrCurve,
    required_recall: f64,
) -> Result<Option<OperatingPoint>> {
    in_range(|| "required recall".to_string(), required_recall, 0.0, 1.0)?;
    Ok(best_by(
        curve,
        |p| p.recall >= required_recall,
        |p| p.precision,
    ))
}

/// The highest recall among points with `precision >= required_precision`.
pub fn recall_at_precision(
    curve: &PrCurve,
    required_precision: f64,
) -> Result<Option<OperatingPoint>> {
    in_range(
        || "required precision".to_string(),
        required_precision,
        0.0,
        1.0,
    )?;
    Ok(best_by(
        curve,
        |p| p.precision >= required_precision,
        |p| p.recall,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::pr::pr_curve;
    use proptest::prelude::*;

    fn curve() -> PrCurve {
        // Ranked + - + + - with 5 positives: points (P, R) = (1, .2), (.5, .2),
        // (2/3, .4), (.75, .6), (.6, .6) (hand calculation).
        pr_curve(
            &[
                (0.9, true),
                (0.8, false),
                (0.7, true),
                (0.6, true),
                (0.5, false),
            ],
            5,
        )
        .unwrap()
    }

    #[test]
    fn hand_checked_operating_points() {
        let c = curve();
        // F1 at the five points: .333, .286, .5, .667, .6 -> best at threshold 0.6.
        let best = f1_max(&c).unwrap();
        assert_eq!(best.threshold, 0.6);
        assert!((best.f1 - 2.0 / 3.0).abs() < 1e-12);
        // Recall >= 0.4: points at 0.7 (2/3), 0.6 (3/4), 0.5 (.6) -> 0.6.
        assert_eq!(
            precision_at_recall(&c, 0.4).unwrap().unwrap().threshold,
            0.6
        );
        // Precision >= 0.9 is only met at 0.9, with recall 0.2.
        let p = recall_at_precision(&c, 0.9).unwrap().unwrap();
        assert_eq!((p.threshold, p.recall), (0.9, 0.2));
        // Recall 0.8 is never reached.
        assert!(precision_at_recall(&c, 0.8).unwrap().is_none());
        assert!(recall_at_precision(&c, 1.5).is_err());
    }

    proptest! {
        #[test]
        fn chosen_point_meets_requirement_and_is_best(
            labels in prop::collection::vec(any::<bool>(), 1..40),
            req in 0.0..1.0f64,
        ) {
            let items: Vec<(f64, bool)> = labels.iter().enumerate().map(|(i, y)| (1.0 - i as f64 / 64.0, *y)).collect();
            let n_pos = labels.iter().filter(|y| **y).count() as u64 + 1;
            let c = pr_curve(&items, n_pos).unwrap();
            if let Some(op) = precision_at_recall(&c, req).unwrap() {
                prop_assert!(op.recall >= req);
                prop_assert!(c.points.iter().filter(|p| p.recall >= req).all(|p| p.precision <= op.precision));
            } else {
                prop_assert!(c.points.iter().all(|p| p.recall < req));
            }
            if let Some(op) = recall_at_precision(&c, req).unwrap() {
                prop_assert!(op.precision >= req);
                prop_assert!(c.points.iter().filter(|p| p.precision >= req).all(|p| p.recall <= op.recall));
            } else {
                prop_assert!(c.points.iter().all(|p| p.precision < req));
            }
        }
    }
}
