//! The report folder as written: every resource the HTML names exists (or is
//! inline), nothing is half-written on failure, several evaluations sit side
//! by side, and `verify` notices a changed sheet or label document.

mod common;

use std::path::Path;
use symtrust_labels::site::Site;
use symtrust_reports::plot::Drawn;
use symtrust_reports::{EvaluationInput, ReportError, ReportRequest};

fn request(f: &common::Fixture, out: &Path) -> ReportRequest {
    ReportRequest::new(
        EvaluationInput {
            dir: f.eval_dir.clone(),
            site_root: f.site.clone(),
            title: None,
        },
        out.to_path_buf(),
    )
}

/// Every value of `attr="..."` in `html`.
fn attribute_values<'a>(html: &'a str, attr: &str) -> Vec<&'a str> {
    let pat = format!(" {attr}=\"");
    html.match_indices(&pat)
        .filter_map(|(i, _)| html[i + pat.len()..].split('"').next())
        .collect()
}

#[test]
fn html_names_only_inline_or_existing_relative_resources() {
    let f = common::fixture();
    let out = f.tmp.path().join("report");
    let r = symtrust_reports::render(&request(&f, &out), &|_| {}).unwrap();
    let html = std::fs::read_to_string(&r.index_html).unwrap();
    let srcs = attribute_values(&html, "src");
    let hrefs = attribute_values(&html, "href");
    assert!(!srcs.is_empty() && !hrefs.is_empty());
    for v in srcs.iter().chain(&hrefs) {
        if v.starts_with("data:image/png;base64,") || v.starts_with('#') {
            continue;
        }
        assert!(
            !v.contains("://") && !v.starts_with('/'),
            "not relative: {v}"
        );
        assert!(!v.contains(".."), "leaves the report folder: {v}");
        assert!(out.join(v).is_file(), "missing: {v}");
    }
    let mut ids = attribute_values(&html, "id");
    let n_ids = ids.len();
    ids.sort();
    ids.dedup();
    assert_eq!(ids.len(), n_ids, "an HTML id is used twice");
    for v in hrefs.iter().filter(|v| v.starts_with('#')) {
        assert!(
            html.contains(&format!("id=\"{}\"", &v[1..])),
            "no anchor {v}"
        );
    }
    // No external resource of any kind: no scripts, no stylesheets by link, no fonts.
    assert!(!html.contains("<script") && !html.contains("<link") && !html.contains("@import"));
    // Every figure is inline SVG; its PNG copy sits beside summary.md.
    for id in &r.figures {
        assert!(
            html.contains(&format!("id=\"fig-{id}\"><svg")),
            "{id} inline"
        );
        let md = std::fs::read_to_string(&r.summary_md).unwrap();
        assert!(md.contains(&format!("(figures/{id}.png)")));
        assert!(out.join(format!("figures/{id}.png")).is_file());
    }
    // Markdown names only files that exist.
    let md = std::fs::read_to_string(&r.summary_md).unwrap();
    for link in md.split("](").skip(1).filter_map(|s| s.split(')').next()) {
        assert!(
            out.join(link).is_file(),
            "summary.md links a missing {link}"
        );
    }
    // The section order of the issue.
    let order = [
        "id=\"trust\"",
        "id=\"operating\"",
        "id=\"classes\"",
        "id=\"pr\"",
        "id=\"confusion\"",
        "id=\"calibration\"",
        "id=\"iou\"",
        "id=\"sheets\"",
        "id=\"training\"",
        "id=\"errors\"",
        "id=\"overlays\"",
        "id=\"audit\"",
    ];
    let pos: Vec<usize> = order
        .iter()
        .map(|o| html.find(o).unwrap_or_else(|| panic!("{o}")))
        .collect();
    assert!(pos.windows(2).all(|w| w[0] < w[1]), "sections out of order");
    assert!(html.contains(&symtrust_eval::statement::CAUTION.replace('\'', "&#39;")));
    // No staging folder left beside the report.
    let leftovers: Vec<_> = std::fs::read_dir(f.tmp.path())
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().starts_with('.'))
        .collect();
    assert!(leftovers.is_empty());
}

