//! Comparing a challenger model with the champion on the same frozen sheets.
//!
//! **Paired bootstrap of the AP difference.** Each replicate draws the sheet
//! indices once (with replacement, [`crate::bootstrap`]) and computes both
//! models' AP on that same multiset of sheets; the replicate value is
//! `AP_challenger - AP_champion`, per class and for the mAP. Pairing removes
//! the sheet-to-sheet variation the two models share, so the interval of the
//! difference is much narrower than the two separate intervals suggest.
//!
//! **McNemar's test** on paired crop decisions (each crop judged right or wrong
//! by each model). With `b` = crops only the champion gets right and `c` =
//! crops only the challenger gets right, under "equally good" `b ~ Bin(b + c, 1/2)`.
//! When `b + c < exact_below` (default 25, common practice) the exact two-sided
//! binomial p-value `min(1, 2 P(K <= min(b, c)))` is used (what
//! `scipy.stats.binomtest(b, b + c, 0.5)` returns); otherwise the chi-square
//! statistic with continuity correction `(|b - c| - 1)^2 / (b + c)` on one
//! degree of freedom.
//!
//! **Verdict** with margin `m` per class, from the interval `[lo, hi]` of the
//! AP difference (challenger minus champion):
//! - [`VerdictRule::NonInferiority`] (default): a class passes only when
//!   `lo >= -m`, i.e. the data show the challenger loses at most `m`;
//! - [`VerdictRule::NoSignificantLoss`]: a class fails only when `hi < -m`,
//!   i.e. the data show the challenger loses more than `m`.
//!
//! A class without ground truth on the sheets cannot be judged and is listed
//! as such; it neither passes nor fails the challenger.

use crate::ap::mean_defined;
use crate::bootstrap::{BootstrapConfig, Interval, interval_from, resample_indices};
use crate::error::{EvalError, Result, in_range};
use crate::ranking::{ApScratch, RankedFlags, Ranking, flat_true_positives, weights_of};
use crate::sheets::SheetOutcomes;
use crate::special::{binomial_half_cdf, chi2_sf_1dof};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Which AP the comparison uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ApKind {
    /// All-point interpolated (Pascal VOC 2010 on).
    #[default]
    AllPoint,
    /// 101-point (COCO).
    Points101,
}

/// The AP difference of one class (or of the mAP).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ApDifference {
    /// Class name, or `None` for the mAP.
    pub class: Option<String>,
    /// Champion's AP on all sheets.
    pub champion: Option<f64>,
    /// Challenger's AP on all sheets.
    pub challenger: Option<f64>,
    /// Challenger minus champion, with its paired bootstrap interval.
    pub difference: Interval,
}

/// The paired bootstrap comparison.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PairedApComparison {
    /// AP definition used.
    pub ap_kind: ApKind,
    /// Bootstrap settings.
    pub config: BootstrapConfig,
    /// Per class, in class order.
    pub per_class: Vec<ApDifference>,
    /// The mAP.
    pub map: ApDifference,
}

/// Per-class APs of `kind` over the sheets with `weights`, and their mean.
fn aps(
    side: &Side,
    weights: &[u32],
    n: usize,
    kind: ApKind,
    s: &mut ApScratch,
) -> (Vec<Option<f64>>, Option<f64>) {
    let v: Vec<Option<f64>> = (0..n)
        .map(|k| {
            let (all_point, points_101) = side.ranking.ap_into(Some(k), &side.flags, weights, s);
            match kind {
                ApKind::AllPoint => all_point,
                ApKind::Points101 => points_101,
            }
        })
        .collect();
    let m = mean_defined(v.iter().copied());
    (v, m)
}

/// One model's detections ranked once ([`crate::ranking`]): each replicate's
/// pooled curve is then a walk with a weight per sheet, point for point the
/// curve `pooled_curve` builds.
struct Side {
    ranking: Ranking,
    flags: RankedFlags,
}

impl Side {
    fn new(sheets: &[SheetOutcomes], n: usize) -> Self {
        let ranking = Ranking::new(sheets, n);
        let flags = ranking.flags(&flat_true_positives(sheets));
        Self { ranking, flags }
    }
}

