//! Sheet-level evaluation: the figures an auditor reads.
//!
//! 1. [`prepare_sheets`] ([`crate::sheets`]) checks every box, score and class, and drops ground
//!    truth and detections whose box centre lies in one of the sheet's ignore
//!    regions.
//! 2. [`sheet_outcomes`] matches each sheet on its own ([`crate::matching`]):
//!    greedy by descending score to unmatched ground truth of the same class,
//!    IoU >= 0.5 by default; duplicates are false positives.
//! 3. Per class, the detections of all sheets are pooled into one ranked list
//!    and its PR curve ([`crate::pr`]) gives AP all-point and 101-point
//!    ([`crate::ap`]), F1-max and the operating points ([`crate::operating`]).
//!
//! "Overall" is defined two ways and both are reported:
//! - **micro**: the detections of all classes pooled into one ranked list; a
//!   detection is a true positive when it found a symbol of its own class, and
//!   the recall denominator is all ground truth of all classes;
//! - **mAP**: the unweighted mean of the per-class APs over the classes that
//!   have at least one ground-truth symbol on the evaluated sheets (a class
//!   with none has undefined AP and is left out, as in COCOeval).
//!
//! The IoU sweep repeats matching at `min_iou = 0.1, 0.2, ..., 0.9`. The
//! operating threshold is chosen on the micro curve by an [`OperatingRule`];
//! at it come the detection confusion table ([`crate::confusion`]) and the
//! per-sheet table (true positives, false alarms, misses), so one bad scan
//! cannot hide in an average. Calibration ([`crate::calibration`]) treats each
//! detection's score as the probability that it is a true positive. The
//! bootstrap ([`crate::bootstrap`]) resamples whole sheets; at the operating
//! threshold it keeps the threshold fixed (chosen on all sheets), so its
//! intervals show sheet-to-sheet variation, not the uncertainty of choosing
//! the threshold.

use crate::ap::{ApFigures, mean_defined};
use crate::bootstrap::{BootstrapConfig, Interval, interval_from, resample_indices};
use crate::calibration::{Calibration, calibration};
use crate::confusion::{ConfusionTable, add_sheet_to_detection_table, empty_detection_table};
use crate::error::{EvalError, Result, in_range, setting};
use crate::matching::MatchCriterion;
use crate::operating::{OperatingPoint, f1_max, precision_at_recall, recall_at_precision};
use crate::overlaps::SheetOverlaps;
use crate::pr::{PrCurve, f1};
use crate::ranking::{ApScratch, RankedFlags, Ranking, flat_true_positives, weights_of};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

pub use crate::sheets::{
    Outcome, PreparedSheet, SheetInput, SheetOutcomes, TruthSymbol, outcomes_of, pooled_curve,
    prepare_sheets, sheet_outcomes,
};

/// Per-class all-point APs of the sheets with `weights`, and the means of the
/// per-class all-point and 101-point APs.
fn class_aps(
    ranking: &Ranking,
    flags: &RankedFlags,
    weights: &[u32],
    n_classes: usize,
    s: &mut ApScratch,
) -> (Vec<Option<f64>>, Option<f64>, Option<f64>) {
    let mut all = Vec::with_capacity(n_classes);
    let mut p101 = Vec::with_capacity(n_classes);
    for k in 0..n_classes {
        let (a, p) = ranking.ap_into(Some(k), flags, weights, s);
        all.push(a);
        p101.push(p);
    }
    let m_all = mean_defined(all.iter().copied());
    let m_101 = mean_defined(p101);
    (all, m_all, m_101)
}

/// How the operating threshold is chosen (on the micro curve).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum OperatingRule {
    /// A threshold fixed by the user.
    Fixed {
        /// Keep detections scored at or above this.
        threshold: f64,
    },
    /// The threshold maximising F1.
    F1Max,
    /// Highest recall with at least this precision.
    TargetPrecision {
        /// Required precision.
        precision: f64,
    },
    /// Highest precision with at least this recall.
    TargetRecall {
        /// Required recall.
        recall: f64,
    },
}

/// Settings of [`evaluate_sheets`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SheetEvalConfig {
    /// When a detection finds a symbol.
    pub criterion: MatchCriterion,
    /// How to pick the operating threshold.
    pub operating: OperatingRule,
    /// Recall for "precision at required recall".
    pub required_recall: f64,
    /// Precision for "recall at required precision".
    pub required_precision: f64,
    /// Bins of the reliability diagram.
    pub calibration_bins: usize,
    /// Bootstrap over sheets, or `None` to skip intervals.
    pub bootstrap: Option<BootstrapConfig>,
}

impl Default for SheetEvalConfig {
    /// IoU >= 0.5, F1-max operating point, 0.9 required recall and precision,
    /// 10 calibration bins, 1000-replicate 95 % bootstrap (common practice).
    fn default() -> Self {
        Self {
            criterion: MatchCriterion::default(),
            operating: OperatingRule::F1Max,
            required_recall: 0.9,
            required_precision: 0.9,
            calibration_bins: 10,
            bootstrap: Some(BootstrapConfig::default()),
        }
    }
}

