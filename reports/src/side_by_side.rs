//! Several evaluations side by side: one column per evaluation, one row per
//! figure, so "before" and "after" read across a line.

use crate::load::LoadedEvaluation;
use crate::tables::{Table, pct, pct_iv, pooled_rates, rate_iv};

/// The comparison table (first column: the measure).
pub fn table(evals: &[&LoadedEvaluation]) -> Table {
    let mut header = vec!["Measure".to_string()];
    header.extend(evals.iter().map(|e| e.title.clone()));
    let mut rows: Vec<Vec<String>> = Vec::new();
    let mut row = |name: &str, f: &dyn Fn(&LoadedEvaluation) -> String| {
        let mut r = vec![name.to_string()];
        r.extend(evals.iter().map(|e| f(e)));
        rows.push(r);
    };
    row("Detector", &|e| crate::text::detector(&e.record.detector));
    row("Held-out sheets", &|e| {
        e.record.sheet_level.n_sheets.to_string()
    });
    row("Labelled symbols", &|e| {
        e.record.sheet_level.micro.n_truths.to_string()
    });
    row("Operating threshold", &|e| {
        e.record
            .sheet_level
            .operating_threshold
            .map_or("none".into(), |t| format!("{t:.3}"))
    });
    row("Precision", &|e| {
        let s = &e.record.sheet_level;
        pct_iv(
            s.operating.map(|o| o.precision),
            s.intervals
                .as_ref()
                .and_then(|i| i.precision_at_operating.as_ref()),
        )
    });
    row("Recall", &|e| {
        let s = &e.record.sheet_level;
        pct_iv(
            s.operating.map(|o| o.recall),
            s.intervals
                .as_ref()
                .and_then(|i| i.recall_at_operating.as_ref()),
        )
    });
    row("F1", &|e| {
        let s = &e.record.sheet_level;
        pct_iv(
            s.operating.map(|o| o.f1),
            s.intervals
                .as_ref()
                .and_then(|i| i.f1_at_operating.as_ref()),
        )
    });
    row("False alarms per sheet", &|e| {
        let s = &e.record.sheet_level;
        let (fa, _) = pooled_rates(s.per_sheet.as_deref(), s.n_sheets.max(1) as f64);
        rate_iv(
            fa,
            s.intervals
                .as_ref()
                .and_then(|i| i.false_alarms_per_sheet.as_ref()),
        )
    });
    row("Misses per sheet", &|e| {
        let s = &e.record.sheet_level;
        let (_, m) = pooled_rates(s.per_sheet.as_deref(), s.n_sheets.max(1) as f64);
        rate_iv(
            m,
            s.intervals
                .as_ref()
                .and_then(|i| i.misses_per_sheet.as_ref()),
        )
    });
    row("mAP, all-point", &|e| {
        let s = &e.record.sheet_level;
        pct_iv(
            s.map_all_point,
            s.intervals.as_ref().map(|i| &i.map_all_point),
        )
    });
    row("AP all classes pooled", &|e| {
        let s = &e.record.sheet_level;
        pct_iv(
            s.micro.ap.all_point,
            s.intervals.as_ref().map(|i| &i.micro_ap_all_point),
        )
    });
    let mut classes: Vec<String> = Vec::new();
    for e in evals {
        for c in &e.record.classes {
            if !classes.contains(c) {
                classes.push(c.clone());
            }
        }
    }
    for c in &classes {
        row(&format!("AP {c}"), &|e| {
            let s = &e.record.sheet_level;
            s.per_class
                .iter()
                .find(|p| p.class == *c)
                .map_or("–".into(), |p| pct(p.figures.ap.all_point))
        });
    }
    Table {
        id: "side-by-side".into(),
        header,
        rows,
    }
}
