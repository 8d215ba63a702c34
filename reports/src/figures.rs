//! Every figure of a report, built from the evaluation record(s).

use crate::error::Result;
use crate::load::LoadedEvaluation;
use crate::plot::bars::{Bar, BarsDrawn, BarsPlot};
use crate::plot::heatmap::HeatmapPlot;
use crate::plot::lines::{LinePanel, LineSeries, LinesDrawn, LinesPlot};
use crate::plot::pr::{IntervalBox, PrDrawn, PrPanel, PrPlot, PrSeries};
use crate::plot::reliability::{DrawnBin, ReliabilityCurve, ReliabilityDrawn, ReliabilityPlot};
use crate::plot::{Drawn, Figure, render};
use crate::tables::ranked_sheets;
use symtrust_eval::bootstrap::Interval;
use symtrust_eval::calibration::Calibration;
use symtrust_eval::matching::MatchCriterion;
use symtrust_eval::pr::PrCurve;
use symtrust_eval::record::EvaluationRecord;

/// Most sheets shown in the ranking chart (the table lists all).
pub const MAX_RANKED_SHEETS: usize = 30;

fn points(pr: &PrCurve) -> Vec<(f64, f64)> {
    pr.points.iter().map(|p| (p.recall, p.precision)).collect()
}

fn interval_box(p: Option<&Interval>, r: Option<&Interval>) -> Option<IntervalBox> {
    Some(IntervalBox {
        recall_lower: r?.lower?,
        recall_upper: r?.upper?,
        precision_lower: p?.lower?,
        precision_upper: p?.upper?,
    })
}

fn level_text(r: &EvaluationRecord) -> String {
    match &r.sheet_level.intervals {
        Some(i) => format!(
            "The shaded box around it spans the {:.0}% bootstrap interval (whole sheets resampled {} times) of recall (width) and precision (height) at that threshold.",
            100.0 * i.config.level,
            i.config.resamples
        ),
        None => "No bootstrap was run, so no interval box is drawn.".into(),
    }
}

/// PR curves, one panel per class plus all classes pooled.
pub fn pr_curves(r: &EvaluationRecord) -> Result<Figure> {
    let e = &r.sheet_level;
    let iv = e.intervals.as_ref();
    let mut panels = vec![PrPanel {
        title: format!(
            "All classes pooled: AP {}",
            crate::tables::pct(e.micro.ap.all_point)
        ),
        series: vec![PrSeries {
            name: "all classes".into(),
            points: points(&e.micro.pr),
            operating: e.operating.map(|o| (o.recall, o.precision)),
            interval: interval_box(
                iv.and_then(|i| i.precision_at_operating.as_ref()),
                iv.and_then(|i| i.recall_at_operating.as_ref()),
            ),
        }],
        note: (e.micro.n_truths == 0).then(|| "no labelled symbols".to_string()),
    }];
    let ops = e.class_operating.as_deref().unwrap_or(&[]);
    for c in &e.per_class {
        let op = ops.iter().find(|o| o.class == c.class);
        let operating = op.and_then(|o| Some((o.recall?, o.precision?)));
        panels.push(PrPanel {
            title: format!(
                "{}: AP {} ({} symbols)",
                c.class,
                crate::tables::pct(c.figures.ap.all_point),
                c.figures.n_truths
            ),
            series: vec![PrSeries {
                name: c.class.clone(),
                points: points(&c.figures.pr),
                operating,
                interval: op.and_then(|o| {
                    interval_box(o.precision_interval.as_ref(), o.recall_interval.as_ref())
                }),
            }],
            note: if c.figures.n_truths == 0 {
                Some("no labelled symbols of this class".into())
            } else if c.figures.n_detections == 0 {
                Some("no detections of this class".into())
            } else {
                None
            },
        });
    }
    let plot = PrPlot {
        panels,
        columns: 2,
        panel_size: (430, 360),
    };
    let (svg, png, placed) = render("pr-curves", &plot)?;
    let caption = match e.operating_threshold {
        Some(t) => format!(
            "Each line is precision against recall as the score threshold is lowered, one panel per class. The black ringed dot is the operating point: detections scored at least {t:.3}, the same threshold for every class, giving the precision and recall in the per-class table. {}",
            level_text(r)
        ),
        None => "Each line is precision against recall as the score threshold is lowered, one panel per class. No operating point is marked: the operating rule cannot be met on these sheets.".into(),
    };
    Ok(Figure {
        id: "pr-curves".into(),
        title: "Precision-recall curves per class".into(),
        caption,
        svg,
        png,
        drawn: Drawn::Pr(PrDrawn {
            panels: plot.panels,
            placed,
        }),
    })
}

