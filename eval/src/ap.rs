//! Average precision, three ways, on a [`PrCurve`] with points `(R_n, P_n)` in
//! increasing recall order and `R_0 = 0`:
//!
//! - **step sum** (scikit-learn's `average_precision_score`, no interpolation):
//!   `AP = sum_n (R_n - R_{n-1}) * P_n`.
//! - **all-point interpolated** (the Pascal VOC definition since the 2010
//!   challenge): precision is first replaced by its envelope
//!   `P_interp(r) = max_{R_n >= r} P_n` (0 beyond the last recall reached), and
//!   AP is the exact area under that step function:
//!   `AP = sum_n (R_n - R_{n-1}) * P_interp(R_n)`.
//! - **101-point** (the COCO definition): the mean of `P_interp` sampled at the
//!   recall levels `r = 0, 0.01, ..., 1`, where `P_interp(r)` is the envelope at
//!   the first point with `R_n >= r`, and 0 when recall `r` is never reached.
//!
//! The envelope never lowers precision, so all-point AP >= step-sum AP. All three
//! are `None` when no positives exist (AP is undefined, not 0); a class with
//! positives but no detections has AP 0.
//!
//! Worked example, computed by hand: ranked items `+ - - + +` with 3 positives
//! give the points `(R, P)` = (1/3, 1), (1/3, 1/2), (1/3, 1/3), (2/3, 1/2), (1, 3/5).
//! Step sum: `1/3 * 1 + 1/3 * 1/2 + 1/3 * 3/5 = 0.7`. Envelope: 1 up to recall
//! 1/3, then max(1/2, 3/5) = 3/5 up to recall 1, so all-point AP
//! `= 1/3 * 1 + 2/3 * 3/5 = 11/15 = 0.7333...`. 101-point: the 34 recall levels
//! 0.00..0.33 see 1 and the 67 levels 0.34..1.00 see 3/5, so
//! `(34 + 67 * 0.6) / 101 = 74.2 / 101 = 0.734653...`.

use crate::pr::PrCurve;
use serde::{Deserialize, Serialize};

/// The three AP figures of one curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ApFigures {
    /// All-point interpolated AP (Pascal VOC 2010 on).
    pub all_point: Option<f64>,
    /// 101-point interpolated AP (COCO).
    pub points_101: Option<f64>,
    /// Step sum without interpolation (scikit-learn `average_precision_score`).
    pub step_sum: Option<f64>,
}

impl ApFigures {
    /// All three figures of `curve`.
    pub fn of(curve: &PrCurve) -> Self {
        Self {
            all_point: ap_all_point(curve),
            points_101: ap_101(curve),
            step_sum: ap_step_sum(curve),
        }
    }
}

/// Step-sum AP without interpolation; `None` when no positives exist.
pub fn ap_step_sum(curve: &PrCurve) -> Option<f64> {
    if curve.n_positives == 0 {
        return None;
    }
    let mut prev_r = 0.0;
    let mut ap = 0.0;
    for p in &curve.points {
        ap += (p.recall - prev_r) * p.precision;
        prev_r = p.recall;
    }
    Some(ap)
}

/// The precision envelope, written into `env`: entry `n` is the largest
/// precision at points `>= n`.
fn envelope_into(curve: &PrCurve, env: &mut Vec<f64>) {
    env.clear();
    env.extend(curve.points.iter().map(|p| p.precision));
    envelope_in_place(env);
}

/// The area under the envelope `env` of `curve`.
fn all_point_with(curve: &PrCurve, env: &[f64]) -> f64 {
    let mut prev_r = 0.0;
    let mut ap = 0.0;
    for (p, e) in curve.points.iter().zip(env) {
        ap += (p.recall - prev_r) * e;
        prev_r = p.recall;
    }
    ap
}

/// The mean of the envelope `env` of `curve` at the 101 recall levels.
fn points_101_with(curve: &PrCurve, env: &[f64]) -> f64 {
    let mut sum = 0.0;
    let mut idx = 0;
    for r in recall_levels_101() {
        while idx < curve.points.len() && curve.points[idx].recall < r {
            idx += 1;
        }
        if idx < curve.points.len() {
            sum += env[idx];
        }
    }
    sum / 101.0
}

/// All-point interpolated AP (Pascal VOC 2010 on); `None` when no positives exist.
pub fn ap_all_point(curve: &PrCurve) -> Option<f64> {
    if curve.n_positives == 0 {
        return None;
    }
    let mut env = Vec::new();
    envelope_into(curve, &mut env);
    Some(all_point_with(curve, &env))
}

/// The 101 recall levels of COCO, computed as numpy's `linspace(0, 1, 101)` does
/// (`i * 0.01`, last one exactly 1), so threshold comparisons agree bit for bit.
pub fn recall_levels_101() -> [f64; 101] {
    let mut r = [0.0; 101];
    for (i, v) in r.iter_mut().enumerate() {
        *v = if i == 100 { 1.0 } else { i as f64 * 0.01 };
    }
    r
}

/// 101-point interpolated AP (COCO); `None` when no positives exist.
pub fn ap_101(curve: &PrCurve) -> Option<f64> {
    if curve.n_positives == 0 {
        return None;
    }
    let mut env = Vec::new();
    envelope_into(curve, &mut env);
    Some(points_101_with(curve, &env))
}