/// The figures of one ranked list (a class, or all classes pooled).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CurveSummary {
    /// Ground-truth symbols.
    pub n_truths: u64,
    /// Detections.
    pub n_detections: u64,
    /// PR curve.
    pub pr: PrCurve,
    /// AP all-point, 101-point and step sum.
    pub ap: ApFigures,
    /// Best F1.
    pub f1_max: Option<OperatingPoint>,
    /// Precision at the required recall.
    pub precision_at_recall: Option<OperatingPoint>,
    /// Recall at the required precision.
    pub recall_at_precision: Option<OperatingPoint>,
}

fn summarise(pr: PrCurve, cfg: &SheetEvalConfig) -> Result<CurveSummary> {
    Ok(CurveSummary {
        n_truths: pr.n_positives,
        n_detections: pr.points.last().map_or(0, |p| p.tp + p.fp),
        ap: ApFigures::of(&pr),
        f1_max: f1_max(&pr),
        precision_at_recall: precision_at_recall(&pr, cfg.required_recall)?,
        recall_at_precision: recall_at_precision(&pr, cfg.required_precision)?,
        pr,
    })
}

/// One class's figures.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassSummary {
    /// Class name.
    pub class: String,
    /// Its figures.
    pub figures: CurveSummary,
}

/// One row of the IoU sweep.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct IouSweepRow {
    /// Matching threshold.
    pub min_iou: f64,
    /// Mean all-point AP over classes.
    pub map_all_point: Option<f64>,
    /// Mean 101-point AP over classes.
    pub map_101: Option<f64>,
    /// Micro all-point AP.
    pub micro_ap_all_point: Option<f64>,
}

/// One sheet at the operating threshold.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SheetRow {
    /// Sheet id.
    pub sheet: String,
    /// Ground-truth symbols (outside ignore regions).
    pub n_truths: u64,
    /// Detections kept at the threshold.
    pub n_kept: u64,
    /// Kept detections that found a symbol of their class.
    pub true_positives: u64,
    /// Kept detections that found none (includes duplicates).
    pub false_alarms: u64,
    /// Of the false alarms, duplicates of a found symbol.
    pub duplicates: u64,
    /// Symbols no kept detection found.
    pub misses: u64,
    /// `true_positives / n_kept`.
    pub precision: Option<f64>,
    /// `true_positives / n_truths`.
    pub recall: Option<f64>,
    /// Ground truth dropped by ignore regions.
    pub ignored_truths: u64,
    /// Detections dropped by ignore regions.
    pub ignored_detections: u64,
}

/// Bootstrap intervals over sheets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrustIntervals {
    /// The bootstrap settings used.
    pub config: BootstrapConfig,
    /// mAP, all-point.
    pub map_all_point: Interval,
    /// mAP, 101-point.
    pub map_101: Interval,
    /// Micro AP, all-point.
    pub micro_ap_all_point: Interval,
    /// Per-class AP, all-point, in class order.
    pub class_ap_all_point: Vec<Interval>,
    /// Micro precision at the operating threshold.
    pub precision_at_operating: Option<Interval>,
    /// Micro recall at the operating threshold.
    pub recall_at_operating: Option<Interval>,
    /// Mean false alarms per sheet at the operating threshold.
    pub false_alarms_per_sheet: Option<Interval>,
    /// Mean misses per sheet at the operating threshold.
    pub misses_per_sheet: Option<Interval>,
    /// Micro F1 at the operating threshold.
    #[serde(default)]
    pub f1_at_operating: Option<Interval>,
}

/// One class at the global operating threshold: counts, ratios, and (when the
/// bootstrap ran) their intervals over sheets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassOperating {
    /// Class name.
    pub class: String,
    /// Ground-truth symbols of this class.
    pub n_truths: u64,
    /// Detections of this class kept at the threshold.
    pub n_kept: u64,
    /// Kept detections that found a symbol of this class.
    pub true_positives: u64,
    /// Kept detections that did not.
    pub false_alarms: u64,
    /// Symbols of this class not found by a kept detection.
    pub misses: u64,
    /// `true_positives / n_kept`.
    pub precision: Option<f64>,
    /// `true_positives / n_truths`.
    pub recall: Option<f64>,
    /// Harmonic mean of the two.
    pub f1: Option<f64>,
    /// Bootstrap interval of the precision.
    pub precision_interval: Option<Interval>,
    /// Bootstrap interval of the recall.
    pub recall_interval: Option<Interval>,
    /// Bootstrap interval of the F1.
    pub f1_interval: Option<Interval>,
    /// Bootstrap interval of the false alarms per sheet.
    pub false_alarms_per_sheet: Option<Interval>,
    /// Bootstrap interval of the misses per sheet.
    pub misses_per_sheet: Option<Interval>,
}

