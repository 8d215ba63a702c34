//! The plain-language trust statement at the top of every evaluation and
//! report, written from the figures alone, and the caution that goes with it.

use crate::bootstrap::Interval;
use crate::sheet_eval::{OperatingRule, SheetEvaluation};

/// The caution every evaluation and report carries.
pub const CAUTION: &str = "Automated symbol detection supports, and does not replace, review by \
qualified people under the site's procedures and local codes. A missed safety instrument on a \
drawing is not found by any figure here; check the sheets.";

fn pct(v: f64) -> String {
    format!("{:.0}%", 100.0 * v)
}

fn pct_range(iv: Option<&Interval>) -> String {
    match iv.and_then(|i| Some((i.lower?, i.upper?, i.level))) {
        Some((lo, hi, _)) => format!(" ({}-{})", pct(lo).trim_end_matches('%'), pct(hi)),
        None => String::new(),
    }
}

fn per_sheet(v: f64) -> String {
    if v < 0.05 {
        "almost no".to_string()
    } else if v < 10.0 {
        format!("about {v:.1}")
    } else {
        format!("about {v:.0}")
    }
}

fn policy(rule: &OperatingRule) -> String {
    match rule {
        OperatingRule::Fixed { threshold } => format!("a fixed threshold of {threshold}"),
        OperatingRule::F1Max => "the threshold with the best F1".to_string(),
        OperatingRule::TargetPrecision { precision } => {
            format!(
                "the highest recall with precision at least {}",
                pct(*precision)
            )
        }
        OperatingRule::TargetRecall { recall } => {
            format!(
                "the highest precision with recall at least {}",
                pct(*recall)
            )
        }
    }
}

