//! `history.csv`: one row per finished nightly run, appended atomically (the
//! whole file is rewritten through a temporary file and renamed, so a crash
//! never leaves half a row).
//!
//! Columns: `run, started, seconds, trigger, sheets_changed, accepted_labels,
//! crop_library, champion, challenger, outcome, reason, map_champion,
//! map_challenger`, then for each site class `<class>_champion_ap,
//! <class>_champion_lo, <class>_champion_hi, <class>_challenger_ap,
//! <class>_challenger_lo, <class>_challenger_hi` (AP all-point with its
//! bootstrap interval; empty when undefined).

use crate::atomic::write_atomic;
use crate::error::{LabelError, Result};
use std::path::Path;

/// File name at the site root.
pub const HISTORY_FILE: &str = "history.csv";

/// An AP with its interval (any part may be undefined).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct ApCell {
    /// Estimate.
    pub ap: Option<f64>,
    /// Lower end of the interval.
    pub lo: Option<f64>,
    /// Upper end.
    pub hi: Option<f64>,
}

/// One finished run.
#[derive(Debug, Clone, PartialEq)]
pub struct HistoryRow {
    /// Run id.
    pub run: String,
    /// Start time, RFC 3339 UTC.
    pub started: String,
    /// Duration in seconds.
    pub seconds: f64,
    /// Why it ran: `labels changed`, `forced` or `first run`.
    pub trigger: String,
    /// Sheets whose accepted labels changed (added and removed included).
    pub sheets_changed: usize,
    /// Accepted labels on training and validation sheets.
    pub accepted_labels: usize,
    /// Crop library trained on.
    pub crop_library: String,
    /// Champion before the run (empty when there was none).
    pub champion: String,
    /// The model trained by the run.
    pub challenger: String,
    /// `promoted` or `rejected`.
    pub outcome: String,
    /// One sentence why.
    pub reason: String,
    /// mAP of the champion (empty when none).
    pub map_champion: Option<f64>,
    /// mAP of the challenger.
    pub map_challenger: Option<f64>,
    /// Per site class: champion then challenger.
    pub per_class: Vec<(ApCell, ApCell)>,
}

fn header(classes: &[String]) -> Vec<String> {
    let mut h: Vec<String> = [
        "run",
        "started",
        "seconds",
        "trigger",
        "sheets_changed",
        "accepted_labels",
        "crop_library",
        "champion",
        "challenger",
        "outcome",
        "reason",
        "map_champion",
        "map_challenger",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    for c in classes {
        for side in ["champion", "challenger"] {
            for part in ["ap", "lo", "hi"] {
                h.push(format!("{c}_{side}_{part}"));
            }
        }
    }
    h
}

fn num(v: Option<f64>) -> String {
    v.map(|v| format!("{v:.6}")).unwrap_or_default()
}

fn parse_num(path: &Path, line: usize, s: &str) -> Result<Option<f64>> {
    if s.is_empty() {
        return Ok(None);
    }
    s.parse()
        .map(Some)
        .map_err(|_| LabelError::invalid(path, format!("line {line}: {s:?} is not a number")))
}

/// Reads every row; an absent file has none. `classes` must match the header.
pub fn read_history(path: &Path, classes: &[String]) -> Result<Vec<HistoryRow>> {
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(Vec::new()),
        Err(e) => return Err(LabelError::io(path, e)),
    };
    let mut reader = csv::Reader::from_reader(bytes.as_slice());
    let found: Vec<String> = reader
        .headers()
        .map_err(|e| LabelError::invalid(path, e.to_string()))?
        .iter()
        .map(str::to_string)
        .collect();
    if found != header(classes) {
        return Err(LabelError::invalid(
            path,
            "its columns do not match the site's classes (were classes added or renamed?); move it aside to start a new history",
        ));
    }
    let mut rows = Vec::new();
    for (i, rec) in reader.records().enumerate() {
        let line = i + 2;
        let r = rec.map_err(|e| LabelError::invalid(path, format!("line {line}: {e}")))?;
        let get = |k: usize| r.get(k).unwrap_or("").to_string();
        let n = |k: usize| parse_num(path, line, r.get(k).unwrap_or(""));
        let count = |k: usize| -> Result<usize> {
            r.get(k).unwrap_or("").parse().map_err(|_| {
                LabelError::invalid(path, format!("line {line}: column {k} is not a count"))
            })
        };
        let mut per_class = Vec::with_capacity(classes.len());
        for c in 0..classes.len() {
            let b = 13 + 6 * c;
            per_class.push((
                ApCell {
                    ap: n(b)?,
                    lo: n(b + 1)?,
                    hi: n(b + 2)?,
                },
                ApCell {
                    ap: n(b + 3)?,
                    lo: n(b + 4)?,
                    hi: n(b + 5)?,
                },
            ));
        }
        rows.push(HistoryRow {
            run: get(0),
            started: get(1),
            seconds: n(2)?.unwrap_or(0.0),
            trigger: get(3),
            sheets_changed: count(4)?,
            accepted_labels: count(5)?,
            crop_library: get(6),
            champion: get(7),
            challenger: get(8),
            outcome: get(9),
            reason: get(10),
            map_champion: n(11)?,
            map_challenger: n(12)?,
            per_class,
        });
    }
    Ok(rows)
}

