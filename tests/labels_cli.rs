//! End to end: `labels check`, `labels import` and `labels export` on a small site
//! built with `init` and `sheets add`, with symbols written through the library.

mod util;

use std::path::{Path, PathBuf};
use symtrust_labels::BBox;
use symtrust_labels::document::{Origin, ReviewState, Symbol};
use symtrust_labels::site::Site;
use symtrust_labels::store::LabelStore;
use util::{drawing, snapshot, symtrust};

/// A site with two registered 400 x 300 sheets, `fp-1` and `fp-2` (PNG without
/// resolution metadata, so the site's 200 dpi is assumed and no resampling happens).
fn two_sheet_site(dir: &Path) -> PathBuf {
    symtrust(dir, &["init", "site", "--quiet"]).expect_code(0);
    let scans = dir.join("scans");
    std::fs::create_dir_all(&scans).unwrap();
    for id in ["fp-1", "fp-2"] {
        drawing(400, 300)
            .save(scans.join(format!("{id}.png")))
            .unwrap();
    }
    symtrust(
        dir,
        &[
            "sheets",
            "add",
            "--site",
            "site",
            "--quiet",
            "scans/fp-1.png",
            "scans/fp-2.png",
        ],
    )
    .expect_code(0);
    dir.join("site")
}

/// Adds symbols `(id, class, x, y, w, h, state)` to a sheet's document.
fn add_symbols(
    site: &Path,
    sheet: &str,
    symbols: &[(&str, &str, f64, f64, f64, f64, ReviewState)],
) {
    let store = LabelStore::new(&Site::open(site).unwrap());
    let mut doc = store.load(sheet).unwrap();
    for &(id, class, x, y, w, h, state) in symbols {
        doc.symbols.push(Symbol {
            id: id.into(),
            class: class.into(),
            bbox: BBox::new(x, y, w, h),
            state,
            origin: Origin::Manual,
            by: "tester".into(),
            at: "2026-12-01T00:00:00Z".into(),
        });
    }
    store.save(&doc, "tester").unwrap();
}

/// Labels both sheets cleanly: boxes of 80 px, inside the [43.3, 129.9] px band
/// of the 11 mm starter classes at 200 dpi, no overlaps.
fn label_cleanly(site: &Path) {
    use ReviewState::*;
    add_symbols(
        site,
        "fp-1",
        &[
            ("s0001", "bubble_field", 10.0, 10.0, 80.0, 80.0, Accepted),
            ("s0002", "bubble_shared", 150.5, 10.25, 80.0, 80.0, Draft),
        ],
    );
    add_symbols(
        site,
        "fp-2",
        &[
            ("s0001", "bubble_board", 300.0, 200.0, 80.0, 80.0, Accepted),
            ("s0002", "bubble_field", 0.0, 0.0, 500.0, 10.0, Rejected),
        ],
    );
}

#[test]
fn clean_labels_pass_and_warnings_fail_only_with_strict() {
    let tmp = tempfile::tempdir().unwrap();
    let site = two_sheet_site(tmp.path());
    label_cleanly(&site);
    let run = symtrust(tmp.path(), &["labels", "check", "--site", "site"]).expect_code(0);
    // min_examples is 20 and each starter class has at most one accepted example.
    assert_eq!(
        run.stdout.matches("fewer than min_examples = 20").count(),
        3,
        "{}",
        run.stdout
    );
    assert!(
        run.stderr.contains("0 error(s), 3 warning(s)"),
        "{}",
        run.stderr
    );
    symtrust(
        tmp.path(),
        &["labels", "check", "--site", "site", "--strict"],
    )
    .expect_code(2);
    let run = symtrust(tmp.path(), &["labels", "check", "--site", "site", "--json"]).expect_code(0);
    let v = run.json();
    assert_eq!(
        (v["errors"].as_u64(), v["warnings"].as_u64()),
        (Some(0), Some(3))
    );
    let f = &v["findings"][0];
    assert_eq!(f["code"], "too-few-examples");
    assert_eq!(f["severity"], "warning");
    assert_eq!(f["file"], "site.toml");
    assert!(f["suggestion"].as_str().is_some_and(|s| !s.is_empty()));
}