/// Everything measured on a set of held-out sheets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SheetEvaluation {
    /// Class names, in index order.
    pub classes: Vec<String>,
    /// Number of sheets.
    pub n_sheets: u64,
    /// The settings used.
    pub config: SheetEvalConfig,
    /// Figures per class.
    pub per_class: Vec<ClassSummary>,
    /// All classes pooled.
    pub micro: CurveSummary,
    /// Mean all-point AP over classes with ground truth.
    pub map_all_point: Option<f64>,
    /// Mean 101-point AP over classes with ground truth.
    pub map_101: Option<f64>,
    /// IoU sweep 0.1 to 0.9.
    pub iou_sweep: Vec<IouSweepRow>,
    /// The threshold the tables below are computed at (`None` when the
    /// operating rule cannot be met on these sheets).
    pub operating_threshold: Option<f64>,
    /// Precision, recall and F1 there (`None` also when a fixed threshold
    /// keeps no detection, so precision is undefined).
    pub operating: Option<OperatingPoint>,
    /// Detection confusion table at the operating threshold.
    pub detection_confusion: Option<ConfusionTable>,
    /// Per-sheet table at the operating threshold.
    pub per_sheet: Option<Vec<SheetRow>>,
    /// Calibration of detection scores as P(true positive); `None` without detections.
    pub calibration: Option<Calibration>,
    /// Bootstrap intervals, when asked for.
    pub intervals: Option<TrustIntervals>,
    /// Per-class figures at the operating threshold (`None` when there is none).
    #[serde(default)]
    pub class_operating: Option<Vec<ClassOperating>>,
}

/// The operating threshold and, where defined, the point it achieves.
fn choose_operating(
    micro: &PrCurve,
    rule: &OperatingRule,
) -> Result<(Option<f64>, Option<OperatingPoint>)> {
    let point = match *rule {
        OperatingRule::Fixed { threshold } => {
            in_range(|| "operating threshold".into(), threshold, 0.0, 1.0)?;
            let point = micro
                .at_threshold(threshold)
                .filter(|_| micro.n_positives > 0)
                .map(|p| OperatingPoint {
                    threshold,
                    precision: p.precision,
                    recall: p.recall,
                    f1: f1(p.precision, p.recall),
                });
            return Ok((Some(threshold), point));
        }
        OperatingRule::F1Max => f1_max(micro),
        OperatingRule::TargetPrecision { precision } => recall_at_precision(micro, precision)?,
        OperatingRule::TargetRecall { recall } => precision_at_recall(micro, recall)?,
    };
    Ok((point.map(|p| p.threshold), point))
}

/// Counts of one sheet at a threshold: (kept, true positives, duplicates, ground truth).
fn counts_at(s: &SheetOutcomes, threshold: f64) -> (u64, u64, u64, u64) {
    let kept: Vec<&Outcome> = s.outcomes.iter().filter(|o| o.score >= threshold).collect();
    let tp = kept.iter().filter(|o| o.true_positive).count() as u64;
    let dup = kept.iter().filter(|o| o.duplicate).count() as u64;
    (kept.len() as u64, tp, dup, s.truths_per_class.iter().sum())
}

/// Counts of one sheet at a threshold for class `k`: (kept, true positives, ground truth).
fn class_counts_at(s: &SheetOutcomes, threshold: f64, k: usize) -> (u64, u64, u64) {
    let mut kept = 0;
    let mut tp = 0;
    for o in s
        .outcomes
        .iter()
        .filter(|o| o.class == k && o.score >= threshold)
    {
        kept += 1;
        tp += u64::from(o.true_positive);
    }
    (kept, tp, s.truths_per_class[k])
}

fn opt_f1(p: Option<f64>, r: Option<f64>) -> Option<f64> {
    match (p, r) {
        (Some(p), Some(r)) => Some(f1(p, r)),
        _ => None,
    }
}

/// Each sheet's (kept, true positives, ground truth) at threshold `t`, for
/// class `k` or all classes pooled (`None`).
fn sheet_counts(outcomes: &[SheetOutcomes], t: f64, k: Option<usize>) -> Vec<(u64, u64, u64)> {
    outcomes
        .iter()
        .map(|o| match k {
            Some(k) => class_counts_at(o, t, k),
            None => {
                let (a, b, _, c) = counts_at(o, t);
                (a, b, c)
            }
        })
        .collect()
}

/// Precision, recall, F1, false alarms per sheet and misses per sheet of the
/// sheets `idx`, from each sheet's [`sheet_counts`].
fn stats_at(counts: &[(u64, u64, u64)], idx: &[usize]) -> [Option<f64>; 5] {
    let (mut kept, mut tp, mut truths) = (0, 0, 0);
    for &i in idx {
        let (a, b, c) = counts[i];
        kept += a;
        tp += b;
        truths += c;
    }
    let sheets = idx.len() as f64;
    let (p, r) = (ratio(tp, kept), ratio(tp, truths));
    [
        p,
        r,
        opt_f1(p, r),
        Some((kept - tp) as f64 / sheets),
        Some((truths - tp) as f64 / sheets),
    ]
}