/// The trust statement (one paragraph) for an evaluation; `detector` names
/// what was evaluated (e.g. "the detector" or "model 20261201T101500-3fa2c1d0").
pub fn trust_statement(e: &SheetEvaluation, detector: &str) -> String {
    let n_truths = e.micro.n_truths;
    let sheets = if e.n_sheets == 1 {
        "1 held-out sheet".to_string()
    } else {
        format!("{} held-out sheets", e.n_sheets)
    };
    let head = format!("On {sheets} with {n_truths} labelled symbols");
    let (Some(t), Some(op)) = (e.operating_threshold, e.operating.as_ref()) else {
        return format!(
            "{head}, no score threshold achieves {} for {detector}, so no operating point is \
             reported; do not use its output without reviewing every sheet.",
            policy(&e.config.operating)
        );
    };
    // One sheet resamples to itself: its "interval" is a point and says nothing.
    let iv = e.intervals.as_ref().filter(|_| e.n_sheets > 1);
    let level = iv.map(|i| i.config.level);
    let rows = e.per_sheet.as_deref().unwrap_or(&[]);
    let n = rows.len().max(1) as f64;
    let fa = rows.iter().map(|r| r.false_alarms).sum::<u64>() as f64 / n;
    let miss = rows.iter().map(|r| r.misses).sum::<u64>() as f64 / n;
    let mut s = format!(
        "{head}, at score >= {t:.3} ({}) {detector} found {}{} of the symbols, and {}{} of what \
         it reported was right; expect {} false alarms and {} misses per sheet.",
        policy(&e.config.operating),
        pct(op.recall),
        pct_range(iv.and_then(|i| i.recall_at_operating.as_ref())),
        pct(op.precision),
        pct_range(iv.and_then(|i| i.precision_at_operating.as_ref())),
        per_sheet(fa),
        per_sheet(miss),
    );
    if let Some(weakest) = e
        .class_operating
        .as_deref()
        .unwrap_or(&[])
        .iter()
        .filter(|c| c.n_truths > 0)
        .filter_map(|c| Some((c, c.recall?)))
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .filter(|(_, r)| *r < op.recall)
    {
        s.push_str(&format!(
            " The weakest class is {}: {} of its {} symbols found{}.",
            weakest.0.class,
            pct(weakest.1),
            weakest.0.n_truths,
            pct_range(
                weakest
                    .0
                    .recall_interval
                    .as_ref()
                    .filter(|_| e.n_sheets > 1)
            ),
        ));
    }
    if let Some(worst) = rows
        .iter()
        .max_by_key(|r| (r.false_alarms + r.misses, r.sheet.clone()))
        && worst.false_alarms + worst.misses > 0
        && rows.len() > 1
    {
        s.push_str(&format!(
            " The worst sheet is {} ({} false alarms, {} misses).",
            worst.sheet, worst.false_alarms, worst.misses
        ));
    }
    match level {
        _ if e.n_sheets < 2 => {
            s.push_str(" One sheet gives no interval: evaluate on more held-out sheets before trusting these figures.");
            return s;
        }
        Some(l) => s.push_str(&format!(
            " Ranges are {}% bootstrap intervals over whole sheets",
            (100.0 * l).round()
        )),
        None => s.push_str(" No intervals were computed"),
    }
    if e.n_sheets < 10 {
        s.push_str(
            "; with fewer than 10 sheets the intervals are rough (a zero-width one only means every resample agreed) and the figures may not hold on other sheets.",
        );
    } else {
        s.push('.');
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sheet_eval::{SheetEvalConfig, SheetInput, TruthSymbol, evaluate_sheets};
    use symtrust_labels::BBox;
    use symtrust_labels::detections::Detection;

    fn sheet(id: &str, found: usize, missed: usize, false_alarms: usize) -> SheetInput {
        let mut truths = Vec::new();
        let mut detections = Vec::new();
        for i in 0..found + missed {
            let x = 100.0 * i as f64;
            truths.push(TruthSymbol {
                class: "valve".into(),
                bbox: BBox::new(x, 0.0, 10.0, 10.0),
            });
            if i < found {
                detections.push(Detection {
                    sheet: id.into(),
                    class: "valve".into(),
                    score: 0.9,
                    x,
                    y: 0.0,
                    w: 10.0,
                    h: 10.0,
                });
            }
        }
        for i in 0..false_alarms {
            detections.push(Detection {
                sheet: id.into(),
                class: "valve".into(),
                score: 0.8,
                x: 100.0 * i as f64,
                y: 500.0,
                w: 10.0,
                h: 10.0,
            });
        }
        SheetInput {
            sheet: id.into(),
            truths,
            detections,
            ignore: vec![],
        }
    }

    #[test]
    fn statement_reads_the_figures() {
        // Two sheets: 8 of 10 and 9 of 10 valves found at 0.9, plus 2 false
        // alarms at 0.8 on the first. F1 at 0.9: P = 1, R = 17/20 = .85 ->
        // F1 .919; at 0.8: P = 17/19, R = .85 -> F1 .872. So t = 0.9, no false
        // alarms kept, 1.5 misses per sheet.
        let sheets = vec![sheet("p-01", 8, 2, 2), sheet("p-02", 9, 1, 0)];
        let cfg = SheetEvalConfig {
            bootstrap: None,
            ..SheetEvalConfig::default()
        };
        let e = evaluate_sheets(&sheets, &["valve".to_string()], &cfg).unwrap();
        let s = trust_statement(&e, "the detector");
        assert!(
            s.starts_with("On 2 held-out sheets with 20 labelled symbols, at score >= 0.900"),
            "{s}"
        );
        assert!(s.contains("found 85% of the symbols"), "{s}");
        assert!(s.contains("100% of what it reported was right"), "{s}");
        assert!(
            s.contains("expect almost no false alarms and about 1.5 misses per sheet"),
            "{s}"
        );
        assert!(
            s.contains("The worst sheet is p-01 (0 false alarms, 2 misses)"),
            "{s}"
        );
        assert!(s.contains("No intervals were computed"), "{s}");
    }

    #[test]
    fn one_sheet_claims_no_interval() {
        let sheets = vec![sheet("p-01", 8, 2, 1)];
        let e =
            evaluate_sheets(&sheets, &["valve".to_string()], &SheetEvalConfig::default()).unwrap();
        assert!(e.intervals.is_none(), "one sheet resamples only to itself");
        let s = trust_statement(&e, "the detector");
        assert!(s.contains("found 80% of the symbols,"), "{s}");
        assert!(s.contains("One sheet gives no interval"), "{s}");
        assert!(!s.contains("bootstrap"), "{s}");
    }

    #[test]
    fn intervals_are_quoted_with_several_sheets() {
        let sheets: Vec<SheetInput> = (0..4)
            .map(|i| sheet(&format!("p-{i}"), 6 + i, 4 - i, 0))
            .collect();
        let e =
            evaluate_sheets(&sheets, &["valve".to_string()], &SheetEvalConfig::default()).unwrap();
        let s = trust_statement(&e, "the detector");
        // 6+7+8+9 = 30 of 40 found, no false alarms: recall 75%, precision 100%.
        let iv = e
            .intervals
            .as_ref()
            .unwrap()
            .recall_at_operating
            .as_ref()
            .unwrap();
        let range = format!(
            "found 75% ({:.0}-{:.0}%)",
            100.0 * iv.lower.unwrap(),
            100.0 * iv.upper.unwrap()
        );
        assert!(s.contains(&range), "{s} / {range}");
        assert!(iv.lower.unwrap() < 0.75 && iv.upper.unwrap() > 0.75);
        assert!(
            s.contains(
                "Ranges are 95% bootstrap intervals over whole sheets; with fewer than 10 sheets the intervals are rough"
            ),
            "{s}"
        );
    }

    #[test]
    fn unmet_policy_says_so() {
        let sheets = vec![sheet("p-01", 1, 1, 3)];
        let cfg = SheetEvalConfig {
            bootstrap: None,
            operating: OperatingRule::TargetPrecision { precision: 1.0 },
            ..SheetEvalConfig::default()
        };
        let e = evaluate_sheets(&sheets, &["valve".to_string()], &cfg).unwrap();
        // Precision 1 is reached at 0.9 (one hit, no false alarm above it).
        assert_eq!(e.operating_threshold, Some(0.9));
        let strict = SheetEvalConfig {
            operating: OperatingRule::TargetRecall { recall: 1.0 },
            ..cfg
        };
        let e = evaluate_sheets(&sheets, &["valve".to_string()], &strict).unwrap();
        assert!(
            e.operating.is_none(),
            "recall 1 is unreachable: one symbol is never detected"
        );
        let s = trust_statement(&e, "the detector");
        assert!(
            s.contains(
                "no score threshold achieves the highest precision with recall at least 100%"
            ),
            "{s}"
        );
    }
}
