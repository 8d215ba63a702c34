//! The comparison section: a `symtrust compare` result (champion against
//! challenger on the same frozen sheets) as a table and a plot of the AP
//! differences with their paired-bootstrap intervals.

use crate::error::{ReportError, Result};
use crate::plot::forest::{ForestDrawn, ForestPlot, ForestRow};
use crate::plot::{Drawn, Figure, render};
use crate::tables::{Table, pct};
use std::path::{Path, PathBuf};
use symtrust_eval::compare::ClassJudgement;
use symtrust_eval::record::{
    COMPARISON_FILE, COMPARISON_SCHEMA_VERSION, ComparisonOutcome, ComparisonRecord,
};
use symtrust_labels::hash::sha256_file;

/// A comparison as read.
#[derive(Debug, Clone)]
pub struct LoadedComparison {
    /// The `comparison.json` read.
    pub path: PathBuf,
    /// Its SHA-256.
    pub sha256: String,
    /// The record.
    pub record: ComparisonRecord,
}

/// Reads a comparison: `comparison.json` itself or the folder holding it.
pub fn load(path: &Path) -> Result<LoadedComparison> {
    let file = if path.is_dir() {
        path.join(COMPARISON_FILE)
    } else {
        path.to_path_buf()
    };
    if !file.is_file() {
        return Err(ReportError::input(
            path,
            format!(
                "not a comparison: no {COMPARISON_FILE} (write one with `symtrust compare --out DIR`)"
            ),
        ));
    }
    let text = std::fs::read_to_string(&file).map_err(|e| ReportError::io(&file, e))?;
    let value: serde_json::Value = serde_json::from_str(&text)
        .map_err(|e| ReportError::input(&file, format!("not valid JSON: {e}")))?;
    let version = value
        .get("schema_version")
        .and_then(serde_json::Value::as_u64);
    if version != Some(u64::from(COMPARISON_SCHEMA_VERSION)) {
        return Err(ReportError::input(
            &file,
            format!(
                "schema version {version:?}; this symtrust reads version {COMPARISON_SCHEMA_VERSION}"
            ),
        ));
    }
    let record: ComparisonRecord = serde_json::from_value(value)
        .map_err(|e| ReportError::input(&file, format!("not a comparison record: {e}")))?;
    Ok(LoadedComparison {
        sha256: sha256_file(&file)?,
        path: file,
        record,
    })
}

/// The outcome in words.
pub fn outcome(o: ComparisonOutcome) -> &'static str {
    match o {
        ComparisonOutcome::Better => {
            "better: not worse on any class, and the mAP gain is clear of zero"
        }
        ComparisonOutcome::NotWorse => "not worse: no class loses more than the margin",
        ComparisonOutcome::Worse => "worse: at least one class loses more than the margin",
    }
}

fn judgement(j: Option<ClassJudgement>) -> &'static str {
    match j {
        Some(ClassJudgement::NotWorse) => "not worse",
        Some(ClassJudgement::Worse) => "WORSE",
        Some(ClassJudgement::NoData) => "no symbols",
        None => "–",
    }
}

fn diff_text(e: Option<f64>, lo: Option<f64>, hi: Option<f64>) -> String {
    let pts = |v: f64| format!("{:+.1}", 100.0 * v);
    match (e, lo, hi) {
        (Some(e), Some(l), Some(h)) => format!("{} ({} to {})", pts(e), pts(l), pts(h)),
        (Some(e), _, _) => pts(e),
        _ => "–".into(),
    }
}

/// The comparison table, one row per class and the mAP.
pub fn table(c: &ComparisonRecord) -> Table {
    let level = 100.0 * c.ap.config.level;
    let mut t = Table {
        id: "comparison".into(),
        header: vec![
            "Class".into(),
            "Champion AP".into(),
            "Challenger AP".into(),
            format!("Difference, points ({level:.0}% interval)"),
            format!("Judgement (margin {:.0} points)", 100.0 * c.verdict.margin),
        ],
        rows: Vec::new(),
    };
    for d in &c.ap.per_class {
        let name = d.class.clone().unwrap_or_default();
        let j = c
            .verdict
            .lines
            .iter()
            .find(|l| l.class == name)
            .map(|l| l.judgement);
        t.rows.push(vec![
            name,
            pct(d.champion),
            pct(d.challenger),
            diff_text(
                d.difference.estimate,
                d.difference.lower,
                d.difference.upper,
            ),
            judgement(j).into(),
        ]);
    }
    let m = &c.ap.map;
    t.rows.push(vec![
        "mAP".into(),
        pct(m.champion),
        pct(m.challenger),
        diff_text(
            m.difference.estimate,
            m.difference.lower,
            m.difference.upper,
        ),
        outcome(c.outcome)
            .split(':')
            .next()
            .unwrap_or_default()
            .into(),
    ]);
    t
}

/// The plot of AP differences.
pub fn figure(c: &ComparisonRecord) -> Result<Figure> {
    let mut rows: Vec<ForestRow> =
        c.ap.per_class
            .iter()
            .map(|d| {
                let name = d.class.clone().unwrap_or_default();
                let worse = c
                    .verdict
                    .lines
                    .iter()
                    .any(|l| l.class == name && l.judgement == ClassJudgement::Worse);
                ForestRow {
                    name,
                    estimate: d.difference.estimate,
                    lower: d.difference.lower,
                    upper: d.difference.upper,
                    worse,
                }
            })
            .collect();
    rows.push(ForestRow {
        name: "mAP".into(),
        estimate: c.ap.map.difference.estimate,
        lower: c.ap.map.difference.lower,
        upper: c.ap.map.difference.upper,
        worse: false,
    });
    let plot = ForestPlot {
        rows,
        margin: c.verdict.margin,
    };
    let (svg, png, placed) = render("comparison", &plot)?;
    Ok(Figure {
        id: "comparison".into(),
        title: "Challenger against champion".into(),
        caption: format!(
            "Per class, the challenger's AP minus the champion's on the same {} sheets, in percentage points: the dot is the difference, the bar its {:.0}% paired bootstrap interval (whole sheets resampled {} times). Right of the solid zero line the challenger is better. A class whose interval reaches left of the dashed margin line is drawn hollow and orange: worse beyond the margin.",
            c.sheets.len(),
            100.0 * c.ap.config.level,
            c.ap.config.resamples
        ),
        svg,
        png,
        drawn: Drawn::Forest(ForestDrawn {
            rows: plot.rows,
            margin: plot.margin,
            placed,
        }),
    })
}

/// The McNemar line in words, when the test ran.
pub fn mcnemar_text(c: &ComparisonRecord) -> Option<String> {
    let m = c.mcnemar.as_ref()?;
    Some(format!(
        "On the paired crop decisions, {} crops only the champion got right and {} only the challenger; McNemar's test gives p = {:.3}{}.",
        m.champion_only,
        m.challenger_only,
        m.p_value,
        if m.p_value < 0.05 {
            " (a real difference at the 5% level)"
        } else {
            " (no clear difference at the 5% level)"
        }
    ))
}