/// Appends `row` unless a row of the same run is already there (a recovered
/// run may try twice). Returns whether it was added.
pub fn append_history(path: &Path, classes: &[String], row: &HistoryRow) -> Result<bool> {
    let mut rows = read_history(path, classes)?;
    if rows.iter().any(|r| r.run == row.run) {
        return Ok(false);
    }
    if row.per_class.len() != classes.len() {
        return Err(LabelError::invalid(
            path,
            format!(
                "a history row needs one AP pair per class ({}), got {}",
                classes.len(),
                row.per_class.len()
            ),
        ));
    }
    rows.push(row.clone());
    let mut w = csv::Writer::from_writer(Vec::new());
    let csv_err = |e: csv::Error| LabelError::invalid(path, e.to_string());
    w.write_record(header(classes)).map_err(csv_err)?;
    for r in &rows {
        let mut rec = vec![
            r.run.clone(),
            r.started.clone(),
            format!("{:.1}", r.seconds),
            r.trigger.clone(),
            r.sheets_changed.to_string(),
            r.accepted_labels.to_string(),
            r.crop_library.clone(),
            r.champion.clone(),
            r.challenger.clone(),
            r.outcome.clone(),
            r.reason.clone(),
            num(r.map_champion),
            num(r.map_challenger),
        ];
        for (a, b) in &r.per_class {
            for cell in [a, b] {
                rec.extend([num(cell.ap), num(cell.lo), num(cell.hi)]);
            }
        }
        w.write_record(rec).map_err(csv_err)?;
    }
    let bytes = w
        .into_inner()
        .map_err(|e| LabelError::invalid(path, e.to_string()))?;
    write_atomic(path, &bytes)?;
    Ok(true)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(run: &str) -> HistoryRow {
        HistoryRow {
            run: run.into(),
            started: "2026-12-02T01:00:00Z".into(),
            seconds: 12.5,
            trigger: "labels changed".into(),
            sheets_changed: 2,
            accepted_labels: 140,
            crop_library: "abc".into(),
            champion: String::new(),
            challenger: "m1".into(),
            outcome: "promoted".into(),
            reason: "first model, a comma, and \"quotes\"".into(),
            map_champion: None,
            map_challenger: Some(0.8125),
            per_class: vec![(
                ApCell::default(),
                ApCell {
                    ap: Some(0.8125),
                    lo: Some(0.75),
                    hi: Some(0.875),
                },
            )],
        }
    }

    #[test]
    fn appends_once_per_run_and_reads_back() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join(HISTORY_FILE);
        let classes = vec!["pump".to_string()];
        assert!(append_history(&path, &classes, &row("r1")).unwrap());
        assert!(!append_history(&path, &classes, &row("r1")).unwrap());
        assert!(append_history(&path, &classes, &row("r2")).unwrap());
        let rows = read_history(&path, &classes).unwrap();
        assert_eq!(rows, vec![row("r1"), row("r2")]);
        let err = read_history(&path, &["valve".to_string()]).unwrap_err();
        assert!(err.to_string().contains("columns"), "{err}");
    }
}