#[test]
fn errors_name_file_and_symbol_and_exit_2() {
    use ReviewState::*;
    let tmp = tempfile::tempdir().unwrap();
    let site = two_sheet_site(tmp.path());
    label_cleanly(&site);
    add_symbols(
        &site,
        "fp-1",
        &[
            // 350 + 80 > 400: partly outside the sheet.
            ("s0003", "bubble_field", 350.0, 100.0, 80.0, 80.0, Draft),
            // Same spot as s0001, same class: IoU 1.
            ("s0004", "bubble_field", 10.0, 10.0, 80.0, 80.0, Accepted),
            ("s0005", "bubble_round", 200.0, 150.0, 80.0, 80.0, Draft),
        ],
    );
    // A truncated document for fp-2.
    let doc = site.join("labels/fp-2.json");
    let text = std::fs::read_to_string(&doc).unwrap();
    std::fs::write(&doc, &text[..text.len() / 2]).unwrap();
    let run = symtrust(tmp.path(), &["labels", "check", "--site", "site"]).expect_code(2);
    let out = &run.stdout;
    assert!(out.contains("labels/fp-1.json: s0003: error: box (350, 100, 80, 80) lies partly outside the 400 x 300 sheet"), "{out}");
    assert!(
        out.contains("labels/fp-1.json: s0004: error: overlaps s0001 of the same class"),
        "{out}"
    );
    assert!(
        out.contains("labels/fp-1.json: s0005: error: class \"bubble_round\" is not defined"),
        "{out}"
    );
    assert!(
        out.contains("labels/fp-2.json: error: not a valid label document at line"),
        "{out}"
    );
    let v = symtrust(tmp.path(), &["labels", "check", "--site", "site", "--json"])
        .expect_code(2)
        .json();
    assert_eq!(v["errors"], 4, "{v}");
}

#[test]
fn a_sheet_changed_since_labelling_is_an_error() {
    let tmp = tempfile::tempdir().unwrap();
    let site = two_sheet_site(tmp.path());
    label_cleanly(&site);
    let png = site.join("sheets/fp-2.png");
    let bytes = std::fs::read(&png).unwrap();
    std::fs::write(&png, &bytes[..bytes.len() - 10]).unwrap();
    let run = symtrust(tmp.path(), &["labels", "check", "--site", "site"]).expect_code(2);
    assert!(
        run.stdout.contains(
            "labels/fp-2.json: error: the sheet changed since it was labelled: sheets/fp-2.png"
        ),
        "{}",
        run.stdout
    );
    assert!(
        run.stdout.contains("re-register it or restore the file"),
        "{}",
        run.stdout
    );
    std::fs::remove_file(site.join("sheets/fp-1.png")).unwrap();
    let run = symtrust(tmp.path(), &["labels", "check", "--site", "site"]).expect_code(2);
    assert!(
        run.stdout
            .contains("labels/fp-1.json: error: the sheet file sheets/fp-1.png does not exist"),
        "{}",
        run.stdout
    );
}

#[test]
fn export_and_import_into_a_fresh_site_round_trip() {
    for (format, name) in [("csv", "all.csv"), ("coco", "all.json")] {
        let tmp = tempfile::tempdir().unwrap();
        let site = two_sheet_site(tmp.path());
        label_cleanly(&site);
        let out = tmp.path().join(name);
        let out_s = out.to_str().unwrap();
        let v = symtrust(
            tmp.path(),
            &[
                "labels", "export", "--site", "site", "--format", format, "--out", out_s, "--json",
            ],
        )
        .expect_code(0)
        .json();
        assert_eq!(
            (v["sheets"].as_u64(), v["symbols"].as_u64()),
            (Some(2), Some(4))
        );
        let fresh_dir = tempfile::tempdir().unwrap();
        two_sheet_site(fresh_dir.path());
        let v = symtrust(
            fresh_dir.path(),
            &[
                "labels", "import", "--site", "site", "--format", format, out_s, "--json",
            ],
        )
        .expect_code(0)
        .json();
        assert_eq!(
            (
                v["added"].as_u64(),
                v["updated"].as_u64(),
                v["unchanged"].as_u64()
            ),
            (Some(4), Some(0), Some(0))
        );
        let again = fresh_dir.path().join(name);
        symtrust(
            fresh_dir.path(),
            &[
                "labels",
                "export",
                "--site",
                "site",
                "--format",
                format,
                "--out",
                again.to_str().unwrap(),
            ],
        )
        .expect_code(0);
        assert_eq!(
            std::fs::read(&again).unwrap(),
            std::fs::read(&out).unwrap(),
            "{format}"
        );
    }
}

#[test]
fn import_never_overwrites_accepted_labels_and_says_so() {
    let tmp = tempfile::tempdir().unwrap();
    let site = two_sheet_site(tmp.path());
    label_cleanly(&site);
    let file = tmp.path().join("review.csv");
    std::fs::write(
        &file,
        "sheet,id,class,x,y,w,h,state\n\
         fp-1,s0001,bubble_field,12,10,80,80,accepted\n\
         fp-1,s0002,bubble_shared,150.5,10.25,80,80,accepted\n\
         fp-2,s0003,bubble_field,100,100,80,80,draft\n",
    )
    .unwrap();
    let run = symtrust(
        tmp.path(),
        &[
            "labels",
            "import",
            "--site",
            "site",
            "--format",
            "csv",
            "review.csv",
        ],
    )
    .expect_code(0);
    assert!(
        run.stderr
            .contains("1 added, 1 updated, 0 unchanged, 1 skipped"),
        "{}",
        run.stderr
    );
    assert!(
        run.stderr.contains("skipped s0001 of sheet fp-1 (line 2)"),
        "{}",
        run.stderr
    );
    let store = LabelStore::new(&Site::open(&site).unwrap());
    assert_eq!(
        store.load("fp-1").unwrap().symbol("s0001").unwrap().bbox.x,
        10.0
    );
    assert_eq!(
        store.load("fp-1").unwrap().symbol("s0002").unwrap().state,
        ReviewState::Accepted
    );
}