/// PR curves of several evaluations (all classes pooled) overlaid.
pub fn side_by_side_pr(evals: &[&LoadedEvaluation]) -> Result<Figure> {
    let series = evals
        .iter()
        .map(|ev| {
            let e = &ev.record.sheet_level;
            let iv = e.intervals.as_ref();
            PrSeries {
                name: ev.title.clone(),
                points: points(&e.micro.pr),
                operating: e.operating.map(|o| (o.recall, o.precision)),
                interval: interval_box(
                    iv.and_then(|i| i.precision_at_operating.as_ref()),
                    iv.and_then(|i| i.recall_at_operating.as_ref()),
                ),
            }
        })
        .collect();
    let plot = PrPlot {
        panels: vec![PrPanel {
            title: "All classes pooled, each evaluation on its own held-out sheets".into(),
            series,
            note: None,
        }],
        columns: 1,
        panel_size: (640, 520),
    };
    let (svg, png, placed) = render("side-by-side-pr", &plot)?;
    Ok(Figure {
        id: "side-by-side-pr".into(),
        title: "Precision-recall side by side".into(),
        caption: "One line per evaluation (colour, line pattern and marks differ), all classes pooled. The ringed dot on each line is that evaluation's operating point; the shaded box, where drawn, is its bootstrap interval of recall (width) and precision (height).".into(),
        svg,
        png,
        drawn: Drawn::Pr(PrDrawn {
            panels: plot.panels,
            placed,
        }),
    })
}

/// The detection confusion table as a heat map.
pub fn detection_confusion(r: &EvaluationRecord) -> Result<Option<Figure>> {
    let Some(c) = &r.sheet_level.detection_confusion else {
        return Ok(None);
    };
    let plot = HeatmapPlot::new(
        c.rows.clone(),
        c.columns.clone(),
        c.counts.clone(),
        "Labelled as (none: no symbol there)",
        "Reported as (missed: not found)",
    );
    let (svg, png, _) = render("detection-confusion", &plot)?;
    Ok(Some(Figure {
        id: "detection-confusion".into(),
        title: "Detection confusion at the operating threshold".into(),
        caption: format!(
            "Rows: what the label says; columns: what the detector reported, at score >= {:.3}. The number in each cell is a count of symbols or detections; the shade is that count's share of its row (darker = larger share). Outlined cells are correct (same class). Row \"none\" counts false alarms on no symbol; column \"missed\" counts symbols nothing found.",
            r.sheet_level.operating_threshold.unwrap_or(0.0)
        ),
        svg,
        png,
        drawn: Drawn::Heatmap(plot.table),
    }))
}

/// The crop-level confusion table as a heat map (model runs only).
pub fn crop_confusion(r: &EvaluationRecord) -> Result<Option<Figure>> {
    let Some(cl) = &r.crop_level else {
        return Ok(None);
    };
    let c = &cl.evaluation.confusion;
    let plot = HeatmapPlot::new(
        c.rows.clone(),
        c.columns.clone(),
        c.counts.clone(),
        "True class of the crop",
        "Class the model chose",
    );
    let (svg, png, _) = render("crop-confusion", &plot)?;
    Ok(Some(Figure {
        id: "crop-confusion".into(),
        title: "Crop-level confusion".into(),
        caption: format!(
            "{} windows cut from the held-out sheets, each classified on its own (highest probability wins). The number is a count of crops; the shade is its share of the row. Accuracy {}.",
            cl.evaluation.n_crops,
            crate::tables::pct(cl.evaluation.accuracy)
        ),
        svg,
        png,
        drawn: Drawn::Heatmap(plot.table),
    }))
}