fn diff(a: Option<f64>, b: Option<f64>) -> Option<f64> {
    Some(b? - a?)
}

/// Paired bootstrap of the AP difference; both sides must list the same sheets
/// in the same order, matched with the same criterion.
pub fn paired_bootstrap_ap(
    champion: &[SheetOutcomes],
    challenger: &[SheetOutcomes],
    class_names: &[String],
    ap_kind: ApKind,
    cfg: &BootstrapConfig,
) -> Result<PairedApComparison> {
    for i in 0..champion.len().max(challenger.len()) {
        let l = champion.get(i).map_or("<none>", |s| s.sheet.as_str());
        let r = challenger.get(i).map_or("<none>", |s| s.sheet.as_str());
        if l != r {
            return Err(EvalError::SheetsDiffer {
                position: i,
                left: l.into(),
                right: r.into(),
            });
        }
    }
    let n = class_names.len();
    for (what, side) in [("champion", champion), ("challenger", challenger)] {
        if let Some(s) = side.iter().find(|s| s.truths_per_class.len() != n) {
            return Err(EvalError::LengthMismatch {
                what: format!(
                    "{what}, sheet {:?}: ground-truth counts (one per class)",
                    s.sheet
                ),
                expected: n,
                got: s.truths_per_class.len(),
            });
        }
    }
    let draws = resample_indices(champion.len(), cfg)?;
    let (a, b) = (Side::new(champion, n), Side::new(challenger, n));
    let mut scratch = ApScratch::default();
    let ones = vec![1u32; champion.len()];
    let (a_cls, a_map) = aps(&a, &ones, n, ap_kind, &mut scratch);
    let (b_cls, b_map) = aps(&b, &ones, n, ap_kind, &mut scratch);
    // Replicates run in parallel and land in draw order.
    let replicates: Vec<(Vec<Option<f64>>, Option<f64>)> = draws
        .par_iter()
        .map_init(ApScratch::default, |s, idx| {
            let w = weights_of(idx, champion.len());
            let (ac, am) = aps(&a, &w, n, ap_kind, s);
            let (bc, bm) = aps(&b, &w, n, ap_kind, s);
            let cls = ac.into_iter().zip(bc).map(|(x, y)| diff(x, y)).collect();
            (cls, diff(am, bm))
        })
        .collect();
    let mut reps_cls = vec![Vec::with_capacity(draws.len()); n];
    let mut reps_map = Vec::with_capacity(draws.len());
    for (cls, map) in replicates {
        for (k, d) in cls.into_iter().enumerate() {
            reps_cls[k].push(d);
        }
        reps_map.push(map);
    }
    let per_class = (0..n)
        .map(|k| {
            Ok(ApDifference {
                class: Some(class_names[k].clone()),
                champion: a_cls[k],
                challenger: b_cls[k],
                difference: interval_from(diff(a_cls[k], b_cls[k]), &reps_cls[k], cfg.level)?,
            })
        })
        .collect::<Result<_>>()?;
    Ok(PairedApComparison {
        ap_kind,
        config: *cfg,
        per_class,
        map: ApDifference {
            class: None,
            champion: a_map,
            challenger: b_map,
            difference: interval_from(diff(a_map, b_map), &reps_map, cfg.level)?,
        },
    })
}

/// Which McNemar computation was used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum McNemarMethod {
    /// Exact two-sided binomial test on the discordant pairs.
    ExactBinomial,
    /// Chi-square on one degree of freedom with continuity correction.
    ChiSquareCorrected,
}

/// McNemar's test on paired crop decisions.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct McNemarResult {
    /// Crops both models get right.
    pub both_right: u64,
    /// Crops only the champion gets right (`b`).
    pub champion_only: u64,
    /// Crops only the challenger gets right (`c`).
    pub challenger_only: u64,
    /// Crops both get wrong.
    pub both_wrong: u64,
    /// How the p-value was computed.
    pub method: McNemarMethod,
    /// The chi-square statistic (`None` for the exact test).
    pub statistic: Option<f64>,
    /// Two-sided p-value.
    pub p_value: f64,
}

