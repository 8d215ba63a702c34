//! Calibration: does a score of 0.8 come true eight times in ten?
//!
//! Binning: `B` equal-width bins on `[0, 1]`; bin `i` holds scores in
//! `[i/B, (i+1)/B)`, the last bin also holds 1.0. For bin `b` with `n_b` items,
//! mean score `conf_b` and observed share of positives `acc_b`:
//!
//! ```text
//! ECE   = sum_b (n_b / N) * |acc_b - conf_b|        (empty bins contribute 0)
//! Brier = (1/N) * sum_i (s_i - y_i)^2                (y_i in {0, 1})
//! ```
//!
//! Platt scaling fits `p = 1 / (1 + exp(-(a * logit(s) + b)))` by maximum
//! likelihood (Newton's method on the logistic log-loss, no regularisation) on
//! validation scores, to be applied to held-out scores; with `b = 0` it is
//! temperature scaling with `T = 1/a`. Scores are clamped to
//! `[1e-12, 1 - 1e-12]` before the logit.

use crate::error::{EvalError, Result, in_range, setting};
use serde::{Deserialize, Serialize};

/// One bin of a reliability diagram.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ReliabilityBin {
    /// Lower edge (inclusive).
    pub lower: f64,
    /// Upper edge (exclusive, except 1.0 for the last bin).
    pub upper: f64,
    /// Items in the bin.
    pub count: u64,
    /// Mean score of the items (`None` for an empty bin).
    pub mean_score: Option<f64>,
    /// Share of the items that are positive (`None` for an empty bin).
    pub observed: Option<f64>,
}

/// Reliability diagram, ECE and Brier score of a set of scores.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Calibration {
    /// The bins, lowest first.
    pub bins: Vec<ReliabilityBin>,
    /// Expected calibration error over the bins.
    pub ece: f64,
    /// Brier score.
    pub brier: f64,
    /// Number of items.
    pub n: u64,
}

fn check_scores(items: &[(f64, bool)]) -> Result<()> {
    if items.is_empty() {
        return Err(EvalError::Empty {
            what: "scores to calibrate".into(),
        });
    }
    for (i, (s, _)) in items.iter().enumerate() {
        in_range(|| format!("scored item #{i}, score"), *s, 0.0, 1.0)?;
    }
    Ok(())
}

/// Brier score of `(score, is_positive)` items; scores must lie in `[0, 1]`.
pub fn brier_score(items: &[(f64, bool)]) -> Result<f64> {
    check_scores(items)?;
    let sum: f64 = items
        .iter()
        .map(|&(s, y)| (s - if y { 1.0 } else { 0.0 }).powi(2))
        .sum();
    Ok(sum / items.len() as f64)
}

/// Reliability diagram with `n_bins` equal-width bins, ECE and Brier score.
pub fn calibration(items: &[(f64, bool)], n_bins: usize) -> Result<Calibration> {
    if n_bins == 0 {
        return Err(setting("n_bins", "needs at least one bin"));
    }
    check_scores(items)?;
    let mut count = vec![0u64; n_bins];
    let mut score_sum = vec![0.0; n_bins];
    let mut pos = vec![0u64; n_bins];
    for &(s, y) in items {
        let b = ((s * n_bins as f64).floor() as usize).min(n_bins - 1);
        count[b] += 1;
        score_sum[b] += s;
        pos[b] += u64::from(y);
    }
    let n = items.len() as f64;
    let mut ece = 0.0;
    let bins = (0..n_bins)
        .map(|b| {
            let (mean_score, observed) = if count[b] > 0 {
                let c = count[b] as f64;
                let (m, o) = (score_sum[b] / c, pos[b] as f64 / c);
                ece += c / n * (o - m).abs();
                (Some(m), Some(o))
            } else {
                (None, None)
            };
            ReliabilityBin {
                lower: b as f64 / n_bins as f64,
                upper: (b + 1) as f64 / n_bins as f64,
                count: count[b],
                mean_score,
                observed,
            }
        })
        .collect();
    Ok(Calibration {
        bins,
        ece,
        brier: brier_score(items)?,
        n: items.len() as u64,
    })
}

/// A fitted Platt scaling `p = sigmoid(a * logit(s) + b)`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PlattScaling {
    /// Slope on the logit of the score.
    pub a: f64,
    /// Offset.
    pub b: f64,
}

fn logit(s: f64) -> f64 {
    let s = s.clamp(1e-12, 1.0 - 1e-12);
    (s / (1.0 - s)).ln()
}

fn sigmoid(z: f64) -> f64 {
    if z >= 0.0 {
        1.0 / (1.0 + (-z).exp())
    } else {
        let e = z.exp();
        e / (1.0 + e)
    }
}

impl PlattScaling {
    /// The calibrated probability of a raw score.
    pub fn apply(&self, score: f64) -> f64 {
        sigmoid(self.a * logit(score) + self.b)
    }
}

