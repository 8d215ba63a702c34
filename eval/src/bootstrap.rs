//! Percentile bootstrap over whole sheets.
//!
//! Symbols on one sheet share a scan, a drafter and a style, so they are not
//! independent; the unit of resampling is the sheet. Each replicate draws
//! `n` sheet indices uniformly with replacement from the `n` evaluated sheets
//! (a sheet drawn twice counts twice) and recomputes the statistic on that
//! multiset. The interval at level `L` is the pair of empirical quantiles
//! `q((1 - L) / 2)` and `q((1 + L) / 2)` of the replicate values, with linear
//! interpolation between order statistics (numpy's default `percentile`
//! method: `q(p) = x[floor(h)] + (h - floor(h)) (x[floor(h)+1] - x[floor(h)])`,
//! `h = (m - 1) p` over the `m` sorted values). Replicates on which the
//! statistic is undefined (e.g. no ground truth of a class drawn) are left
//! out and counted. Randomness comes only from `SeededRng`, so a seed
//! reproduces the interval exactly.

use crate::error::{EvalError, Result, in_range, setting};
use serde::{Deserialize, Serialize};
use symtrust_labels::SeededRng;

/// How to bootstrap.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BootstrapConfig {
    /// Number of replicates.
    pub resamples: usize,
    /// Seed of the generator.
    pub seed: u64,
    /// Confidence level in `(0, 1)`, e.g. 0.95.
    pub level: f64,
}

impl Default for BootstrapConfig {
    /// 1000 replicates, seed 0, 95 % (common practice).
    fn default() -> Self {
        Self {
            resamples: 1000,
            seed: 0,
            level: 0.95,
        }
    }
}

impl BootstrapConfig {
    /// Rejects zero replicates or a level outside `(0, 1)`.
    pub fn validate(&self) -> Result<()> {
        if self.resamples == 0 {
            return Err(setting(
                "bootstrap resamples",
                "needs at least one replicate",
            ));
        }
        in_range(|| "bootstrap level".into(), self.level, 0.0, 1.0)?;
        if self.level <= 0.0 || self.level >= 1.0 {
            return Err(setting(
                "bootstrap level",
                "must lie strictly between 0 and 1",
            ));
        }
        Ok(())
    }
}

/// A point estimate with its percentile interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Interval {
    /// The statistic on the sheets as evaluated (`None` when undefined there).
    pub estimate: Option<f64>,
    /// Lower end of the interval (`None` when no replicate was defined).
    pub lower: Option<f64>,
    /// Upper end of the interval.
    pub upper: Option<f64>,
    /// Confidence level.
    pub level: f64,
    /// Replicates on which the statistic was defined.
    pub resamples_used: usize,
    /// Replicates on which it was undefined and so left out.
    pub resamples_undefined: usize,
}

