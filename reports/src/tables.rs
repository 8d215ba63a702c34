//! The tables of a report, each built twice from the record: for people
//! (percentages, intervals; HTML and Markdown) and for machines (full-precision
//! numbers; the CSV files under `tables/`).

use crate::error::{ReportError, Result};
use std::path::Path;
use symtrust_eval::bootstrap::Interval;
use symtrust_eval::confusion::ConfusionTable;
use symtrust_eval::record::EvaluationRecord;
use symtrust_eval::sheet_eval::SheetRow;

/// A table: a header and rows of cells.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    /// File stem of the CSV, and HTML id.
    pub id: String,
    /// Column titles.
    pub header: Vec<String>,
    /// Rows.
    pub rows: Vec<Vec<String>>,
}

impl Table {
    fn new(id: &str, header: &[&str]) -> Self {
        Self {
            id: id.into(),
            header: header.iter().map(|h| h.to_string()).collect(),
            rows: Vec::new(),
        }
    }

    /// The table as CSV.
    pub fn to_csv(&self) -> Result<Vec<u8>> {
        let mut w = csv::Writer::from_writer(Vec::new());
        let bad = |e: csv::Error| ReportError::input(Path::new(&self.id), e.to_string());
        w.write_record(&self.header).map_err(bad)?;
        for r in &self.rows {
            w.write_record(r).map_err(bad)?;
        }
        w.into_inner()
            .map_err(|e| ReportError::input(Path::new(&self.id), e.to_string()))
    }
}

/// `0.912` as `"91.2%"`; `None` as an en dash (undefined).
pub fn pct(v: Option<f64>) -> String {
    match v {
        Some(v) => format!("{:.1}%", 100.0 * v),
        None => "–".into(),
    }
}

/// A percentage with its interval, e.g. `"91.2% (85.0–95.1)"`.
pub fn pct_iv(v: Option<f64>, iv: Option<&Interval>) -> String {
    let mut s = pct(v);
    if let Some((lo, hi)) = iv.and_then(|i| Some((i.lower?, i.upper?))) {
        s.push_str(&format!(" ({:.1}–{:.1})", 100.0 * lo, 100.0 * hi));
    }
    s
}

/// A per-sheet rate with its interval, e.g. `"1.50 (0.50–2.50)"`.
pub fn rate_iv(v: Option<f64>, iv: Option<&Interval>) -> String {
    let mut s = match v {
        Some(v) => format!("{v:.2}"),
        None => "–".into(),
    };
    if let Some((lo, hi)) = iv.and_then(|i| Some((i.lower?, i.upper?))) {
        s.push_str(&format!(" ({lo:.2}–{hi:.2})"));
    }
    s
}

fn raw(v: Option<f64>) -> String {
    v.map(|v| v.to_string()).unwrap_or_default()
}

fn lo(iv: Option<&Interval>) -> String {
    raw(iv.and_then(|i| i.lower))
}

fn hi(iv: Option<&Interval>) -> String {
    raw(iv.and_then(|i| i.upper))
}

/// Per class at the operating point, for people. The last row pools all classes.
pub fn per_class_display(r: &EvaluationRecord) -> Table {
    let e = &r.sheet_level;
    let level = e
        .intervals
        .as_ref()
        .map(|i| format!(" ({:.0}% interval)", 100.0 * i.config.level))
        .unwrap_or_default();
    let mut t = Table::new("per-class", &[]);
    t.header = vec![
        "Class".into(),
        "Symbols".into(),
        format!("AP all-point{level}"),
        "AP 101-point".into(),
        format!("Precision{level}"),
        format!("Recall{level}"),
        format!("F1{level}"),
        format!("False alarms per sheet{level}"),
        format!("Misses per sheet{level}"),
    ];
    let n_sheets = e.n_sheets.max(1) as f64;
    let ops = e.class_operating.as_deref().unwrap_or(&[]);
    for (k, c) in e.per_class.iter().enumerate() {
        let ap_iv = e
            .intervals
            .as_ref()
            .and_then(|i| i.class_ap_all_point.get(k));
        let op = ops.iter().find(|o| o.class == c.class);
        t.rows.push(vec![
            c.class.clone(),
            c.figures.n_truths.to_string(),
            pct_iv(c.figures.ap.all_point, ap_iv),
            pct(c.figures.ap.points_101),
            op.map_or("–".into(), |o| {
                pct_iv(o.precision, o.precision_interval.as_ref())
            }),
            op.map_or("–".into(), |o| {
                pct_iv(o.recall, o.recall_interval.as_ref())
            }),
            op.map_or("–".into(), |o| pct_iv(o.f1, o.f1_interval.as_ref())),
            op.map_or("–".into(), |o| {
                rate_iv(
                    Some(o.false_alarms as f64 / n_sheets),
                    o.false_alarms_per_sheet.as_ref(),
                )
            }),
            op.map_or("–".into(), |o| {
                rate_iv(
                    Some(o.misses as f64 / n_sheets),
                    o.misses_per_sheet.as_ref(),
                )
            }),
        ]);
    }
    let iv = e.intervals.as_ref();
    let (fa, miss) = pooled_rates(e.per_sheet.as_deref(), n_sheets);
    t.rows.push(vec![
        "All classes pooled".into(),
        e.micro.n_truths.to_string(),
        pct_iv(e.micro.ap.all_point, iv.map(|i| &i.micro_ap_all_point)),
        pct(e.micro.ap.points_101),
        pct_iv(
            e.operating.map(|o| o.precision),
            iv.and_then(|i| i.precision_at_operating.as_ref()),
        ),
        pct_iv(
            e.operating.map(|o| o.recall),
            iv.and_then(|i| i.recall_at_operating.as_ref()),
        ),
        pct_iv(
            e.operating.map(|o| o.f1),
            iv.and_then(|i| i.f1_at_operating.as_ref()),
        ),
        rate_iv(fa, iv.and_then(|i| i.false_alarms_per_sheet.as_ref())),
        rate_iv(miss, iv.and_then(|i| i.misses_per_sheet.as_ref())),
    ]);
    t
}

