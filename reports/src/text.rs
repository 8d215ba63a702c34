//! Words shared by the HTML and Markdown pages: the operating policy, the
//! matching rule, the detector, and the facts of the operating point.

use crate::tables::{pct, pct_iv, pooled_rates, rate_iv};
use symtrust_eval::matching::MatchCriterion;
use symtrust_eval::record::{DetectorInfo, EvaluationRecord};
use symtrust_eval::sheet_eval::OperatingRule;

/// The operating policy in words.
pub fn policy(rule: &OperatingRule) -> String {
    match rule {
        OperatingRule::Fixed { threshold } => format!("a fixed score threshold of {threshold}"),
        OperatingRule::F1Max => {
            "the score threshold with the best F1 (balance of precision and recall), all classes pooled"
                .into()
        }
        OperatingRule::TargetPrecision { precision } => format!(
            "the lowest score threshold whose precision, all classes pooled, is at least {}: as many symbols found as that precision allows",
            pct(Some(*precision))
        ),
        OperatingRule::TargetRecall { recall } => format!(
            "the score threshold with the best precision among those finding at least {} of the symbols, all classes pooled",
            pct(Some(*recall))
        ),
    }
}

/// The matching rule in words.
pub fn criterion(c: &MatchCriterion) -> String {
    match c {
        MatchCriterion::Iou { min_iou } => format!(
            "a detection finds a labelled symbol of its own class when the boxes overlap with IoU >= {min_iou}; the highest-scored detection takes the symbol, later ones on it are duplicates (false alarms)"
        ),
        MatchCriterion::CentreDistance { max_distance } => format!(
            "a detection finds a labelled symbol of its own class when the box centres lie at most {max_distance} pixels apart; the highest-scored detection takes the symbol, later ones on it are duplicates (false alarms)"
        ),
    }
}

/// The detector in words.
pub fn detector(d: &DetectorInfo) -> String {
    match d {
        DetectorInfo::Model {
            id, crop_library, ..
        } => {
            format!("model {id} (trained on crop library {crop_library})")
        }
        DetectorInfo::File {
            path,
            format,
            model,
            ..
        } => match model {
            Some(m) => format!("detections file {path} ({format}, model {m})"),
            None => format!("detections file {path} ({format})"),
        },
    }
}

/// The facts of the operating point and the setup, as (what, value) pairs.
pub fn operating_facts(r: &EvaluationRecord) -> Vec<(String, String)> {
    let e = &r.sheet_level;
    let iv = e.intervals.as_ref();
    let n_sheets = e.n_sheets.max(1) as f64;
    let (fa, miss) = pooled_rates(e.per_sheet.as_deref(), n_sheets);
    let mut v = vec![
        ("Detector".to_string(), detector(&r.detector)),
        (
            "Held-out sheets".into(),
            format!(
                "{} sheets, {} labelled symbols",
                e.n_sheets, e.micro.n_truths
            ),
        ),
        ("Policy".into(), policy(&e.config.operating)),
        (
            "Operating threshold".into(),
            match e.operating_threshold {
                Some(t) => format!("report a symbol when its score is at least {t:.3}"),
                None => "none: the policy cannot be met on these sheets".into(),
            },
        ),
    ];
    if e.operating_threshold.is_some() {
        v.extend([
            (
                "Precision (reports that were right)".to_string(),
                pct_iv(
                    e.operating.map(|o| o.precision),
                    iv.and_then(|i| i.precision_at_operating.as_ref()),
                ),
            ),
            (
                "Recall (labelled symbols found)".into(),
                pct_iv(
                    e.operating.map(|o| o.recall),
                    iv.and_then(|i| i.recall_at_operating.as_ref()),
                ),
            ),
            (
                "F1".into(),
                pct_iv(
                    e.operating.map(|o| o.f1),
                    iv.and_then(|i| i.f1_at_operating.as_ref()),
                ),
            ),
            (
                "False alarms per sheet".into(),
                rate_iv(fa, iv.and_then(|i| i.false_alarms_per_sheet.as_ref())),
            ),
            (
                "Misses per sheet".into(),
                rate_iv(miss, iv.and_then(|i| i.misses_per_sheet.as_ref())),
            ),
        ]);
    }
    v.extend([
        (
            "mAP (mean of class APs), all-point".to_string(),
            pct_iv(e.map_all_point, iv.map(|i| &i.map_all_point)),
        ),
        (
            "mAP, 101-point".into(),
            pct_iv(e.map_101, iv.map(|i| &i.map_101)),
        ),
    ]);
    let rp = e.config.required_precision;
    v.push((
        format!("Recall at precision >= {}", pct(Some(rp))),
        match e.micro.recall_at_precision {
            Some(o) => format!("{} at score >= {:.3}", pct(Some(o.recall)), o.threshold),
            None => "not reached".into(),
        },
    ));
    let rr = e.config.required_recall;
    v.push((
        format!("Precision at recall >= {}", pct(Some(rr))),
        match e.micro.precision_at_recall {
            Some(o) => format!("{} at score >= {:.3}", pct(Some(o.precision)), o.threshold),
            None => "not reached".into(),
        },
    ));
    v.push(("Matching".into(), criterion(&e.config.criterion)));
    if iv.is_none() && e.config.bootstrap.is_some() && e.n_sheets < 2 {
        v.push((
            "Intervals".into(),
            "none: one held-out sheet resamples only to itself, so it gives no interval".into(),
        ));
    }
    if let Some(b) = iv {
        v.push((
            "Intervals".into(),
            format!(
                "{:.0}% percentile bootstrap, {} resamples of whole sheets (seed {}); the threshold stays fixed, so they show sheet-to-sheet variation",
                100.0 * b.config.level,
                b.config.resamples,
                b.config.seed
            ),
        ));
    }
    if let Some(d) = &r.detect_settings {
        v.push((
            "Detection settings".into(),
            format!(
                "scores below {} dropped; overlapping detections with IoU above {} suppressed{}{}",
                d.min_score,
                d.nms_iou,
                if d.nms_across_classes {
                    " across classes"
                } else {
                    " within a class"
                },
                d.max_per_sheet
                    .map(|m| format!("; at most {m} per sheet"))
                    .unwrap_or_default()
            ),
        ));
    }
    v
}

/// Escapes text for HTML.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// Escapes a Markdown table cell.
pub fn md_cell(s: &str) -> String {
    s.replace('|', "\\|").replace('\n', " ")
}

/// A command line as one shell-quoted string.
pub fn command_line(args: &[String]) -> String {
    args.iter()
        .map(|a| {
            if !a.is_empty()
                && a.chars()
                    .all(|c| c.is_ascii_alphanumeric() || "-_./=:,+@".contains(c))
            {
                a.clone()
            } else {
                format!("'{}'", a.replace('\'', "'\\''"))
            }
        })
        .collect::<Vec<_>>()
        .join(" ")
}

/// `n` and the noun, singular or plural: "1 hit", "3 hits".
pub fn count(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}