fn curve(name: &str, c: &Calibration) -> ReliabilityCurve {
    ReliabilityCurve {
        name: format!("{name}: ECE {:.1}%, Brier {:.3}", 100.0 * c.ece, c.brier),
        ece: c.ece,
        brier: c.brier,
        bins: c
            .bins
            .iter()
            .map(|b| DrawnBin {
                lower: b.lower,
                upper: b.upper,
                count: b.count,
                mean_score: b.mean_score,
                observed: b.observed,
            })
            .collect(),
    }
}

/// The reliability diagram (before and after calibration when one was fitted).
pub fn reliability(r: &EvaluationRecord) -> Result<Option<Figure>> {
    let curves = match (&r.calibration_fit, &r.sheet_level.calibration) {
        (Some(fit), _) => vec![
            curve("raw scores", &fit.held_out_raw),
            curve("after Platt scaling", &fit.held_out_scaled),
        ],
        (None, Some(c)) => vec![curve("detection scores", c)],
        (None, None) => return Ok(None),
    };
    let plot = ReliabilityPlot { curves };
    let (svg, png, placed) = render("reliability", &plot)?;
    let fitted = if r.calibration_fit.is_some() {
        " Two curves: the raw scores and the same scores after the Platt scaling fitted on validation sheets."
    } else {
        ""
    };
    Ok(Some(Figure {
        id: "reliability".into(),
        title: "Reliability of the scores".into(),
        caption: format!(
            "Each detection's score read as the chance that it is right. Top: per score bin, the mean score against the share of detections that found a symbol of their class; points on the dashed diagonal mean a score of 80% is right 80% of the time. Bottom: detections per bin. ECE is the count-weighted mean gap between the two (0 is perfect); the Brier score is the mean squared error of the scores (0 is perfect).{fitted}"
        ),
        svg,
        png,
        drawn: Drawn::Reliability(ReliabilityDrawn {
            curves: plot.curves,
            placed,
        }),
    }))
}

/// AP against the IoU required for a match.
pub fn iou_sweep(r: &EvaluationRecord) -> Result<Figure> {
    let sw = &r.sheet_level.iou_sweep;
    let series = vec![
        LineSeries {
            name: "mAP, all-point".into(),
            points: sw.iter().map(|s| (s.min_iou, s.map_all_point)).collect(),
        },
        LineSeries {
            name: "mAP, 101-point".into(),
            points: sw.iter().map(|s| (s.min_iou, s.map_101)).collect(),
        },
        LineSeries {
            name: "all classes pooled, all-point".into(),
            points: sw
                .iter()
                .map(|s| (s.min_iou, s.micro_ap_all_point))
                .collect(),
        },
    ];
    let marker = match r.sheet_level.config.criterion {
        MatchCriterion::Iou { min_iou } => Some((min_iou, format!("used: IoU >= {min_iou}"))),
        MatchCriterion::CentreDistance { .. } => None,
    };
    let plot = LinesPlot {
        panels: vec![LinePanel {
            title: "Average precision against the overlap required".into(),
            x_desc: "Smallest IoU that counts as a match (box overlap, 0-1)".into(),
            y_desc: "Average precision (%)".into(),
            x_range: (0.05, 0.95),
            y_range: (0.0, 1.0001),
            y_percent: true,
            series,
            marker,
            legend_low: true,
            x_whole: false,
        }],
        panel_size: (720, 420),
    };
    let (svg, png, placed) = render("iou-sweep", &plot)?;
    Ok(Figure {
        id: "iou-sweep".into(),
        title: "IoU sweep".into(),
        caption: "Matching repeated with the required box overlap (intersection over union) from 0.1 to 0.9. A curve that falls early means the boxes are found but placed loosely.".into(),
        svg,
        png,
        drawn: Drawn::Lines(LinesDrawn {
            panels: plot.panels,
            placed,
        }),
    })
}