/// Per-class figures at threshold `t`, with intervals over the replicates
/// `draws` when `b` is given.
fn class_operating(
    outcomes: &[SheetOutcomes],
    class_names: &[String],
    t: f64,
    b: Option<&BootstrapConfig>,
    draws: &[Vec<usize>],
) -> Result<Vec<ClassOperating>> {
    let all: Vec<usize> = (0..outcomes.len()).collect();
    let mut rows = Vec::with_capacity(class_names.len());
    for (k, name) in class_names.iter().enumerate() {
        let counts = sheet_counts(outcomes, t, Some(k));
        let (mut kept, mut tp, mut truths) = (0, 0, 0);
        for &(a, p, g) in &counts {
            kept += a;
            tp += p;
            truths += g;
        }
        let est = stats_at(&counts, &all);
        let mut ivs: [Option<Interval>; 5] = Default::default();
        if let Some(b) = b {
            let mut reps: [Vec<Option<f64>>; 5] = Default::default();
            for idx in draws {
                for (j, v) in stats_at(&counts, idx).into_iter().enumerate() {
                    reps[j].push(v);
                }
            }
            for j in 0..5 {
                ivs[j] = Some(interval_from(est[j], &reps[j], b.level)?);
            }
        }
        let [pi, ri, fi, fai, mi] = ivs;
        rows.push(ClassOperating {
            class: name.clone(),
            n_truths: truths,
            n_kept: kept,
            true_positives: tp,
            false_alarms: kept - tp,
            misses: truths - tp,
            precision: est[0],
            recall: est[1],
            f1: est[2],
            precision_interval: pi,
            recall_interval: ri,
            f1_interval: fi,
            false_alarms_per_sheet: fai,
            misses_per_sheet: mi,
        });
    }
    Ok(rows)
}

fn ratio(a: u64, b: u64) -> Option<f64> {
    (b > 0).then(|| a as f64 / b as f64)
}

/// Evaluates held-out sheets (see the module comment).
pub fn evaluate_sheets(
    sheets: &[SheetInput],
    class_names: &[String],
    cfg: &SheetEvalConfig,
) -> Result<SheetEvaluation> {
    cfg.criterion.validate()?;
    in_range(|| "required recall".into(), cfg.required_recall, 0.0, 1.0)?;
    in_range(
        || "required precision".into(),
        cfg.required_precision,
        0.0,
        1.0,
    )?;
    if cfg.calibration_bins == 0 {
        return Err(setting("calibration_bins", "needs at least one bin"));
    }
    if sheets.is_empty() {
        return Err(EvalError::Empty {
            what: "held-out sheets".into(),
        });
    }
    if let Some(b) = &cfg.bootstrap {
        b.validate()?;
    }
    let n = class_names.len();
    let prepared = prepare_sheets(sheets, class_names)?;
    // The geometry of every sheet once; each IoU threshold then repeats only
    // the greedy pass ([`crate::overlaps`]), and every pooled curve is one walk
    // over one ranking ([`crate::ranking`]), point for point the curve that
    // `pooled_curve` builds.
    // Sheets, classes, IoU thresholds and bootstrap replicates are independent
    // and run in parallel; each result lands in its input-order slot, so every
    // figure is the same whatever the thread count.
    let overlaps: Vec<SheetOverlaps> = prepared.par_iter().map(SheetOverlaps::new).collect();
    let outcomes: Vec<SheetOutcomes> = match cfg.criterion {
        MatchCriterion::Iou { min_iou } => prepared
            .par_iter()
            .zip(&overlaps)
            .map(|(p, o)| o.outcomes(p, n, min_iou))
            .collect(),
        MatchCriterion::CentreDistance { .. } => prepared
            .par_iter()
            .map(|p| sheet_outcomes(p, n, &cfg.criterion))
            .collect(),
    };
    let ranking = Ranking::new(&outcomes, n);
    let true_positive = ranking.flags(&flat_true_positives(&outcomes));
    let ones = vec![1u32; outcomes.len()];

    let per_class = class_names
        .par_iter()
        .enumerate()
        .map(|(k, name)| {
            Ok(ClassSummary {
                class: name.clone(),
                figures: summarise(ranking.curve(Some(k), &true_positive, &ones), cfg)?,
            })
        })
        .collect::<Vec<Result<ClassSummary>>>()
        .into_iter()
        .collect::<Result<Vec<_>>>()?;
    let micro = summarise(ranking.curve(None, &true_positive, &ones), cfg)?;
    let map_all_point = mean_defined(per_class.iter().map(|c| c.figures.ap.all_point));
    let map_101 = mean_defined(per_class.iter().map(|c| c.figures.ap.points_101));

    let iou_sweep = (1..=9)
        .into_par_iter()
        .map(|i| {
            let min_iou = f64::from(i) / 10.0;
            let mut buf = ApScratch::default();
            let swept;
            // The row at the main IoU threshold is the main matching's.
            let flags = if cfg.criterion == (MatchCriterion::Iou { min_iou }) {
                &true_positive
            } else {
                let mut sweep_tp = Vec::with_capacity(ranking.len());
                for o in &overlaps {
                    o.push_true_positives(min_iou, &mut sweep_tp);
                }
                swept = ranking.flags(&sweep_tp);
                &swept
            };
            let (_, m_all, m_101) = class_aps(&ranking, flags, &ones, n, &mut buf);
            IouSweepRow {
                min_iou,
                map_all_point: m_all,
                map_101: m_101,
                micro_ap_all_point: ranking.ap_into(None, flags, &ones, &mut buf).0,
            }
        })
        .collect();

    let (operating_threshold, operating) = choose_operating(&micro.pr, &cfg.operating)?;
    let (detection_confusion, per_sheet) = match operating_threshold {
        Some(threshold) => {
            let mut table = empty_detection_table(class_names);
            let mut rows = Vec::with_capacity(prepared.len());
            for ((p, o), ov) in prepared.iter().zip(&outcomes).zip(&overlaps) {
                match cfg.criterion {
                    MatchCriterion::Iou { min_iou } => {
                        ov.add_to_detection_table(p, min_iou, threshold, &mut table);
                    }
                    MatchCriterion::CentreDistance { .. } => add_sheet_to_detection_table(
                        &mut table,
                        &p.truths,
                        &p.dets,
                        &cfg.criterion,
                        threshold,
                    ),
                }
                let (kept, tp, dup, n_truths) = counts_at(o, threshold);
                rows.push(SheetRow {
                    sheet: p.sheet.clone(),
                    n_truths,
                    n_kept: kept,
                    true_positives: tp,
                    false_alarms: kept - tp,
                    duplicates: dup,
                    misses: n_truths - tp,
                    precision: ratio(tp, kept),
                    recall: ratio(tp, n_truths),
                    ignored_truths: p.ignored_truths,
                    ignored_detections: p.ignored_detections,
                });
            }
            (Some(table), Some(rows))
        }
        None => (None, None),
    };

    let scored: Vec<(f64, bool)> = outcomes
        .iter()
        .flat_map(|s| s.outcomes.iter().map(|o| (o.score, o.true_positive)))
        .collect();
    let calibration = if scored.is_empty() {
        None
    } else {
        Some(calibration(&scored, cfg.calibration_bins)?)
    };

    // One sheet resamples only to itself: its "interval" would be a point
    // that says nothing, so none is given.
    let bootstrap = cfg.bootstrap.as_ref().filter(|_| outcomes.len() > 1);
    let draws = match bootstrap {
        Some(b) => resample_indices(outcomes.len(), b)?,
        None => Vec::new(),
    };
    let intervals = match bootstrap {
        Some(b) => Some(sheet_intervals(
            &outcomes,
            &Ranked {
                ranking: &ranking,
                flags: &true_positive,
            },
            &draws,
            operating_threshold,
            b,
            &micro,
            map_all_point,
            map_101,
            &per_class,
        )?),
        None => None,
    };

    let class_operating = match operating_threshold {
        Some(t) => Some(class_operating(
            &outcomes,
            class_names,
            t,
            bootstrap,
            &draws,
        )?),
        None => None,
    };

    Ok(SheetEvaluation {
        classes: class_names.to_vec(),
        n_sheets: sheets.len() as u64,
        config: cfg.clone(),
        per_class,
        micro,
        map_all_point,
        map_101,
        iou_sweep,
        operating_threshold,
        operating,
        detection_confusion,
        per_sheet,
        calibration,
        intervals,
        class_operating,
    })
}