#[test]
fn bad_import_files_exit_2_with_the_line_and_change_nothing() {
    let tmp = tempfile::tempdir().unwrap();
    let site = two_sheet_site(tmp.path());
    label_cleanly(&site);
    let head = "sheet,id,class,x,y,w,h,state\nfp-1,n1,bubble_field,1,1,80,80,draft\n";
    let cases = [
        (
            "trunc.csv",
            format!("{head}fp-2,n2,bubble_field,1,"),
            vec!["trunc.csv:3:", "truncated"],
        ),
        (
            "sheet.csv",
            format!("{head}fp-9,n2,bubble_field,1,1,80,80,draft\n"),
            vec![
                "sheet.csv:3:",
                "\"fp-9\" is not registered",
                "symtrust sheets add",
            ],
        ),
        (
            "class.csv",
            format!("{head}fp-2,n2,pump,1,1,80,80,draft\n"),
            vec![
                "class.csv:3:",
                "known: bubble_field, bubble_shared, bubble_board",
            ],
        ),
        (
            "outside.csv",
            format!("{head}fp-2,n2,bubble_field,1,250,80,80,draft\n"),
            vec!["outside.csv:3:", "partly outside the 400 x 300 sheet fp-2"],
        ),
        (
            "bad.json",
            "{\"images\": [".to_string(),
            vec!["bad.json:1:"],
        ),
    ];
    for (name, text, needles) in cases {
        std::fs::write(tmp.path().join(name), text).unwrap();
        let before = snapshot(&site.join("labels"));
        let format = if name.ends_with(".json") {
            "coco"
        } else {
            "csv"
        };
        let run = symtrust(
            tmp.path(),
            &[
                "labels", "import", "--site", "site", "--format", format, name,
            ],
        )
        .expect_code(2);
        for needle in needles {
            assert!(
                run.stderr.contains(needle),
                "{name}: {needle:?} not in {}",
                run.stderr
            );
        }
        assert!(
            snapshot(&site.join("labels")) == before,
            "{name} changed a label document"
        );
    }
}

#[test]
fn export_to_a_missing_folder_fails_and_writes_nothing() {
    let tmp = tempfile::tempdir().unwrap();
    let site = two_sheet_site(tmp.path());
    label_cleanly(&site);
    let run = symtrust(
        tmp.path(),
        &[
            "labels",
            "export",
            "--site",
            "site",
            "--format",
            "csv",
            "--out",
            "no/such/dir/x.csv",
        ],
    )
    .expect_code(2);
    assert!(run.stderr.contains("no/such/dir/x.csv"), "{}", run.stderr);
    assert!(!tmp.path().join("no").exists());
}

#[test]
fn the_synthetic_plant_checks_clean_and_round_trips_through_both_formats() {
    let tmp = tempfile::tempdir().unwrap();
    let site = util::synthetic_site(tmp.path());
    let v = symtrust(tmp.path(), &["labels", "check", "--site", "site", "--json"]).json();
    assert_eq!(v["errors"], 0, "{v}");
    for (format, name) in [("csv", "all.csv"), ("coco", "all.json")] {
        let out = tmp.path().join(name);
        let out_s = out.to_str().unwrap();
        symtrust(
            tmp.path(),
            &[
                "labels", "export", "--site", "site", "--format", format, "--out", out_s,
            ],
        )
        .expect_code(0);
        // A fresh copy: the same registered sheets, every symbol removed.
        let fresh = tmp.path().join(format!("fresh-{format}"));
        util::copy_dir(&site, &fresh);
        let store = LabelStore::new(&Site::open(&fresh).unwrap());
        let mut total = 0;
        for id in store.sheet_ids().unwrap() {
            let mut doc = store.load(&id).unwrap();
            total += doc.symbols.len();
            doc.symbols.clear();
            store.save(&doc, "tester").unwrap();
        }
        assert!(total > 0, "the synthetic plant has labels");
        let fresh_s = fresh.to_str().unwrap();
        let v = symtrust(
            tmp.path(),
            &[
                "labels", "import", "--site", fresh_s, "--format", format, out_s, "--json",
            ],
        )
        .expect_code(0)
        .json();
        assert_eq!(v["added"].as_u64(), Some(total as u64));
        let again = tmp.path().join(format!("again-{name}"));
        symtrust(
            tmp.path(),
            &[
                "labels",
                "export",
                "--site",
                fresh_s,
                "--format",
                format,
                "--out",
                again.to_str().unwrap(),
            ],
        )
        .expect_code(0);
        assert!(
            std::fs::read(&again).unwrap() == std::fs::read(&out).unwrap(),
            "{format} export differs after the round trip"
        );
    }
}