/// Mean false alarms and misses per sheet from the per-sheet table.
pub fn pooled_rates(rows: Option<&[SheetRow]>, n_sheets: f64) -> (Option<f64>, Option<f64>) {
    match rows {
        Some(rows) => (
            Some(rows.iter().map(|r| r.false_alarms).sum::<u64>() as f64 / n_sheets),
            Some(rows.iter().map(|r| r.misses).sum::<u64>() as f64 / n_sheets),
        ),
        None => (None, None),
    }
}

/// Per class, for machines.
pub fn per_class_csv(r: &EvaluationRecord) -> Table {
    let e = &r.sheet_level;
    let mut t = Table::new(
        "per_class",
        &[
            "class",
            "symbols",
            "detections",
            "ap_all_point",
            "ap_all_point_lower",
            "ap_all_point_upper",
            "ap_101_point",
            "threshold",
            "kept",
            "true_positives",
            "false_alarms",
            "misses",
            "precision",
            "precision_lower",
            "precision_upper",
            "recall",
            "recall_lower",
            "recall_upper",
            "f1",
            "f1_lower",
            "f1_upper",
            "false_alarms_per_sheet",
            "false_alarms_per_sheet_lower",
            "false_alarms_per_sheet_upper",
            "misses_per_sheet",
            "misses_per_sheet_lower",
            "misses_per_sheet_upper",
        ],
    );
    let n_sheets = e.n_sheets.max(1) as f64;
    let ops = e.class_operating.as_deref().unwrap_or(&[]);
    for (k, c) in e.per_class.iter().enumerate() {
        let ap_iv = e
            .intervals
            .as_ref()
            .and_then(|i| i.class_ap_all_point.get(k));
        let op = ops.iter().find(|o| o.class == c.class);
        let mut row = vec![
            c.class.clone(),
            c.figures.n_truths.to_string(),
            c.figures.n_detections.to_string(),
            raw(c.figures.ap.all_point),
            lo(ap_iv),
            hi(ap_iv),
            raw(c.figures.ap.points_101),
            raw(e.operating_threshold),
        ];
        match op {
            Some(o) => row.extend([
                o.n_kept.to_string(),
                o.true_positives.to_string(),
                o.false_alarms.to_string(),
                o.misses.to_string(),
                raw(o.precision),
                lo(o.precision_interval.as_ref()),
                hi(o.precision_interval.as_ref()),
                raw(o.recall),
                lo(o.recall_interval.as_ref()),
                hi(o.recall_interval.as_ref()),
                raw(o.f1),
                lo(o.f1_interval.as_ref()),
                hi(o.f1_interval.as_ref()),
                (o.false_alarms as f64 / n_sheets).to_string(),
                lo(o.false_alarms_per_sheet.as_ref()),
                hi(o.false_alarms_per_sheet.as_ref()),
                (o.misses as f64 / n_sheets).to_string(),
                lo(o.misses_per_sheet.as_ref()),
                hi(o.misses_per_sheet.as_ref()),
            ]),
            None => row.extend(std::iter::repeat_n(String::new(), 19)),
        }
        t.rows.push(row);
    }
    t
}

/// Sheets ranked by errors at the operating point (worst first; ties by id).
pub fn ranked_sheets(r: &EvaluationRecord) -> Vec<SheetRow> {
    let mut rows = r.sheet_level.per_sheet.clone().unwrap_or_default();
    rows.sort_by(|a, b| {
        (b.false_alarms + b.misses)
            .cmp(&(a.false_alarms + a.misses))
            .then(b.misses.cmp(&a.misses))
            .then(a.sheet.cmp(&b.sheet))
    });
    rows
}