/// The ranking of the evaluated detections and their outcomes at the main criterion.
struct Ranked<'a> {
    ranking: &'a Ranking,
    flags: &'a RankedFlags,
}

#[allow(clippy::too_many_arguments)]
fn sheet_intervals(
    outcomes: &[SheetOutcomes],
    ranked: &Ranked,
    draws: &[Vec<usize>],
    threshold: Option<f64>,
    b: &BootstrapConfig,
    micro: &CurveSummary,
    map_all: Option<f64>,
    map_101: Option<f64>,
    per_class: &[ClassSummary],
) -> Result<TrustIntervals> {
    let n = per_class.len();
    let counts = threshold.map(|t| sheet_counts(outcomes, t, None));
    // One replicate's figures: class APs, mAPs, micro AP, operating stats.
    type Replicate = (Vec<Option<f64>>, Option<f64>, Option<f64>, Option<f64>);
    let replicates: Vec<Replicate> = draws
        .par_iter()
        .map_init(ApScratch::default, |buf, idx| {
            let w = weights_of(idx, outcomes.len());
            let (aps, m_all, m_101) = class_aps(ranked.ranking, ranked.flags, &w, n, buf);
            let micro = ranked.ranking.ap_into(None, ranked.flags, &w, buf).0;
            (aps, m_all, m_101, micro)
        })
        .collect();
    let mut r_map_all = Vec::with_capacity(draws.len());
    let mut r_map_101 = Vec::with_capacity(draws.len());
    let mut r_micro = Vec::with_capacity(draws.len());
    let mut r_class = vec![Vec::with_capacity(draws.len()); n];
    let mut r_op: [Vec<Option<f64>>; 5] = Default::default();
    for ((aps, m_all, m_101, micro), idx) in replicates.into_iter().zip(draws) {
        r_map_all.push(m_all);
        r_map_101.push(m_101);
        for (k, a) in aps.into_iter().enumerate() {
            r_class[k].push(a);
        }
        r_micro.push(micro);
        if let Some(c) = &counts {
            for (j, v) in stats_at(c, idx).into_iter().enumerate() {
                r_op[j].push(v);
            }
        }
    }
    let all: Vec<usize> = (0..outcomes.len()).collect();
    let op_estimate = counts.map(|c| stats_at(&c, &all));
    let op = |j: usize| -> Result<Option<Interval>> {
        match op_estimate {
            Some(e) => Ok(Some(interval_from(e[j], &r_op[j], b.level)?)),
            None => Ok(None),
        }
    };
    Ok(TrustIntervals {
        config: *b,
        map_all_point: interval_from(map_all, &r_map_all, b.level)?,
        map_101: interval_from(map_101, &r_map_101, b.level)?,
        micro_ap_all_point: interval_from(micro.ap.all_point, &r_micro, b.level)?,
        class_ap_all_point: per_class
            .iter()
            .zip(&r_class)
            .map(|(c, r)| interval_from(c.figures.ap.all_point, r, b.level))
            .collect::<Result<_>>()?,
        precision_at_operating: op(0)?,
        recall_at_operating: op(1)?,
        f1_at_operating: op(2)?,
        false_alarms_per_sheet: op(3)?,
        misses_per_sheet: op(4)?,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use symtrust_labels::BBox;
    use symtrust_labels::detections::Detection;

    fn det(sheet: &str, class: &str, score: f64, x: f64, y: f64) -> Detection {
        Detection {
            sheet: sheet.into(),
            class: class.into(),
            score,
            x,
            y,
            w: 10.0,
            h: 10.0,
        }
    }

    fn truth(class: &str, x: f64, y: f64) -> TruthSymbol {
        TruthSymbol {
            class: class.into(),
            bbox: BBox::new(x, y, 10.0, 10.0),
        }
    }

    fn names() -> Vec<String> {
        vec!["valve".into(), "pump".into()]
    }

    /// Two sheets worked by hand (numbers in the comments below).
    fn sheets() -> Vec<SheetInput> {
        vec![
            SheetInput {
                sheet: "a".into(),
                truths: vec![
                    truth("valve", 0.0, 0.0),
                    truth("valve", 100.0, 0.0),
                    truth("pump", 200.0, 0.0),
                    truth("valve", 520.0, 520.0),
                ],
                detections: vec![
                    det("a", "valve", 0.9, 0.0, 0.0),      // finds valve 1
                    det("a", "valve", 0.8, 1.0, 0.0),      // duplicate of valve 1
                    det("a", "pump", 0.7, 200.0, 0.0),     // finds the pump
                    det("a", "valve", 0.6, 300.0, 0.0),    // background
                    det("a", "valve", 0.95, 530.0, 530.0), // inside the ignore region
                ],
                ignore: vec![BBox::new(500.0, 500.0, 100.0, 100.0)],
            },
            SheetInput {
                sheet: "b".into(),
                truths: vec![truth("pump", 0.0, 0.0)],
                detections: vec![
                    det("b", "pump", 0.85, 0.0, 0.0),
                    det("b", "valve", 0.5, 0.0, 0.0),
                ],
                ignore: vec![],
            },
        ]
    }

    #[test]
    fn worked_example() {
        let cfg = SheetEvalConfig {
            bootstrap: None,
            ..SheetEvalConfig::default()
        };
        let e = evaluate_sheets(&sheets(), &names(), &cfg).unwrap();
        // Valve: 2 symbols (one ignored), ranked T F F F -> P/R (1, .5), (.5, .5),
        // (1/3, .5), (.25, .5): all-point AP 0.5, 101-point 51/101 (levels 0..0.50).
        let v = &e.per_class[0].figures;
        assert_eq!((v.n_truths, v.n_detections), (2, 4));
        assert_eq!(v.ap.all_point, Some(0.5));
        assert!((v.ap.points_101.unwrap() - 51.0 / 101.0).abs() < 1e-12);
        // Pump: 2 symbols, both found first: AP 1.
        assert_eq!(e.per_class[1].figures.ap.all_point, Some(1.0));
        assert_eq!(e.map_all_point, Some(0.75));
        // Micro: 4 symbols, ranked .9T .85T .8F .7T .6F .5F; envelope 1 to recall
        // .5, then .75 to recall .75: AP = .5 + .25 * .75 = 0.6875.
        assert_eq!(e.micro.ap.all_point, Some(0.6875));
        // F1 at 0.7 is .75 (P = R = .75), the best.
        let op = e.operating.unwrap();
        assert_eq!((op.threshold, op.precision, op.recall), (0.7, 0.75, 0.75));
        // Per class at 0.7: valve keeps .9 (found) and .8 (duplicate) of its 2
        // symbols -> P = R = .5, 1 false alarm, 1 miss; pump keeps .85 and .7,
        // both found -> P = R = 1.
        let co = e.class_operating.as_ref().unwrap();
        assert_eq!(
            (
                co[0].n_kept,
                co[0].true_positives,
                co[0].false_alarms,
                co[0].misses
            ),
            (2, 1, 1, 1)
        );
        assert_eq!(
            (co[0].precision, co[0].recall, co[0].f1),
            (Some(0.5), Some(0.5), Some(0.5))
        );
        assert_eq!(
            (co[1].precision, co[1].recall, co[1].f1),
            (Some(1.0), Some(1.0), Some(1.0))
        );
        assert!(co[0].precision_interval.is_none());
        // Per sheet at 0.7.
        let rows = e.per_sheet.as_ref().unwrap();
        let a = &rows[0];
        assert_eq!(
            (
                a.n_truths,
                a.n_kept,
                a.true_positives,
                a.false_alarms,
                a.duplicates,
                a.misses
            ),
            (3, 3, 2, 1, 1, 1)
        );
        assert_eq!((a.ignored_truths, a.ignored_detections), (1, 1));
        let b = &rows[1];
        assert_eq!(
            (
                b.n_truths,
                b.n_kept,
                b.true_positives,
                b.false_alarms,
                b.misses
            ),
            (1, 1, 1, 0, 0)
        );
        // Detection confusion at 0.7: rows valve, pump, none; columns valve, pump, missed.
        let t = e.detection_confusion.as_ref().unwrap();
        assert_eq!(t.counts, vec![vec![1, 0, 1], vec![0, 2, 0], vec![1, 0, 0]]);
        // Precision at recall >= 0.9 is never reached; recall at precision >= 0.9 is 0.5 at 0.85.
        assert_eq!(e.micro.precision_at_recall, None);
        assert_eq!(e.micro.recall_at_precision.unwrap().threshold, 0.85);
        // The sweep's IoU 0.5 row repeats the main figures; matched afresh
        // under another main criterion, it still gives them.
        let half = e.iou_sweep.iter().find(|r| r.min_iou == 0.5).unwrap();
        assert_eq!(half.map_all_point, e.map_all_point);
        assert_eq!(e.iou_sweep.len(), 9);
        let other = SheetEvalConfig {
            criterion: MatchCriterion::Iou { min_iou: 0.3 },
            ..cfg.clone()
        };
        let o = evaluate_sheets(&sheets(), &names(), &other).unwrap();
        assert_eq!(o.iou_sweep, e.iou_sweep);
        // Scores as P(true positive): 6 scored detections, 3 true.
        assert_eq!(e.calibration.as_ref().unwrap().n, 6);
    }

    #[test]
    fn one_sheet_gets_no_interval() {
        let one = &sheets()[..1];
        let e = evaluate_sheets(one, &names(), &SheetEvalConfig::default()).unwrap();
        assert!(e.intervals.is_none());
        let rows = e.class_operating.unwrap();
        assert!(
            rows.iter()
                .all(|r| r.precision_interval.is_none() && r.recall_interval.is_none())
        );
        let two = evaluate_sheets(&sheets(), &names(), &SheetEvalConfig::default()).unwrap();
        assert!(two.intervals.is_some());
    }

    #[test]
    fn thread_count_does_not_matter() {
        let run = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| evaluate_sheets(&sheets(), &names(), &SheetEvalConfig::default()))
                .unwrap()
        };
        let one = run(1);
        assert!(one.intervals.is_some());
        assert_eq!(one, run(3));
    }

    #[test]
    fn sheet_order_does_not_matter() {
        let cfg = SheetEvalConfig {
            bootstrap: None,
            ..SheetEvalConfig::default()
        };
        let a = evaluate_sheets(&sheets(), &names(), &cfg).unwrap();
        let mut rev = sheets();
        rev.reverse();
        let b = evaluate_sheets(&rev, &names(), &cfg).unwrap();
        assert_eq!(a.per_class, b.per_class);
        assert_eq!(a.micro, b.micro);
        assert_eq!(a.iou_sweep, b.iou_sweep);
        assert_eq!(a.detection_confusion, b.detection_confusion);
    }

    #[test]
    fn unmet_operating_rule_leaves_tables_out() {
        let cfg = SheetEvalConfig {
            bootstrap: None,
            operating: OperatingRule::TargetRecall { recall: 1.0 },
            ..SheetEvalConfig::default()
        };
        let e = evaluate_sheets(&sheets(), &names(), &cfg).unwrap();
        assert!(e.operating.is_none() && e.per_sheet.is_none() && e.detection_confusion.is_none());
        let cfg = SheetEvalConfig {
            bootstrap: None,
            operating: OperatingRule::Fixed { threshold: 0.0 },
            ..SheetEvalConfig::default()
        };
        let e = evaluate_sheets(&sheets(), &names(), &cfg).unwrap();
        let op = e.operating.unwrap();
        assert_eq!((op.precision, op.recall), (0.5, 0.75));
        // A fixed threshold above every score: precision undefined, but the
        // per-sheet table still shows every symbol missed.
        let cfg = SheetEvalConfig {
            operating: OperatingRule::Fixed { threshold: 0.99 },
            ..cfg
        };
        let e = evaluate_sheets(&sheets(), &names(), &cfg).unwrap();
        assert_eq!((e.operating_threshold, e.operating), (Some(0.99), None));
        let rows = e.per_sheet.unwrap();
        assert_eq!(rows.iter().map(|r| r.misses).sum::<u64>(), 4);
        assert!(rows.iter().all(|r| r.precision.is_none() && r.n_kept == 0));
        assert_eq!(e.detection_confusion.unwrap().counts[2], vec![0, 0, 0]);
    }

    #[test]
    fn a_sheet_drawn_twice_counts_twice() {
        let prepared = prepare_sheets(&sheets(), &names()).unwrap();
        let o: Vec<SheetOutcomes> = prepared
            .iter()
            .map(|p| sheet_outcomes(p, 2, &MatchCriterion::default()))
            .collect();
        let once = pooled_curve(&o, &[0], None);
        let twice = pooled_curve(&o, &[0, 0], None);
        assert_eq!(twice.n_positives, 2 * once.n_positives);
        assert_eq!(twice.points.len(), once.points.len());
        for (p, q) in once.points.iter().zip(&twice.points) {
            assert_eq!(
                (2 * p.tp, 2 * p.fp, p.precision, p.recall),
                (q.tp, q.fp, q.precision, q.recall)
            );
        }
        // A multiset of different sheets is not the same as one of them doubled.
        assert_ne!(pooled_curve(&o, &[0, 1], None), twice);
    }

    #[test]
    fn intervals_are_seeded_and_well_formed() {
        let cfg = SheetEvalConfig {
            bootstrap: Some(BootstrapConfig {
                resamples: 300,
                seed: 5,
                level: 0.9,
            }),
            ..SheetEvalConfig::default()
        };
        let e = evaluate_sheets(&sheets(), &names(), &cfg).unwrap();
        let again = evaluate_sheets(&sheets(), &names(), &cfg).unwrap();
        assert_eq!(e.intervals, again.intervals);
        let iv = e.intervals.unwrap();
        for i in [
            iv.map_all_point,
            iv.micro_ap_all_point,
            iv.precision_at_operating.unwrap(),
            iv.misses_per_sheet.unwrap(),
        ] {
            assert_eq!(i.resamples_used + i.resamples_undefined, 300);
            assert!(i.lower.unwrap() <= i.upper.unwrap());
        }
        // Two sheets: replicates are {a,a}, {a,b}, {b,b}; the mAP is always defined
        // because both sheets hold pumps, and the micro AP spans its extremes.
        assert_eq!(iv.map_all_point.resamples_undefined, 0);
        // Sheet b alone has micro AP 1 (pump found, the valve a false alarm at a lower score).
        assert_eq!(iv.micro_ap_all_point.upper, Some(1.0));
        // Pump precision at 0.7 is 1 on every replicate (each pump detection kept
        // is a hit), so its interval collapses to 1; valve precision on {b,b} is
        // undefined (no valve detection above 0.7 on sheet b).
        let co = e.class_operating.as_ref().unwrap();
        let pump = co[1].precision_interval.as_ref().unwrap();
        assert_eq!((pump.lower, pump.upper), (Some(1.0), Some(1.0)));
        let valve = co[0].precision_interval.as_ref().unwrap();
        assert_eq!(valve.resamples_used + valve.resamples_undefined, 300);
        assert!(valve.resamples_undefined > 0);
        assert!(iv.f1_at_operating.as_ref().unwrap().estimate == Some(0.75));
    }

    #[test]
    fn bad_input_is_named() {
        let cfg = SheetEvalConfig {
            bootstrap: None,
            ..SheetEvalConfig::default()
        };
        let mut s = sheets();
        s[1].detections[1].class = "reducer".into();
        let msg = evaluate_sheets(&s, &names(), &cfg).unwrap_err().to_string();
        assert!(
            msg.contains("sheet \"b\", detection #1") && msg.contains("reducer"),
            "{msg}"
        );
        let mut s = sheets();
        s[1].detections[0].sheet = "a".into();
        assert!(matches!(
            evaluate_sheets(&s, &names(), &cfg),
            Err(EvalError::WrongSheet { index: 0, .. })
        ));
        let mut s = sheets();
        s[1].sheet = "a".into();
        for d in &mut s[1].detections {
            d.sheet = "a".into();
        }
        assert!(matches!(
            evaluate_sheets(&s, &names(), &cfg),
            Err(EvalError::DuplicateSheet { .. })
        ));
        let mut s = sheets();
        s[0].detections[2].score = f64::NAN;
        let msg = evaluate_sheets(&s, &names(), &cfg).unwrap_err().to_string();
        assert!(msg.contains("detection #2, score"), "{msg}");
        let mut s = sheets();
        s[0].truths[0].bbox.w = 0.0;
        assert!(evaluate_sheets(&s, &names(), &cfg).is_err());
        assert!(evaluate_sheets(&[], &names(), &cfg).is_err());
        let bad = SheetEvalConfig {
            criterion: MatchCriterion::Iou { min_iou: 0.0 },
            ..cfg
        };
        assert!(evaluate_sheets(&sheets(), &names(), &bad).is_err());
    }
}