/// Sheets ranked by errors (worst on top).
pub fn sheet_errors(r: &EvaluationRecord) -> Result<Option<Figure>> {
    if r.sheet_level.per_sheet.is_none() {
        return Ok(None);
    }
    let bars: Vec<Bar> = ranked_sheets(r)
        .into_iter()
        .take(MAX_RANKED_SHEETS)
        .map(|s| Bar {
            sheet: s.sheet,
            misses: s.misses,
            false_alarms: s.false_alarms,
        })
        .collect();
    let n = bars.len();
    let plot = BarsPlot { bars };
    let (svg, png, placed) = render("sheet-errors", &plot)?;
    let more = r
        .sheet_level
        .per_sheet
        .as_ref()
        .map_or(0, Vec::len)
        .saturating_sub(n);
    Ok(Some(Figure {
        id: "sheet-errors".into(),
        title: "Sheets ranked by errors".into(),
        caption: format!(
            "One bar per held-out sheet, worst on top, at the operating threshold: solid magenta = missed symbols, hatched orange = false alarms.{}",
            if more > 0 {
                format!(" The {more} sheets with fewest errors are in the table only.")
            } else {
                String::new()
            }
        ),
        svg,
        png,
        drawn: Drawn::Bars(BarsDrawn {
            bars: plot.bars,
            placed,
        }),
    }))
}

/// The training curves of the model, when its log was found.
pub fn training(ev: &LoadedEvaluation) -> Result<Option<Figure>> {
    let Some(rows) = &ev.training else {
        return Ok(None);
    };
    if rows.is_empty() {
        return Ok(None);
    }
    let last = rows.iter().map(|r| r.epoch).max().unwrap_or(1) as f64;
    let x_range = (0.5, last + 0.5);
    let max_loss = rows
        .iter()
        .flat_map(|r| [r.train_loss, r.val_loss])
        .filter(|v| v.is_finite())
        .fold(0.0f64, f64::max)
        .max(1e-6);
    let ep = |f: fn(&crate::load::EpochRow) -> f64| -> Vec<(f64, Option<f64>)> {
        rows.iter()
            .map(|r| (f64::from(r.epoch), Some(f(r)).filter(|v| v.is_finite())))
            .collect()
    };
    let plot = LinesPlot {
        panels: vec![
            LinePanel {
                title: "Loss".into(),
                x_desc: "Epoch (passes over the crop library)".into(),
                y_desc: "Cross-entropy loss (nats per crop)".into(),
                x_range,
                y_range: (0.0, max_loss * 1.1),
                y_percent: false,
                series: vec![
                    LineSeries {
                        name: "training".into(),
                        points: ep(|r| r.train_loss),
                    },
                    LineSeries {
                        name: "validation".into(),
                        points: ep(|r| r.val_loss),
                    },
                ],
                marker: None,
                legend_low: false,
                x_whole: true,
            },
            LinePanel {
                title: "Validation crops".into(),
                x_desc: "Epoch (passes over the crop library)".into(),
                y_desc: "Share of validation crops (%)".into(),
                x_range,
                y_range: (0.0, 1.0001),
                y_percent: true,
                series: vec![
                    LineSeries {
                        name: "accuracy".into(),
                        points: ep(|r| r.val_accuracy),
                    },
                    LineSeries {
                        name: "macro F1".into(),
                        points: ep(|r| r.val_macro_f1),
                    },
                ],
                marker: None,
                legend_low: true,
                x_whole: true,
            },
        ],
        panel_size: (400, 360),
    };
    let (svg, png, placed) = render("training", &plot)?;
    Ok(Some(Figure {
        id: "training".into(),
        title: "Training curves".into(),
        caption: format!(
            "From the model's training log ({} epochs). Left: loss on the training crops and on the validation crops; validation loss rising while training loss falls means over-fitting. Right: accuracy and macro F1 on the validation crops (crops, not whole sheets).",
            rows.len()
        ),
        svg,
        png,
        drawn: Drawn::Lines(LinesDrawn {
            panels: plot.panels,
            placed,
        }),
    }))
}