#[test]
fn verify_matches_then_names_each_changed_file() {
    let f = common::fixture();
    let out = f.tmp.path().join("report");
    symtrust_reports::render(&request(&f, &out), &|_| {}).unwrap();
    let v = symtrust_reports::verify(&out, None).unwrap();
    assert!(v.all_match(), "{:?}", v.mismatches);
    // sheets + labels per sheet, metrics, weights, card, training log, crop manifest,
    // and the report's own files.
    assert!(v.checked > 2 * f.record.sheets.len() + 5);
    // A label document edited after the report.
    let labels = f.site.join(&f.record.sheets[1].labels_file);
    let mut text = std::fs::read_to_string(&labels).unwrap();
    text.push('\n');
    std::fs::write(&labels, text).unwrap();
    // A sheet replaced.
    let sheet = f.site.join(&f.record.sheets[0].file);
    let mut bytes = std::fs::read(&sheet).unwrap();
    bytes.push(0);
    std::fs::write(&sheet, bytes).unwrap();
    // And a report file touched.
    let csv = out.join("tables/per_class.csv");
    std::fs::write(&csv, "class\n").unwrap();
    let v = symtrust_reports::verify(&out, None).unwrap();
    let mut got: Vec<(String, String)> = v
        .mismatches
        .iter()
        .map(|m| (m.role.clone(), m.path.clone()))
        .collect();
    got.sort();
    assert_eq!(got.len(), 3, "{got:?}");
    assert!(
        got.iter()
            .any(|(r, p)| r == "labels" && p.ends_with(&f.record.sheets[1].labels_file))
    );
    assert!(
        got.iter()
            .any(|(r, p)| r == "sheet" && p.ends_with(&f.record.sheets[0].file))
    );
    assert!(
        got.iter()
            .any(|(r, p)| r == "report" && p.ends_with("per_class.csv"))
    );
    // A moved site verifies with --site.
    let moved = f.tmp.path().join("moved-site");
    std::fs::rename(&f.site, &moved).unwrap();
    let v = symtrust_reports::verify(&out, Some(&moved)).unwrap();
    assert!(
        v.mismatches
            .iter()
            .all(|m| m.role == "report" || m.found.is_some() || m.role == "metrics")
    );
    assert!(
        v.mismatches
            .iter()
            .any(|m| m.role == "labels" && m.found.is_some())
    );
}

#[test]
fn a_sheet_changed_since_the_evaluation_stops_the_report_and_leaves_nothing() {
    let f = common::fixture();
    let sheet = f.site.join(&f.record.sheets[2].file);
    let mut bytes = std::fs::read(&sheet).unwrap();
    bytes.extend_from_slice(b"tampered");
    std::fs::write(&sheet, bytes).unwrap();
    let out = f.tmp.path().join("report");
    let err = symtrust_reports::render(&request(&f, &out), &|_| {}).unwrap_err();
    assert!(matches!(err, ReportError::Changed { .. }), "{err}");
    assert!(err.to_string().contains(&f.record.sheets[2].file), "{err}");
    assert!(err.is_bad_input());
    assert!(!out.exists());
    assert!(
        std::fs::read_dir(f.tmp.path()).unwrap().all(|e| !e
            .unwrap()
            .file_name()
            .to_string_lossy()
            .starts_with('.'))
    );
}

#[test]
fn not_an_evaluation_folder_is_named() {
    let f = common::fixture();
    let mut req = request(&f, &f.tmp.path().join("report"));
    req.evaluation.dir = f.site.join("sheets");
    let err = symtrust_reports::render(&req, &|_| {}).unwrap_err();
    assert!(
        err.to_string().contains("metrics.json") && err.to_string().contains("sheets"),
        "{err}"
    );
    // An existing folder that is not a report is never overwritten.
    let names = |d: &Path| {
        let mut v: Vec<_> = d
            .read_dir()
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        v.sort();
        v
    };
    let before = names(&f.site.join("labels"));
    let req = request(&f, &f.site.join("labels"));
    let err = symtrust_reports::render(&req, &|_| {}).unwrap_err();
    assert!(err.to_string().contains("not a report folder"), "{err}");
    assert_eq!(names(&f.site.join("labels")), before);
}

#[test]
fn evaluations_side_by_side() {
    let f = common::fixture();
    let site = Site::open(&f.site).unwrap();
    let better = common::evaluate(
        &site,
        "retrained",
        &common::Detector {
            find: 0.97,
            false_alarms: 1,
            seed: 8,
        },
    );
    let mut req = request(&f, &f.tmp.path().join("report"));
    req.evaluation.title = Some("before".into());
    req.beside.push(EvaluationInput {
        dir: f.site.join("evals/retrained"),
        site_root: f.site.clone(),
        title: Some("after".into()),
    });
    let staging = tempfile::tempdir().unwrap();
    let report = symtrust_reports::build(&req, staging.path(), &|_| {}).unwrap();
    let (table, fig) = report.side_by_side.as_ref().unwrap();
    assert_eq!(table.header, vec!["Measure", "before", "after"]);
    let recall = table.rows.iter().find(|r| r[0] == "Recall").unwrap();
    let pct = |v: f64| format!("{:.1}%", 100.0 * v);
    assert!(recall[1].starts_with(&pct(f.record.sheet_level.operating.unwrap().recall)));
    assert!(recall[2].starts_with(&pct(better.sheet_level.operating.unwrap().recall)));
    let Drawn::Pr(d) = &fig.drawn else { panic!() };
    let ops: Vec<_> = d.panels[0].series.iter().map(|s| s.operating).collect();
    let want =
        [&f.record, &better].map(|r| r.sheet_level.operating.map(|o| (o.recall, o.precision)));
    assert_eq!(ops, want);
    // Both evaluations' inputs are in the audit stamp.
    assert_eq!(report.audit.evaluations.len(), 2);
    assert_eq!(
        report
            .audit
            .inputs
            .iter()
            .filter(|i| i.role == symtrust_reports::audit::Role::Metrics)
            .count(),
        2
    );
}