/// Turns the precisions of a curve's points into their envelope, in place
/// (the loop of [`envelope_into`]).
pub(crate) fn envelope_in_place(env: &mut [f64]) {
    for i in (0..env.len().saturating_sub(1)).rev() {
        env[i] = env[i].max(env[i + 1]);
    }
}

/// [`all_point_with`] on the points' recalls and envelope as slices.
pub(crate) fn all_point_of(recall: &[f64], env: &[f64]) -> f64 {
    let mut prev_r = 0.0;
    let mut ap = 0.0;
    for (r, e) in recall.iter().zip(env) {
        ap += (r - prev_r) * e;
        prev_r = *r;
    }
    ap
}

/// [`points_101_with`] on the points' recalls and envelope as slices.
pub(crate) fn points_101_of(recall: &[f64], env: &[f64]) -> f64 {
    let mut sum = 0.0;
    let mut idx = 0;
    for r in recall_levels_101() {
        while idx < recall.len() && recall[idx] < r {
            idx += 1;
        }
        if idx < recall.len() {
            sum += env[idx];
        }
    }
    sum / 101.0
}

/// Mean of the defined values; `None` when none is defined.
pub fn mean_defined(values: impl IntoIterator<Item = Option<f64>>) -> Option<f64> {
    let (sum, n) = values
        .into_iter()
        .flatten()
        .fold((0.0, 0usize), |(s, n), v| (s + v, n + 1));
    (n > 0).then(|| sum / n as f64)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::pr::pr_curve;
    use proptest::prelude::*;

    fn ranked(labels: &[bool], n_pos: u64) -> PrCurve {
        let items: Vec<(f64, bool)> = labels
            .iter()
            .enumerate()
            .map(|(i, y)| (1.0 - i as f64 / 100.0, *y))
            .collect();
        pr_curve(&items, n_pos).unwrap()
    }

    #[test]
    fn worked_example_from_module_doc() {
        // Hand calculation in the module comment: + - - + + with 3 positives.
        let c = ranked(&[true, false, false, true, true], 3);
        assert!((ap_step_sum(&c).unwrap() - 0.7).abs() < 1e-12);
        assert!((ap_all_point(&c).unwrap() - 11.0 / 15.0).abs() < 1e-12);
        assert!((ap_101(&c).unwrap() - 74.2 / 101.0).abs() < 1e-12);
    }

    #[test]
    fn perfect_and_empty_rankings() {
        let c = ranked(&[true, true, false], 2);
        assert_eq!(ap_all_point(&c), Some(1.0));
        assert_eq!(ap_101(&c), Some(1.0));
        // Positives exist but nothing was detected: AP 0; none exist: undefined.
        let none = pr_curve(&[], 4).unwrap();
        assert_eq!(ap_all_point(&none), Some(0.0));
        assert_eq!(ap_101(&none), Some(0.0));
        assert_eq!(ap_all_point(&pr_curve(&[(0.3, false)], 0).unwrap()), None);
        assert_eq!(mean_defined([Some(1.0), None, Some(0.5)]), Some(0.75));
        assert_eq!(mean_defined([None]), None);
    }

    #[test]
    fn missed_positives_cap_ap_at_recall() {
        // Half the positives are never detected: AP is at most the recall reached, 0.5.
        let c = ranked(&[true, true], 4);
        assert!((ap_all_point(&c).unwrap() - 0.5).abs() < 1e-12);
    }

    proptest! {
        #[test]
        fn bounds_and_order(labels in prop::collection::vec(any::<bool>(), 0..50), extra in 0u64..4) {
            let n_pos = labels.iter().filter(|y| **y).count() as u64 + extra;
            prop_assume!(n_pos > 0);
            let c = ranked(&labels, n_pos);
            let (s, a, p) = (ap_step_sum(&c).unwrap(), ap_all_point(&c).unwrap(), ap_101(&c).unwrap());
            for v in [s, a, p] {
                prop_assert!((0.0..=1.0 + 1e-12).contains(&v));
            }
            prop_assert!(a >= s - 1e-12, "all-point {} below step sum {}", a, s);
            // The envelope E is non-increasing, so with S the sum of the 101 samples,
            // 0.01 (S - E(0)) <= area <= 0.01 (S - E(1)), hence |S/101 - area| <= 1/101.
            prop_assert!((a - p).abs() <= 1.0 / 101.0 + 1e-12, "all-point {} vs 101-point {}", a, p);
        }

        #[test]
        fn permutation_invariant(
            items in prop::collection::vec((0u8..8, any::<bool>()), 1..40),
            seed in any::<u64>(),
        ) {
            let items: Vec<(f64, bool)> = items.into_iter().map(|(s, y)| (f64::from(s) / 8.0, y)).collect();
            let n_pos = items.iter().filter(|i| i.1).count() as u64 + 1;
            let mut shuffled = items.clone();
            symtrust_labels::SeededRng::new(seed).shuffle(&mut shuffled);
            let a = ApFigures::of(&pr_curve(&items, n_pos).unwrap());
            let b = ApFigures::of(&pr_curve(&shuffled, n_pos).unwrap());
            prop_assert_eq!(a, b);
        }
    }
}