/// McNemar's test; `exact_below` is the discordant count under which the exact
/// binomial test is used (25 is common practice).
pub fn mcnemar(
    champion_right: &[bool],
    challenger_right: &[bool],
    exact_below: u64,
) -> Result<McNemarResult> {
    if champion_right.len() != challenger_right.len() {
        return Err(EvalError::LengthMismatch {
            what: "challenger crop decisions (one per champion decision)".into(),
            expected: champion_right.len(),
            got: challenger_right.len(),
        });
    }
    let mut t = [0u64; 4];
    for (&a, &b) in champion_right.iter().zip(challenger_right) {
        t[usize::from(a) * 2 + usize::from(b)] += 1;
    }
    let (both_wrong, challenger_only, champion_only, both_right) = (t[0], t[1], t[2], t[3]);
    let (b, c) = (champion_only, challenger_only);
    let n = b + c;
    let (method, statistic, p_value) = if n < exact_below {
        let p = if n == 0 {
            1.0
        } else {
            (2.0 * binomial_half_cdf(b.min(c), n)).min(1.0)
        };
        (McNemarMethod::ExactBinomial, None, p)
    } else {
        // The textbook statistic, unclamped: b = c gives 1 / (b + c), not 0
        // (statsmodels' corrected McNemar computes it the same way, from memory).
        let x = ((b as f64 - c as f64).abs() - 1.0).powi(2) / n as f64;
        (McNemarMethod::ChiSquareCorrected, Some(x), chi2_sf_1dof(x))
    };
    Ok(McNemarResult {
        both_right,
        champion_only,
        challenger_only,
        both_wrong,
        method,
        statistic,
        p_value,
    })
}

/// How a class's AP-difference interval is judged against the margin.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum VerdictRule {
    /// Pass only when the lower end is `>= -margin`.
    #[default]
    NonInferiority,
    /// Fail only when the upper end is `< -margin`.
    NoSignificantLoss,
}

/// The judgement on one class.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ClassJudgement {
    /// Not worse beyond the margin.
    NotWorse,
    /// Worse beyond the margin (by the rule in force).
    Worse,
    /// No ground truth of this class on the sheets.
    NoData,
}

/// One line of the verdict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VerdictLine {
    /// Class name.
    pub class: String,
    /// Lower end of the AP difference interval.
    pub lower: Option<f64>,
    /// Upper end.
    pub upper: Option<f64>,
    /// The judgement.
    pub judgement: ClassJudgement,
}

/// Whether the challenger may replace the champion.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Verdict {
    /// Margin of AP a class may lose.
    pub margin: f64,
    /// Rule applied.
    pub rule: VerdictRule,
    /// True when no class is judged worse.
    pub promote: bool,
    /// Per-class lines.
    pub lines: Vec<VerdictLine>,
}

