//! `symtrust report` end to end: render an evaluation folder of the synthetic
//! plant, find its site, put evaluations side by side, and `--verify` with its
//! documented exit codes (0 all match, 3 changed inputs, 2 bad input).

mod util;

#[path = "../reports/tests/common/mod.rs"]
mod fixture;

use util::symtrust;

#[test]
fn renders_finds_the_site_and_verifies() {
    let f = fixture::fixture();
    let eval = f.eval_dir.to_str().unwrap();
    // No --site: the site is the folder above the evaluation holding site.toml.
    let run = symtrust(f.tmp.path(), &["report", eval, "--quiet"]).expect_code(0);
    let index = f.site.join("reports/first/index.html");
    assert_eq!(run.stdout.trim(), index.to_str().unwrap());
    assert!(index.is_file() && f.site.join("reports/first/summary.md").is_file());
    for t in [
        "per_class",
        "per_sheet",
        "detection_confusion",
        "crop_confusion",
        "detections",
        "symbols",
    ] {
        assert!(
            f.site
                .join(format!("reports/first/tables/{t}.csv"))
                .is_file(),
            "{t}.csv"
        );
    }
    let report = f.site.join("reports/first");
    let report = report.to_str().unwrap();
    let ok = symtrust(f.tmp.path(), &["report", "--verify", report]).expect_code(0);
    assert!(ok.stdout.contains("ok: all"), "{}", ok.stdout);
    // Rendering again replaces the report in place.
    symtrust(f.tmp.path(), &["report", eval, "--quiet"]).expect_code(0);
    // A label document edited after the report: exit 3, the file is named.
    let labels = f.site.join(&f.record.sheets[0].labels_file);
    let mut text = std::fs::read_to_string(&labels).unwrap();
    text.push(' ');
    std::fs::write(&labels, text).unwrap();
    let out = symtrust(f.tmp.path(), &["report", "--verify", report]).expect_code(3);
    assert!(
        out.stdout.contains("changed") && out.stdout.contains(&f.record.sheets[0].labels_file),
        "{}",
        out.stdout
    );
    let json = symtrust(f.tmp.path(), &["report", "--verify", report, "--json"])
        .expect_code(3)
        .json();
    assert_eq!(json["all_match"], false);
    assert_eq!(json["mismatches"][0]["role"], "labels");
    // Now the report cannot be rendered either: the evaluation read other labels.
    let err = symtrust(f.tmp.path(), &["report", eval]).expect_code(2);
    assert!(
        err.stderr.contains("changed since the evaluation"),
        "{}",
        err.stderr
    );
}

#[test]
fn side_by_side_with_titles_and_bad_input() {
    let f = fixture::fixture();
    let site = symtrust_labels::site::Site::open(&f.site).unwrap();
    fixture::evaluate(
        &site,
        "retrained",
        &fixture::Detector {
            find: 0.97,
            false_alarms: 1,
            seed: 8,
        },
    );
    let out = f.tmp.path().join("side");
    let run = symtrust(
        f.tmp.path(),
        &[
            "report",
            "--site",
            f.site.to_str().unwrap(),
            f.eval_dir.to_str().unwrap(),
            "--beside",
            f.site.join("evals/retrained").to_str().unwrap(),
            "--title",
            "style-a model",
            "--title",
            "retrained",
            "--out",
            out.to_str().unwrap(),
            "--json",
        ],
    )
    .expect_code(0)
    .json();
    assert!(
        run["figures"]
            .as_array()
            .unwrap()
            .iter()
            .any(|v| v == "side-by-side-pr")
    );
    let html = std::fs::read_to_string(out.join("index.html")).unwrap();
    assert!(html.contains("<th>style-a model</th><th>retrained</th>"));
    assert!(out.join("tables/side_by_side.csv").is_file());
    // Too many titles, a folder that is no evaluation, a folder that is no report.
    let e = f.eval_dir.to_str().unwrap();
    symtrust(f.tmp.path(), &["report", e, "--title", "a", "--title", "b"]).expect_code(2);
    let bad = symtrust(
        f.tmp.path(),
        &[
            "report",
            "--site",
            f.site.to_str().unwrap(),
            f.site.join("sheets").to_str().unwrap(),
        ],
    )
    .expect_code(2);
    assert!(bad.stderr.contains("metrics.json"), "{}", bad.stderr);
    let bad = symtrust(
        f.tmp.path(),
        &["report", "--verify", f.site.to_str().unwrap()],
    )
    .expect_code(2);
    assert!(bad.stderr.contains("audit.json"), "{}", bad.stderr);
    symtrust(f.tmp.path(), &["report"]).expect_code(2);
}
