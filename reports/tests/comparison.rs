//! The comparison section: a champion-challenger record computed by
//! `symtrust_eval::compare` on two evaluations of the same sheets, drawn and
//! tabled as the record says.

mod common;

use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::compare::{ApKind, ClassJudgement, VerdictRule, paired_bootstrap_ap, verdict};
use symtrust_eval::record::{
    COMPARISON_FILE, COMPARISON_SCHEMA_VERSION, ComparisonOutcome, EvaluationRecord,
};
use symtrust_eval::sheet_eval::{prepare_sheets, sheet_outcomes};
use symtrust_labels::site::Site;
use symtrust_reports::plot::Drawn;
use symtrust_reports::{EvaluationInput, ReportRequest};

fn outcomes(r: &EvaluationRecord) -> Vec<symtrust_eval::sheet_eval::SheetOutcomes> {
    prepare_sheets(&r.inputs, &r.classes)
        .unwrap()
        .iter()
        .map(|p| sheet_outcomes(p, r.classes.len(), &r.sheet_level.config.criterion))
        .collect()
}

#[test]
fn comparison_section_shows_the_record() {
    let f = common::fixture();
    let site = Site::open(&f.site).unwrap();
    let challenger = common::evaluate(
        &site,
        "challenger",
        &common::Detector {
            find: 0.6,
            false_alarms: 5,
            seed: 21,
        },
    );
    let cfg = BootstrapConfig {
        resamples: 200,
        seed: 4,
        level: 0.95,
    };
    let ap = paired_bootstrap_ap(
        &outcomes(&f.record),
        &outcomes(&challenger),
        &f.record.classes,
        ApKind::AllPoint,
        &cfg,
    )
    .unwrap();
    let v = verdict(&ap, 0.05, VerdictRule::NonInferiority).unwrap();
    let outcome = ComparisonOutcome::of(&v, &ap);
    let dir = f.tmp.path().join("cmp");
    std::fs::create_dir_all(&dir).unwrap();
    let json = serde_json::json!({
        "schema_version": COMPARISON_SCHEMA_VERSION,
        "summary": "The challenger finds fewer symbols on the same sheets.",
        "stamp": f.record.stamp,
        "champion": f.record.detector,
        "challenger": challenger.detector,
        "sheets": f.record.sheets,
        "ap": ap,
        "mcnemar": null,
        "verdict": v,
        "outcome": outcome,
    });
    std::fs::write(
        dir.join(COMPARISON_FILE),
        serde_json::to_vec(&json).unwrap(),
    )
    .unwrap();
    let mut req = ReportRequest::new(
        EvaluationInput {
            dir: f.eval_dir.clone(),
            site_root: f.site.clone(),
            title: None,
        },
        f.tmp.path().join("report"),
    );
    req.comparison = Some(dir.clone());
    let staging = tempfile::tempdir().unwrap();
    let report = symtrust_reports::build(&req, staging.path(), &|_| {}).unwrap();
    let (_, table, fig) = report.comparison.as_ref().unwrap();
    let Drawn::Forest(d) = &fig.drawn else {
        panic!("not a forest plot")
    };
    assert_eq!(d.margin, 0.05);
    assert_eq!(d.rows.len(), ap.per_class.len() + 1);
    for (row, diff) in d.rows.iter().zip(&ap.per_class) {
        assert_eq!(
            (row.estimate, row.lower, row.upper),
            (
                diff.difference.estimate,
                diff.difference.lower,
                diff.difference.upper
            )
        );
        let line = v
            .lines
            .iter()
            .find(|l| Some(&l.class) == diff.class.as_ref())
            .unwrap();
        assert_eq!(row.worse, line.judgement == ClassJudgement::Worse);
        // The difference is the challenger's AP minus the champion's.
        if let (Some(a), Some(b), Some(e)) =
            (diff.champion, diff.challenger, diff.difference.estimate)
        {
            assert!((b - a - e).abs() < 1e-12);
        }
    }
    let last = d.rows.last().unwrap();
    assert_eq!(last.estimate, ap.map.difference.estimate);
    assert_eq!(
        d.placed.len(),
        d.rows.iter().filter(|r| r.estimate.is_some()).count()
    );
    // Table: one row per class plus the mAP, the judgement as the verdict says.
    assert_eq!(table.rows.len(), ap.per_class.len() + 1);
    for (row, line) in table.rows.iter().zip(&v.lines) {
        assert_eq!(row[0], line.class);
        assert_eq!(row[4] == "WORSE", line.judgement == ClassJudgement::Worse);
    }
    // The comparison file is in the audit stamp.
    assert!(
        report
            .audit
            .inputs
            .iter()
            .any(|i| i.role == symtrust_reports::audit::Role::Comparison)
    );
    // And the page has the section, after the per-class table.
    let html = symtrust_reports::html::page(&report);
    assert_eq!(html.matches("id=\"comparison\"").count(), 1);
    let (a, b) = (
        html.find("id=\"classes\"").unwrap(),
        html.find("id=\"comparison\"").unwrap(),
    );
    assert!(a < b && html.contains("id=\"fig-comparison\"><svg"));
}