/// "Not significantly worse on any class beyond margin `m`" (see module comment).
pub fn verdict(cmp: &PairedApComparison, margin: f64, rule: VerdictRule) -> Result<Verdict> {
    in_range(|| "verdict margin".into(), margin, 0.0, 1.0)?;
    let lines: Vec<VerdictLine> = cmp
        .per_class
        .iter()
        .map(|d| {
            let (lo, hi) = (d.difference.lower, d.difference.upper);
            let judgement = match (d.difference.estimate, lo, hi) {
                (Some(_), Some(lo), Some(hi)) => {
                    let worse = match rule {
                        VerdictRule::NonInferiority => lo < -margin,
                        VerdictRule::NoSignificantLoss => hi < -margin,
                    };
                    if worse {
                        ClassJudgement::Worse
                    } else {
                        ClassJudgement::NotWorse
                    }
                }
                _ => ClassJudgement::NoData,
            };
            VerdictLine {
                class: d.class.clone().unwrap_or_default(),
                lower: lo,
                upper: hi,
                judgement,
            }
        })
        .collect();
    Ok(Verdict {
        margin,
        rule,
        promote: lines.iter().all(|l| l.judgement != ClassJudgement::Worse),
        lines,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sheet_eval::Outcome;

    fn sheet(id: &str, truths: u64, ranked: &[bool]) -> SheetOutcomes {
        SheetOutcomes {
            sheet: id.into(),
            truths_per_class: vec![truths],
            outcomes: ranked
                .iter()
                .enumerate()
                .map(|(i, &tp)| Outcome {
                    class: 0,
                    score: 0.99 - i as f64 * 0.01,
                    true_positive: tp,
                    duplicate: false,
                })
                .collect(),
        }
    }

    /// Both models' APs recomputed the plain way (pool the drawn sheets, sort,
    /// build the curve) for every replicate of the same draws.
    fn by_pooling(
        a: &[SheetOutcomes],
        b: &[SheetOutcomes],
        n: usize,
        kind: ApKind,
        cfg: &BootstrapConfig,
    ) -> (Vec<Vec<Option<f64>>>, Vec<Option<f64>>) {
        use crate::ap::ApFigures;
        use crate::sheets::pooled_curve;
        let pick = |f: ApFigures| match kind {
            ApKind::AllPoint => f.all_point,
            ApKind::Points101 => f.points_101,
        };
        let aps = |s: &[SheetOutcomes], idx: &[usize]| {
            let v: Vec<Option<f64>> = (0..n)
                .map(|k| pick(ApFigures::of(&pooled_curve(s, idx, Some(k)))))
                .collect();
            let m = mean_defined(v.iter().copied());
            (v, m)
        };
        let mut cls = vec![Vec::new(); n];
        let mut map = Vec::new();
        for idx in resample_indices(a.len(), cfg).unwrap() {
            let ((ac, am), (bc, bm)) = (aps(a, &idx), aps(b, &idx));
            for k in 0..n {
                cls[k].push(diff(ac[k], bc[k]));
            }
            map.push(diff(am, bm));
        }
        (cls, map)
    }

    proptest::proptest! {
        #[test]
        fn same_intervals_as_pooling_every_replicate(
            sheets in proptest::collection::vec(
                (
                    proptest::collection::vec((0usize..2, 0u8..6, proptest::bool::ANY, proptest::bool::ANY), 0..10),
                    0u64..3,
                    0u64..3,
                ),
                1..5,
            ),
            points_101 in proptest::bool::ANY,
        ) {
            // Coarse scores give ties within and across sheets; each side
            // reads its own true-positive flag.
            let side = |which: usize| -> Vec<SheetOutcomes> {
                sheets
                    .iter()
                    .enumerate()
                    .map(|(i, (o, x, y))| {
                        let outcomes: Vec<Outcome> = o
                            .iter()
                            .map(|&(class, sc, t0, t1)| Outcome {
                                class,
                                score: f64::from(sc) / 5.0,
                                true_positive: if which == 0 { t0 } else { t1 },
                                duplicate: false,
                            })
                            .collect();
                        let tp = |k: usize| outcomes.iter().filter(|o| o.class == k && o.true_positive).count() as u64;
                        SheetOutcomes {
                            sheet: format!("s{i}"),
                            truths_per_class: vec![tp(0) + x, tp(1) + y],
                            outcomes,
                        }
                    })
                    .collect()
            };
            let (a, b) = (side(0), side(1));
            let kind = if points_101 { ApKind::Points101 } else { ApKind::AllPoint };
            let cfg = BootstrapConfig { resamples: 40, ..BootstrapConfig::default() };
            let names = ["valve".to_string(), "pump".to_string()];
            let got = paired_bootstrap_ap(&a, &b, &names, kind, &cfg).unwrap();
            let (cls, map) = by_pooling(&a, &b, 2, kind, &cfg);
            let all: Vec<usize> = (0..a.len()).collect();
            let want_map = {
                let (mut one, mut two) = (Vec::new(), Vec::new());
                for k in 0..2 {
                    let f = |s: &[SheetOutcomes]| crate::ap::ApFigures::of(&crate::sheets::pooled_curve(s, &all, Some(k)));
                    let (fa, fb) = (f(&a), f(&b));
                    one.push(if points_101 { fa.points_101 } else { fa.all_point });
                    two.push(if points_101 { fb.points_101 } else { fb.all_point });
                }
                diff(mean_defined(one), mean_defined(two))
            };
            proptest::prop_assert_eq!(
                got.map.difference,
                interval_from(want_map, &map, cfg.level).unwrap()
            );
            for (ia, reps) in got.per_class.iter().zip(&cls) {
                let want = interval_from(diff(ia.champion, ia.challenger), reps, cfg.level).unwrap();
                proptest::prop_assert_eq!(ia.difference, want);
            }
        }
    }

    #[test]
    fn identical_models_differ_by_exactly_zero() {
        let s: Vec<SheetOutcomes> = (0..6)
            .map(|i| sheet(&format!("s{i}"), 3, &[true, i % 2 == 0, true, false]))
            .collect();
        let cfg = BootstrapConfig {
            resamples: 100,
            seed: 4,
            level: 0.95,
        };
        let c = paired_bootstrap_ap(&s, &s, &["valve".into()], ApKind::AllPoint, &cfg).unwrap();
        assert_eq!(c.map.difference.lower, Some(0.0));
        assert_eq!(c.map.difference.upper, Some(0.0));
        let v = verdict(&c, 0.0, VerdictRule::NonInferiority).unwrap();
        assert!(v.promote);
    }

    #[test]
    fn a_clearly_worse_challenger_is_rejected() {
        let good: Vec<SheetOutcomes> = (0..8)
            .map(|i| sheet(&format!("s{i}"), 2, &[true, true, false]))
            .collect();
        let bad: Vec<SheetOutcomes> = (0..8)
            .map(|i| sheet(&format!("s{i}"), 2, &[false, false, true]))
            .collect();
        let cfg = BootstrapConfig {
            resamples: 200,
            seed: 1,
            level: 0.95,
        };
        let c =
            paired_bootstrap_ap(&good, &bad, &["valve".into()], ApKind::Points101, &cfg).unwrap();
        assert!(c.map.difference.upper.unwrap() < -0.3);
        for rule in [VerdictRule::NonInferiority, VerdictRule::NoSignificantLoss] {
            let v = verdict(&c, 0.05, rule).unwrap();
            assert!(!v.promote);
            assert_eq!(v.lines[0].judgement, ClassJudgement::Worse);
        }
        // The better model replacing the worse one passes.
        let c =
            paired_bootstrap_ap(&bad, &good, &["valve".into()], ApKind::AllPoint, &cfg).unwrap();
        assert!(
            verdict(&c, 0.0, VerdictRule::NonInferiority)
                .unwrap()
                .promote
        );
    }

    #[test]
    fn sheets_must_pair_up() {
        let a = vec![sheet("s1", 1, &[true])];
        let b = vec![sheet("s2", 1, &[true])];
        let cfg = BootstrapConfig {
            resamples: 10,
            seed: 1,
            level: 0.95,
        };
        let msg = paired_bootstrap_ap(&a, &b, &["valve".into()], ApKind::AllPoint, &cfg)
            .unwrap_err()
            .to_string();
        assert!(msg.contains("s1") && msg.contains("s2"), "{msg}");
    }

    #[test]
    fn mcnemar_by_hand() {
        // b = 1, c = 5: exact, p = 2 * (1 + 6) / 64 = 0.21875 (hand calculation).
        let a = [true, false, false, false, false, false, true];
        let b = [false, true, true, true, true, true, true];
        let r = mcnemar(&a, &b, 25).unwrap();
        assert_eq!(
            (
                r.champion_only,
                r.challenger_only,
                r.both_right,
                r.both_wrong
            ),
            (1, 5, 1, 0)
        );
        assert_eq!(r.method, McNemarMethod::ExactBinomial);
        assert!((r.p_value - 0.21875).abs() < 1e-15);
        // Forced chi-square: (|1 - 5| - 1)^2 / 6 = 1.5.
        let r = mcnemar(&a, &b, 0).unwrap();
        assert_eq!(r.statistic, Some(1.5));
        assert!(mcnemar(&a, &b[..3], 25).is_err());
        assert_eq!(mcnemar(&[true], &[true], 25).unwrap().p_value, 1.0);
    }
}