/// Per sheet, worst first, for people.
pub fn per_sheet_display(r: &EvaluationRecord) -> Table {
    let mut t = Table::new(
        "per-sheet",
        &[
            "Sheet",
            "Symbols",
            "Reported",
            "Found",
            "False alarms",
            "of which duplicates",
            "Misses",
            "Precision",
            "Recall",
            "Not evaluated (symbols / detections)",
        ],
    );
    for s in ranked_sheets(r) {
        t.rows.push(vec![
            s.sheet.clone(),
            s.n_truths.to_string(),
            s.n_kept.to_string(),
            s.true_positives.to_string(),
            s.false_alarms.to_string(),
            s.duplicates.to_string(),
            s.misses.to_string(),
            pct(s.precision),
            pct(s.recall),
            format!("{} / {}", s.ignored_truths, s.ignored_detections),
        ]);
    }
    t
}

/// Per sheet, for machines (evaluation order).
pub fn per_sheet_csv(r: &EvaluationRecord) -> Table {
    let mut t = Table::new(
        "per_sheet",
        &[
            "sheet",
            "symbols",
            "kept",
            "true_positives",
            "false_alarms",
            "duplicates",
            "misses",
            "precision",
            "recall",
            "ignored_symbols",
            "ignored_detections",
        ],
    );
    for s in r.sheet_level.per_sheet.as_deref().unwrap_or(&[]) {
        t.rows.push(vec![
            s.sheet.clone(),
            s.n_truths.to_string(),
            s.n_kept.to_string(),
            s.true_positives.to_string(),
            s.false_alarms.to_string(),
            s.duplicates.to_string(),
            s.misses.to_string(),
            raw(s.precision),
            raw(s.recall),
            s.ignored_truths.to_string(),
            s.ignored_detections.to_string(),
        ]);
    }
    t
}

/// A confusion table as CSV: first column the true class, then one column per
/// reported class.
pub fn confusion_csv(id: &str, c: &ConfusionTable) -> Table {
    let mut t = Table::new(id, &["true_class"]);
    t.header.extend(c.columns.iter().cloned());
    for (row, counts) in c.rows.iter().zip(&c.counts) {
        let mut r = vec![row.clone()];
        r.extend(counts.iter().map(u64::to_string));
        t.rows.push(r);
    }
    t
}

/// Every detection and its fate, for machines.
pub fn detections_csv(r: &EvaluationRecord) -> Table {
    let mut t = Table::new(
        "detections",
        &[
            "sheet",
            "class",
            "score",
            "x",
            "y",
            "w",
            "h",
            "fate",
            "symbol_class",
            "kept_at_operating_threshold",
        ],
    );
    let thr = r.sheet_level.operating_threshold;
    for d in &r.matches.detections {
        t.rows.push(vec![
            d.sheet.clone(),
            d.class.clone(),
            d.score.to_string(),
            d.bbox.x.to_string(),
            d.bbox.y.to_string(),
            d.bbox.w.to_string(),
            d.bbox.h.to_string(),
            d.kind.as_str().into(),
            d.truth_class.clone().unwrap_or_default(),
            thr.map(|t| (d.score >= t).to_string()).unwrap_or_default(),
        ]);
    }
    t
}

/// Every labelled symbol and whether it was found, for machines.
pub fn symbols_csv(r: &EvaluationRecord) -> Table {
    let mut t = Table::new(
        "symbols",
        &[
            "sheet",
            "index",
            "class",
            "x",
            "y",
            "w",
            "h",
            "found_by_score",
            "missed_at_operating_threshold",
        ],
    );
    let thr = r.sheet_level.operating_threshold;
    for s in &r.matches.truths {
        t.rows.push(vec![
            s.sheet.clone(),
            s.index.to_string(),
            s.class.clone(),
            s.bbox.x.to_string(),
            s.bbox.y.to_string(),
            s.bbox.w.to_string(),
            s.bbox.h.to_string(),
            raw(s.found_by_score),
            thr.map(|t| s.missed_at(t).to_string()).unwrap_or_default(),
        ]);
    }
    t
}

/// The IoU sweep, for machines.
pub fn iou_sweep_csv(r: &EvaluationRecord) -> Table {
    let mut t = Table::new(
        "iou_sweep",
        &[
            "min_iou",
            "map_all_point",
            "map_101_point",
            "micro_ap_all_point",
        ],
    );
    for s in &r.sheet_level.iou_sweep {
        t.rows.push(vec![
            s.min_iou.to_string(),
            raw(s.map_all_point),
            raw(s.map_101),
            raw(s.micro_ap_all_point),
        ]);
    }
    t
}