/// Empirical quantile `p` of `values` with linear interpolation (see module comment).
pub fn quantile(values: &[f64], p: f64) -> Result<f64> {
    if values.is_empty() {
        return Err(EvalError::Empty {
            what: "values for a quantile".into(),
        });
    }
    in_range(|| "quantile level".into(), p, 0.0, 1.0)?;
    let mut v = values.to_vec();
    for (i, x) in v.iter().enumerate() {
        crate::error::finite(|| format!("value #{i} for a quantile"), *x)?;
    }
    v.sort_by(f64::total_cmp);
    let h = (v.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(v.len() - 1);
    Ok(v[lo] + (h - lo as f64) * (v[hi] - v[lo]))
}

/// The sheet indices of every replicate: `resamples` vectors of `n_sheets`
/// indices drawn with replacement.
pub fn resample_indices(n_sheets: usize, cfg: &BootstrapConfig) -> Result<Vec<Vec<usize>>> {
    cfg.validate()?;
    if n_sheets == 0 {
        return Err(EvalError::Empty {
            what: "sheets to resample".into(),
        });
    }
    let mut rng = SeededRng::new(cfg.seed);
    Ok((0..cfg.resamples)
        .map(|_| {
            (0..n_sheets)
                .map(|_| rng.below(n_sheets as u64) as usize)
                .collect()
        })
        .collect())
}

/// Builds the interval from an estimate and the replicate values.
pub fn interval_from(
    estimate: Option<f64>,
    replicates: &[Option<f64>],
    level: f64,
) -> Result<Interval> {
    let defined: Vec<f64> = replicates.iter().flatten().copied().collect();
    let (lower, upper) = if defined.is_empty() {
        (None, None)
    } else {
        (
            Some(quantile(&defined, (1.0 - level) / 2.0)?),
            Some(quantile(&defined, (1.0 + level) / 2.0)?),
        )
    };
    Ok(Interval {
        estimate,
        lower,
        upper,
        level,
        resamples_used: defined.len(),
        resamples_undefined: replicates.len() - defined.len(),
    })
}

/// Percentile bootstrap of `statistic`, which receives the sheet indices of one
/// replicate (repeats included) and returns the value or `None` when undefined.
pub fn bootstrap_sheets<F>(n_sheets: usize, cfg: &BootstrapConfig, statistic: F) -> Result<Interval>
where
    F: Fn(&[usize]) -> Option<f64>,
{
    let draws = resample_indices(n_sheets, cfg)?;
    let all: Vec<usize> = (0..n_sheets).collect();
    let reps: Vec<Option<f64>> = draws.iter().map(|d| statistic(d)).collect();
    interval_from(statistic(&all), &reps, cfg.level)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantile_by_hand() {
        // Sorted 1 2 3 4: h = 3 * 0.25 = 0.75 -> 1 + 0.75 = 1.75 (numpy.percentile(.., 25) gives 1.75).
        assert_eq!(quantile(&[4.0, 1.0, 3.0, 2.0], 0.25).unwrap(), 1.75);
        assert_eq!(quantile(&[4.0, 1.0, 3.0, 2.0], 1.0).unwrap(), 4.0);
        assert_eq!(quantile(&[7.0], 0.3).unwrap(), 7.0);
        assert!(quantile(&[], 0.5).is_err());
        assert!(quantile(&[1.0], 1.5).is_err());
    }

    #[test]
    fn seeded_and_reproducible() {
        let cfg = BootstrapConfig {
            resamples: 200,
            seed: 9,
            level: 0.9,
        };
        let vals = [0.2, 0.9, 0.4, 0.7, 0.5];
        let mean =
            |idx: &[usize]| Some(idx.iter().map(|&i| vals[i]).sum::<f64>() / idx.len() as f64);
        let a = bootstrap_sheets(vals.len(), &cfg, mean).unwrap();
        let b = bootstrap_sheets(vals.len(), &cfg, mean).unwrap();
        assert_eq!(a, b);
        let (lo, hi) = (a.lower.unwrap(), a.upper.unwrap());
        assert!(lo < a.estimate.unwrap() && a.estimate.unwrap() < hi);
        assert!(lo >= 0.2 && hi <= 0.9);
        let other =
            bootstrap_sheets(vals.len(), &BootstrapConfig { seed: 10, ..cfg }, mean).unwrap();
        assert_ne!(a, other);
    }

    #[test]
    fn draws_cover_sheets_with_repeats() {
        let draws = resample_indices(
            3,
            &BootstrapConfig {
                resamples: 300,
                seed: 1,
                level: 0.95,
            },
        )
        .unwrap();
        assert!(
            draws
                .iter()
                .all(|d| d.len() == 3 && d.iter().all(|&i| i < 3))
        );
        // Sheets are drawn with replacement: the first two draws agree with
        // probability 1/3, so among 300 replicates some repeat a sheet.
        assert!(draws.iter().any(|d| d[0] == d[1]));
        let mut seen = [0usize; 3];
        for i in draws.iter().flatten() {
            seen[*i] += 1;
        }
        assert!(seen.iter().all(|&c| c > 200), "{seen:?}");
    }

    #[test]
    fn undefined_replicates_are_counted() {
        let cfg = BootstrapConfig {
            resamples: 100,
            seed: 3,
            level: 0.95,
        };
        // Defined only when sheet 0 is drawn.
        let iv = bootstrap_sheets(4, &cfg, |idx| idx.contains(&0).then_some(1.0)).unwrap();
        assert_eq!(iv.resamples_used + iv.resamples_undefined, 100);
        assert!(iv.resamples_undefined > 0 && iv.resamples_used > 0);
        assert!(bootstrap_sheets(0, &cfg, |_| Some(1.0)).is_err());
        assert!(
            bootstrap_sheets(
                2,
                &BootstrapConfig {
                    resamples: 0,
                    ..cfg
                },
                |_| Some(1.0)
            )
            .is_err()
        );
    }
}