/// Fits Platt scaling on validation items. Needs both outcomes present, else
/// the maximum-likelihood fit does not exist; also fails when the two outcomes
/// are perfectly separated by the score (the likelihood then has no maximum).
pub fn fit_platt(items: &[(f64, bool)]) -> Result<PlattScaling> {
    check_scores(items)?;
    let n_pos = items.iter().filter(|i| i.1).count();
    if n_pos == 0 || n_pos == items.len() {
        return Err(setting(
            "calibration data",
            "Platt scaling needs both true and false detections among the validation scores",
        ));
    }
    let max_of = |want: bool| {
        items
            .iter()
            .filter(|i| i.1 == want)
            .map(|i| i.0)
            .fold(f64::MIN, f64::max)
    };
    let min_of = |want: bool| {
        items
            .iter()
            .filter(|i| i.1 == want)
            .map(|i| i.0)
            .fold(f64::MAX, f64::min)
    };
    if max_of(false) < min_of(true) || max_of(true) < min_of(false) {
        return Err(setting(
            "calibration data",
            "the validation scores separate true from false detections perfectly, so Platt scaling has no finite fit",
        ));
    }
    let xs: Vec<(f64, f64)> = items
        .iter()
        .map(|&(s, y)| (logit(s), f64::from(u8::from(y))))
        .collect();
    let (mut a, mut b) = (1.0, 0.0);
    for _ in 0..100 {
        // Gradient and Hessian of the mean log-loss in (a, b).
        let (mut ga, mut gb, mut haa, mut hab, mut hbb) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for &(x, y) in &xs {
            let p = sigmoid(a * x + b);
            let w = p * (1.0 - p);
            ga += (p - y) * x;
            gb += p - y;
            haa += w * x * x;
            hab += w * x;
            hbb += w;
        }
        let det = haa * hbb - hab * hab;
        if det.abs() < 1e-300 {
            break;
        }
        let da = (hbb * ga - hab * gb) / det;
        let db = (haa * gb - hab * ga) / det;
        a -= da;
        b -= db;
        if !(a.is_finite() && b.is_finite()) {
            break;
        }
        if da.abs() < 1e-12 && db.abs() < 1e-12 {
            return Ok(PlattScaling { a, b });
        }
    }
    Err(setting(
        "calibration data",
        "Platt scaling did not converge in 100 Newton steps",
    ))
}

/// Platt scaling fitted on validation items and judged on held-out items.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FittedCalibration {
    /// The map fitted on the validation items.
    pub scaling: PlattScaling,
    /// Calibration of the raw held-out scores.
    pub held_out_raw: Calibration,
    /// Calibration of the held-out scores after the map.
    pub held_out_scaled: Calibration,
}

/// Fits Platt scaling on `validation` and reports the held-out calibration
/// before and after it (the fit never sees the held-out items).
pub fn fit_and_judge(
    validation: &[(f64, bool)],
    held_out: &[(f64, bool)],
    n_bins: usize,
) -> Result<FittedCalibration> {
    let scaling = fit_platt(validation)?;
    let scaled: Vec<(f64, bool)> = held_out
        .iter()
        .map(|&(s, y)| (scaling.apply(s), y))
        .collect();
    Ok(FittedCalibration {
        scaling,
        held_out_raw: calibration(held_out, n_bins)?,
        held_out_scaled: calibration(&scaled, n_bins)?,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bins_and_ece_by_hand() {
        // Two bins. [0, .5): 0.2(-) 0.4(+) -> conf 0.3, acc 0.5.
        // [.5, 1]: 0.5(+) 1.0(+) -> conf 0.75, acc 1.
        // ECE = 0.5 * 0.2 + 0.5 * 0.25 = 0.225 (hand calculation).
        let c = calibration(&[(0.2, false), (0.4, true), (0.5, true), (1.0, true)], 2).unwrap();
        assert_eq!(c.bins[0].count, 2);
        assert_eq!(c.bins[1].count, 2);
        assert!((c.ece - 0.225).abs() < 1e-12);
        // Brier: (0.04 + 0.36 + 0.25 + 0) / 4 = 0.1625.
        assert!((c.brier - 0.1625).abs() < 1e-12);
        assert!(calibration(&[], 10).is_err());
        assert!(calibration(&[(1.2, true)], 10).is_err());
        assert!(calibration(&[(0.2, true)], 0).is_err());
    }

    #[test]
    fn perfectly_calibrated_scores_have_zero_ece() {
        let mut items = Vec::new();
        for k in 0..10 {
            let s = 0.05 + 0.1 * k as f64;
            let n_pos = (s * 20.0).round() as usize;
            for i in 0..20 {
                items.push((s, i < n_pos));
            }
        }
        assert!(calibration(&items, 10).unwrap().ece < 1e-12);
    }

    #[test]
    fn platt_recovers_a_known_map() {
        // Outcome frequencies generated exactly from sigmoid(2 logit(s) - 0.5):
        // with counts proportional to the probabilities the MLE is that map.
        let mut items = Vec::new();
        for k in 1..20 {
            let s = k as f64 / 20.0;
            let p = sigmoid(2.0 * logit(s) - 0.5);
            let n_pos = (p * 1000.0).round() as usize;
            for i in 0..1000 {
                items.push((s, i < n_pos));
            }
        }
        let fit = fit_platt(&items).unwrap();
        assert!(
            (fit.a - 2.0).abs() < 0.01 && (fit.b + 0.5).abs() < 0.01,
            "{fit:?}"
        );
        assert!(fit_platt(&[(0.2, true), (0.3, true)]).is_err());
        // Over-confident held-out scores: the map fitted on validation data from the
        // same source brings the held-out ECE down.
        let held: Vec<(f64, bool)> = items.iter().step_by(7).copied().collect();
        let judged = fit_and_judge(&items, &held, 10).unwrap();
        assert!(
            judged.held_out_scaled.ece < judged.held_out_raw.ece,
            "{judged:?}"
        );
        assert!(fit_platt(&[(0.2, false), (0.9, true)]).is_err());
    }
}
