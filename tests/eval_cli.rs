//! `symtrust eval` and `symtrust compare` end to end on the synthetic site.
//!
//! The hand-checked evaluation builds a detections file whose every figure was
//! worked out by hand below from the published definitions (all-point AP as in
//! Pascal VOC 2010 on; precision and recall as in any IR textbook); the model
//! runs check the folder layout, the record's self-consistency, sharding and
//! the comparison exit codes.

mod util;

use serde_json::Value;
use std::path::Path;
use std::sync::OnceLock;
use symtrust_labels::BBox;
use symtrust_labels::detections::{
    DETECTIONS_SCHEMA_VERSION, Detection, DetectionSet, write_detections,
};
use util::{copy_dir, snapshot, symtrust, synthetic_site};

const HELD: &str = "fp-a-0002";

/// A synthetic site with a crop library and a 2-epoch model, built once.
fn trained() -> &'static (tempfile::TempDir, String) {
    static SITE: OnceLock<(tempfile::TempDir, String)> = OnceLock::new();
    SITE.get_or_init(|| {
        let tmp = tempfile::tempdir().unwrap();
        synthetic_site(tmp.path());
        symtrust(tmp.path(), &["crops", "build", "--site", "site", "--quiet"]).expect_code(0);
        let run = symtrust(
            tmp.path(),
            &[
                "train", "--site", "site", "--epochs", "2", "--quiet", "--json",
            ],
        )
        .expect_code(0);
        let id = run.json()["id"].as_str().unwrap().to_string();
        (tmp, id)
    })
}

/// A copy of the trained site in `dest`; returns the model folder (relative to `dest`).
fn trained_copy(dest: &Path) -> String {
    let (tmp, id) = trained();
    copy_dir(&tmp.path().join("site"), &dest.join("site"));
    format!("site/models/{id}")
}

fn read_json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap())
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// The accepted symbols of a sheet: (class, box).
fn accepted(site: &Path, sheet: &str) -> Vec<(String, BBox)> {
    let doc = read_json(&site.join(format!("labels/{sheet}.json")));
    doc["symbols"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["state"] == "accepted")
        .map(|s| {
            let b = &s["box"];
            (
                s["class"].as_str().unwrap().to_string(),
                BBox::new(
                    b["x"].as_f64().unwrap(),
                    b["y"].as_f64().unwrap(),
                    b["w"].as_f64().unwrap(),
                    b["h"].as_f64().unwrap(),
                ),
            )
        })
        .collect()
}

fn det(class: &str, score: f64, b: BBox) -> Detection {
    Detection {
        sheet: HELD.into(),
        class: class.into(),
        score,
        x: b.x,
        y: b.y,
        w: b.w,
        h: b.h,
    }
}

/// Five detections with a known fate on the held-out sheet (see the test).
fn hand_detections(site: &Path) -> (Vec<Detection>, usize) {
    let truths = accepted(site, HELD);
    let n = truths.len();
    assert!(n >= 10, "the synthetic held-out sheet carries {n} symbols");
    let (c0, b0) = truths[0].clone();
    let (c1, b1) = truths[1].clone();
    let (c2, b2) = truths[2].clone();
    let other = ["bubble_field", "pump"]
        .into_iter()
        .find(|c| *c != c1)
        .unwrap();
    // A box on blank paper: no truth within 300 px, not in an ignore region.
    let doc = read_json(&site.join(format!("labels/{HELD}.json")));
    let ignore: Vec<BBox> = doc["ignore"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            let b = &r["box"];
            BBox::new(
                b["x"].as_f64().unwrap(),
                b["y"].as_f64().unwrap(),
                b["w"].as_f64().unwrap(),
                b["h"].as_f64().unwrap(),
            )
        })
        .collect();
    let w = doc["sheet"]["width"].as_f64().unwrap();
    let h = doc["sheet"]["height"].as_f64().unwrap();
    let mut blank = None;
    'search: for gy in (100..(h as i64 - 100)).step_by(50) {
        for gx in (100..(w as i64 - 100)).step_by(50) {
            let (x, y) = (gx as f64, gy as f64);
            let far = truths.iter().all(|(_, b)| {
                let (cx, cy) = b.center();
                (cx - x).abs() > 300.0 || (cy - y).abs() > 300.0
            });
            let free = ignore.iter().all(|r| !r.contains_point(x, y));
            if far && free {
                blank = Some(BBox::centered(x, y, 60.0, 60.0));
                break 'search;
            }
        }
    }
    let blank = blank.expect("the sheet has blank paper");
    let mut shifted = b0;
    shifted.x += 1.0;
    (
        vec![
            det(&c0, 0.95, blank),  // background: a false alarm on paper
            det(&c0, 0.9, b0),      // hit on symbol 0
            det(&c0, 0.8, shifted), // duplicate of symbol 0
            det(other, 0.7, b1),    // wrong class on symbol 1
            det(&c2, 0.6, b2),      // hit on symbol 2
        ],
        n,
    )
}

fn write_set(path: &Path, detections: Vec<Detection>) {
    write_detections(
        path,
        &DetectionSet {
            schema_version: DETECTIONS_SCHEMA_VERSION,
            model: None,
            detections,
        },
    )
    .unwrap();
}

fn close(a: &Value, b: f64) {
    let a = a.as_f64().unwrap_or_else(|| panic!("{a} is not a number"));
    assert!((a - b).abs() < 1e-12, "{a} != {b}");
}

#[test]
fn figures_of_a_hand_made_detections_file_are_the_hand_worked_ones() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    let (dets, n) = hand_detections(&site);
    write_set(&tmp.path().join("hand.csv"), dets.clone());
    symtrust(
        tmp.path(),
        &[
            "eval",
            "--site",
            "site",
            "--detections",
            "hand.csv",
            "--out",
            "ev",
            "--quiet",
        ],
    )
    .expect_code(0);
    let m = read_json(&tmp.path().join("ev/metrics.json"));
    assert_eq!(m["schema_version"], 1);
    let e = &m["sheet_level"];
    let nf = n as f64;
    // Ranked: .95 F, .9 T, .8 F (duplicate), .7 F (wrong class), .6 T.
    // Precision after each: 0, 1/2, 1/3, 1/4, 2/5; recall steps at .9 and .6
    // by 1/N each. All-point AP (envelope): 1/N * 1/2 + 1/N * 2/5 = 0.9 / N.
    close(&e["micro"]["ap"]["all_point"], 0.9 / nf);
    assert_eq!(e["micro"]["n_truths"], n);
    assert_eq!(e["micro"]["n_detections"], 5);
    // F1 at .9: 2 (1/2)(1/N) / (1/2 + 1/N); at .6: 2 (2/5)(2/N) / (2/5 + 2/N).
    // For N >= 10 the second is larger, so the operating threshold is 0.6.
    let f1 = |p: f64, r: f64| 2.0 * p * r / (p + r);
    assert!(f1(0.4, 2.0 / nf) > f1(0.5, 1.0 / nf));
    close(&e["operating_threshold"], 0.6);
    close(&e["operating"]["precision"], 0.4);
    close(&e["operating"]["recall"], 2.0 / nf);
    let row = &e["per_sheet"][0];
    assert_eq!(row["sheet"], HELD);
    assert_eq!(
        (
            row["n_kept"].as_u64(),
            row["true_positives"].as_u64(),
            row["false_alarms"].as_u64(),
            row["duplicates"].as_u64(),
            row["misses"].as_u64()
        ),
        (Some(5), Some(2), Some(3), Some(1), Some(n as u64 - 2))
    );
    // Every detection's fate, in the file's order.
    let kinds: Vec<&str> = m["matches"]["detections"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| d["kind"].as_str().unwrap())
        .collect();
    assert_eq!(
        kinds,
        ["background", "hit", "duplicate", "wrong_class", "hit"]
    );
    let matches = std::fs::read_to_string(tmp.path().join("ev/matches.csv")).unwrap();
    assert_eq!(matches.lines().count(), 6, "{matches}");
    assert!(matches.lines().nth(4).unwrap().contains("wrong_class"));
    // The record names the file and hashes every input.
    assert_eq!(m["detector"]["kind"], "file");
    assert_eq!(
        m["detector"]["sha256"].as_str().unwrap(),
        symtrust_labels::hash::sha256_hex(&std::fs::read(tmp.path().join("hand.csv")).unwrap())
    );
    let stamp = &m["sheets"][0];
    assert_eq!(
        stamp["labels_sha256"].as_str().unwrap(),
        symtrust_labels::hash::sha256_hex(
            &std::fs::read(site.join(format!("labels/{HELD}.json"))).unwrap()
        )
    );
    assert!(m["trust_statement"].as_str().unwrap().starts_with(&format!(
        "On 1 held-out sheet with {n} labelled symbols, at score >= 0.600"
    )));
    assert!(m["caution"].as_str().unwrap().contains("qualified people"));
    // No crop level without a model.
    assert!(m["crop_level"].is_null());

    // The same detections as COCO-format results, with the exported COCO file
    // as the index, give the same figures.
    symtrust(
        tmp.path(),
        &[
            "labels",
            "export",
            "--site",
            "site",
            "--format",
            "coco",
            "--out",
            "index.json",
            "--quiet",
        ],
    )
    .expect_code(0);
    let index = read_json(&tmp.path().join("index.json"));
    let image_id = index["images"]
        .as_array()
        .unwrap()
        .iter()
        .find(|i| i["file_name"].as_str().unwrap().contains(HELD))
        .unwrap()["id"]
        .clone();
    let cat = |name: &str| {
        index["categories"]
            .as_array()
            .unwrap()
            .iter()
            .find(|c| c["name"] == name)
            .unwrap()["id"]
            .clone()
    };
    let results: Vec<Value> = dets
        .iter()
        .map(|d| {
            serde_json::json!({
                "image_id": image_id, "category_id": cat(&d.class),
                "bbox": [d.x, d.y, d.w, d.h], "score": d.score
            })
        })
        .collect();
    std::fs::write(
        tmp.path().join("results.json"),
        serde_json::to_vec(&results).unwrap(),
    )
    .unwrap();
    symtrust(
        tmp.path(),
        &[
            "eval",
            "--site",
            "site",
            "--detections",
            "results.json",
            "--coco-index",
            "index.json",
            "--out",
            "ev-coco",
            "--quiet",
        ],
    )
    .expect_code(0);
    let c = read_json(&tmp.path().join("ev-coco/metrics.json"));
    assert_eq!(c["sheet_level"], m["sheet_level"]);
    assert_eq!(c["detector"]["format"], "coco");
}

/// Runs `eval` expecting bad input (exit 2) naming `needle`, and no output folder.
fn refused(dir: &Path, args: &[&str], needle: &str) {
    let before = snapshot(&dir.join("site"));
    let run = symtrust(dir, args).expect_code(2);
    assert!(
        run.stderr.contains(needle),
        "stderr lacks {needle:?}:\n{}",
        run.stderr
    );
    assert!(!dir.join("bad-ev").exists(), "nothing half-written");
    assert_eq!(snapshot(&dir.join("site")), before, "the site is unchanged");
}

#[test]
fn bad_evaluation_input_is_refused_by_name() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    let (dets, _) = hand_detections(&site);
    let eval = |file: &str| -> Vec<String> {
        [
            "eval",
            "--site",
            "site",
            "--detections",
            file,
            "--out",
            "bad-ev",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect()
    };
    let run = |dir: &Path, args: &[String], needle: &str| {
        let a: Vec<&str> = args.iter().map(String::as_str).collect();
        refused(dir, &a, needle)
    };

    // A detection centred outside the sheet.
    let mut outside = dets.clone();
    outside[0].x = 1.0e6;
    write_set(&tmp.path().join("outside.csv"), outside);
    run(tmp.path(), &eval("outside.csv"), "outside the");

    // A NaN score (the file reader refuses it, naming the line).
    let mut text = std::fs::read_to_string({
        write_set(&tmp.path().join("ok.csv"), dets.clone());
        tmp.path().join("ok.csv")
    })
    .unwrap();
    text = text.replacen(",0.95,", ",NaN,", 1);
    std::fs::write(tmp.path().join("nan.csv"), text).unwrap();
    run(tmp.path(), &eval("nan.csv"), "nan.csv");

    // A class the site does not have.
    let mut alien = dets.clone();
    alien[1].class = "heat_exchanger".into();
    write_set(&tmp.path().join("alien.csv"), alien);
    run(tmp.path(), &eval("alien.csv"), "heat_exchanger");

    // A sheet the site does not have.
    let mut foreign = dets.clone();
    foreign[1].sheet = "other-site-0001".into();
    write_set(&tmp.path().join("foreign.csv"), foreign);
    run(tmp.path(), &eval("foreign.csv"), "other-site-0001");

    // A held-out sheet without accepted labels.
    let doc_path = site.join(format!("labels/{HELD}.json"));
    let original = std::fs::read_to_string(&doc_path).unwrap();
    let mut doc: Value = serde_json::from_str(&original).unwrap();
    for s in doc["symbols"].as_array_mut().unwrap() {
        s["state"] = "draft".into();
    }
    std::fs::write(&doc_path, serde_json::to_vec_pretty(&doc).unwrap()).unwrap();
    run(tmp.path(), &eval("ok.csv"), "no accepted labels");
    std::fs::write(&doc_path, original).unwrap();

    // No held-out sheets at all.
    let toml_path = site.join("site.toml");
    let config = std::fs::read_to_string(&toml_path).unwrap();
    std::fs::write(
        &toml_path,
        config.replace(&format!("held_out = [\"{HELD}\"]"), "held_out = []"),
    )
    .unwrap();
    run(tmp.path(), &eval("ok.csv"), "no held-out sheets");
    std::fs::write(&toml_path, &config).unwrap();

    // A bad operating policy.
    let mut args = eval("ok.csv");
    args.extend(["--target-precision".to_string(), "1.5".to_string()]);
    run(tmp.path(), &args, "--target-precision");
}

fn model_eval(dir: &Path, model: &str, out: &str, extra: &[&str]) -> Value {
    let mut args = vec![
        "eval", "--site", "site", "--model", model, "--out", out, "--quiet",
    ];
    args.extend_from_slice(extra);
    symtrust(dir, &args).expect_code(0);
    read_json(&dir.join(out).join("metrics.json"))
}

#[test]
fn a_model_evaluation_is_complete_and_consistent() {
    let tmp = tempfile::tempdir().unwrap();
    let model = trained_copy(tmp.path());
    let m = model_eval(tmp.path(), &model, "ev", &["--resamples", "200"]);
    assert_eq!(m["detector"]["kind"], "model");
    let weights = std::fs::read(tmp.path().join(&model).join("weights.safetensors")).unwrap();
    assert_eq!(
        m["detector"]["weights_sha256"].as_str().unwrap(),
        symtrust_labels::hash::sha256_hex(&weights)
    );
    let stamp = &m["sheets"][0];
    assert!(stamp["windows"].as_u64().unwrap() > 1000);
    // Blank-paper skipping: most of a sheet is paper, and no labelled symbol
    // of the held-out sheet sits on a window blank enough to be skipped.
    assert!(stamp["windows_skipped"].as_u64().unwrap() > 0, "{stamp}");
    assert_eq!(stamp["truths_on_blank"], 0, "{stamp}");
    // Crop level: one decision per crop, the confusion table counts them all.
    let crops = &m["crop_level"];
    let n_crops = crops["crops"].as_array().unwrap().len() as u64;
    assert!(n_crops > 20);
    let total: u64 = crops["evaluation"]["confusion"]["counts"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|r| r.as_array().unwrap().iter().map(|v| v.as_u64().unwrap()))
        .sum();
    assert_eq!(total, n_crops);
    // Sheet level: per-sheet rows add up to the per-class rows at the operating point.
    let e = &m["sheet_level"];
    if let Some(rows) = e["per_sheet"].as_array() {
        let tp: u64 = rows
            .iter()
            .map(|r| r["true_positives"].as_u64().unwrap())
            .sum();
        let class_tp: u64 = e["class_operating"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c["true_positives"].as_u64().unwrap())
            .sum();
        assert_eq!(tp, class_tp);
    }
    // Every detection in detections.csv is in the record, and nothing is capped by default.
    let set = symtrust_labels::detections::read_detections(&tmp.path().join("ev/detections.csv"))
        .unwrap();
    assert_eq!(
        set.detections.len() as u64,
        e["micro"]["n_detections"].as_u64().unwrap()
    );
    assert!(m["detect_settings"]["max_per_sheet"].is_null());
    // One held-out sheet resamples only to itself: no interval, though the
    // settings asked for the bootstrap are recorded.
    assert_eq!(m["sheets"].as_array().unwrap().len(), 1);
    assert_eq!(e["config"]["bootstrap"]["resamples"], 200);
    assert!(e["intervals"].is_null(), "{}", e["intervals"]);
    assert_eq!(e["iou_sweep"].as_array().unwrap().len(), 9);
}

/// Platt scaling as the method defines it, `sigmoid(a * logit(s) + b)`, with
/// the score clamped away from 0 and 1 so the logit is finite.
fn platt(a: f64, b: f64, s: f64) -> f64 {
    let s = s.clamp(1e-12, 1.0 - 1e-12);
    1.0 / (1.0 + (-(a * (s / (1.0 - s)).ln() + b)).exp())
}

#[test]
fn calibration_is_fitted_on_validation_sheets_and_judged_on_held_out_ones() {
    let tmp = tempfile::tempdir().unwrap();
    let model = trained_copy(tmp.path());
    let m = model_eval(
        tmp.path(),
        &model,
        "cal",
        &["--calibrate", "--resamples", "50"],
    );
    let fit = &m["calibration_fit"];
    let (a, b) = (
        fit["scaling"]["a"].as_f64().unwrap(),
        fit["scaling"]["b"].as_f64().unwrap(),
    );
    assert!(a.is_finite() && b.is_finite(), "{fit}");
    // "Before" is the held-out calibration the sheet level reports.
    assert_eq!(fit["held_out_raw"], m["sheet_level"]["calibration"]);
    // Brier scores recomputed here from the match log: the mean of
    // (p - y)^2 with y = 1 for a hit (the definition of the Brier score).
    let dets = m["matches"]["detections"].as_array().unwrap();
    assert!(!dets.is_empty());
    let brier = |p: &dyn Fn(f64) -> f64| {
        dets.iter()
            .map(|d| {
                let y = f64::from(u8::from(d["kind"] == "hit"));
                (p(d["score"].as_f64().unwrap()) - y).powi(2)
            })
            .sum::<f64>()
            / dets.len() as f64
    };
    close(&fit["held_out_raw"]["brier"], brier(&|s| s));
    close(&fit["held_out_scaled"]["brier"], brier(&|s| platt(a, b, s)));
    assert_eq!(
        fit["held_out_scaled"]["n"].as_u64().unwrap(),
        dets.len() as u64
    );
    // Without the flag no fit is made.
    let plain = model_eval(tmp.path(), &model, "plain", &["--resamples", "50"]);
    assert!(plain["calibration_fit"].is_null());
    // A detections file has no validation sweep to fit on.
    refused(
        tmp.path(),
        &[
            "eval",
            "--site",
            "site",
            "--detections",
            "plain/detections.csv",
            "--calibrate",
            "--out",
            "bad-ev",
        ],
        "--calibrate needs --model",
    );
}

#[test]
fn shards_merge_into_exactly_the_unsharded_figures() {
    let tmp = tempfile::tempdir().unwrap();
    let model = trained_copy(tmp.path());
    // Evaluate on two sheets (the second is a training sheet: fine for this check).
    let toml_path = tmp.path().join("site/site.toml");
    let config = std::fs::read_to_string(&toml_path).unwrap();
    std::fs::write(
        &toml_path,
        config.replace(
            &format!("held_out = [\"{HELD}\"]"),
            &format!("held_out = [\"{HELD}\", \"fp-a-0000\"]"),
        ),
    )
    .unwrap();
    let extra = ["--resamples", "100"];
    let whole = model_eval(tmp.path(), &model, "whole", &extra);
    let mut a = extra.to_vec();
    a.extend(["--shard", "1/2"]);
    let s1 = model_eval(tmp.path(), &model, "s1", &a);
    let mut b = extra.to_vec();
    b.extend(["--shard", "2/2"]);
    let s2 = model_eval(tmp.path(), &model, "s2", &b);
    assert_eq!(s1["sheets"].as_array().unwrap().len(), 1);
    assert_eq!(s2["sheets"].as_array().unwrap().len(), 1);
    symtrust(
        tmp.path(),
        &[
            "eval",
            "--site",
            "site",
            "--merge",
            "s2",
            "s1",
            "--out",
            "merged",
            "--resamples",
            "100",
            "--quiet",
        ],
    )
    .expect_code(0);
    let merged = read_json(&tmp.path().join("merged/metrics.json"));
    assert!(
        merged["sheet_level"] == whole["sheet_level"],
        "merged sheet_level differ from the unsharded run"
    );
    assert!(
        merged["crop_level"] == whole["crop_level"],
        "merged crop_level differ from the unsharded run"
    );
    assert!(
        merged["matches"] == whole["matches"],
        "merged matches differ from the unsharded run"
    );
    assert!(
        merged["sheets"] == whole["sheets"],
        "merged sheets differ from the unsharded run"
    );
    // A missing shard is refused.
    let run = symtrust(
        tmp.path(),
        &[
            "eval",
            "--site",
            "site",
            "--merge",
            "s1",
            "--out",
            "half",
            "--resamples",
            "100",
        ],
    )
    .expect_code(2);
    assert!(
        run.stderr.contains("shard 2/2 is missing"),
        "{}",
        run.stderr
    );
}

#[test]
fn compare_passes_an_equal_challenger_and_rejects_a_worse_one() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    // Champion: every symbol found exactly. Challenger A: the same. Challenger B:
    // one class entirely missed.
    let truths = accepted(&site, HELD);
    let perfect: Vec<Detection> = truths.iter().map(|(c, b)| det(c, 0.9, *b)).collect();
    let lost = truths[0].0.clone();
    let worse: Vec<Detection> = perfect
        .iter()
        .filter(|d| d.class != lost)
        .cloned()
        .collect();
    write_set(&tmp.path().join("perfect.csv"), perfect);
    write_set(&tmp.path().join("worse.csv"), worse);
    for (file, out) in [("perfect.csv", "ev-champion"), ("worse.csv", "ev-worse")] {
        symtrust(
            tmp.path(),
            &[
                "eval",
                "--site",
                "site",
                "--detections",
                file,
                "--out",
                out,
                "--quiet",
            ],
        )
        .expect_code(0);
    }
    let same = symtrust(
        tmp.path(),
        &[
            "compare",
            "--site",
            "site",
            "--champion",
            "ev-champion",
            "--challenger",
            "ev-champion",
            "--out",
            "cmp-same",
            "--json",
            "--quiet",
        ],
    )
    .expect_code(0);
    assert_eq!(same.json()["outcome"], "not_worse");
    let c = read_json(&tmp.path().join("cmp-same/comparison.json"));
    close(&c["ap"]["map"]["difference"]["estimate"], 0.0);

    let rejected = symtrust(
        tmp.path(),
        &[
            "compare",
            "--site",
            "site",
            "--champion",
            "ev-champion",
            "--challenger",
            "ev-worse",
            "--out",
            "cmp-worse",
            "--json",
            "--quiet",
        ],
    )
    .expect_code(3);
    let j = rejected.json();
    assert_eq!(j["outcome"], "worse");
    assert!(
        j["summary"].as_str().unwrap().contains(&lost),
        "{}",
        j["summary"]
    );
    let c = read_json(&tmp.path().join("cmp-worse/comparison.json"));
    let line = c["verdict"]["lines"]
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["class"] == lost.as_str())
        .unwrap();
    assert_eq!(line["judgement"], "worse");
    // The lost class's AP falls from 1 to 0 on the one held-out sheet.
    close(&line["upper"], -1.0);

    // Evaluations against different labels are not comparable.
    let doc_path = site.join(format!("labels/{HELD}.json"));
    let mut doc: Value = read_json(&doc_path);
    doc["symbols"][0]["state"] = "rejected".into();
    std::fs::write(&doc_path, serde_json::to_vec_pretty(&doc).unwrap()).unwrap();
    symtrust(
        tmp.path(),
        &[
            "eval",
            "--site",
            "site",
            "--detections",
            "perfect.csv",
            "--out",
            "ev-relabelled",
            "--quiet",
        ],
    )
    .expect_code(0);
    let run = symtrust(
        tmp.path(),
        &[
            "compare",
            "--site",
            "site",
            "--champion",
            "ev-champion",
            "--challenger",
            "ev-relabelled",
            "--out",
            "cmp-bad",
        ],
    )
    .expect_code(2);
    assert!(run.stderr.contains("labels differ"), "{}", run.stderr);
}

#[test]
fn compare_evaluates_model_folders_itself() {
    let tmp = tempfile::tempdir().unwrap();
    let model = trained_copy(tmp.path());
    symtrust(
        tmp.path(),
        &[
            "compare",
            "--site",
            "site",
            "--champion",
            &model,
            "--challenger",
            &model,
            "--out",
            "cmp",
            "--resamples",
            "100",
            "--quiet",
        ],
    )
    .expect_code(0);
    let c = read_json(&tmp.path().join("cmp/comparison.json"));
    assert_eq!(c["outcome"], "not_worse");
    // The same model: McNemar sees no discordant crop.
    let t = &c["mcnemar"];
    assert_eq!(
        (t["champion_only"].as_u64(), t["challenger_only"].as_u64()),
        (Some(0), Some(0))
    );
    assert!(tmp.path().join("cmp/champion/metrics.json").is_file());
    assert!(tmp.path().join("cmp/challenger/metrics.json").is_file());
}

#[test]
fn detect_propose_adds_drafts_and_never_touches_decided_labels() {
    let tmp = tempfile::tempdir().unwrap();
    let model = trained_copy(tmp.path());
    let doc_path = tmp.path().join("site/labels/fp-a-0001.json");
    let before = read_json(&doc_path);
    let decided = |doc: &Value| -> Vec<Value> {
        doc["symbols"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|s| s["state"] != "draft")
            .cloned()
            .collect()
    };
    let propose = || {
        symtrust(
            tmp.path(),
            &[
                "detect",
                "--site",
                "site",
                "--model",
                &model,
                "--out",
                "found.csv",
                "--min-score",
                "0.3",
                "--propose",
                "fp-a-0001",
                "--quiet",
                "--json",
            ],
        )
        .expect_code(0)
        .json()
    };
    let first = propose();
    let merge = &first["proposed"][0]["merge"];
    let after = read_json(&doc_path);
    assert_eq!(
        decided(&after),
        decided(&before),
        "accepted labels are untouched"
    );
    let drafts: Vec<&Value> = after["symbols"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["state"] == "draft")
        .collect();
    assert_eq!(drafts.len() as u64, merge["added"].as_u64().unwrap());
    for d in &drafts {
        assert_eq!(d["origin"]["kind"], "proposed");
        assert_eq!(
            d["origin"]["model"].as_str().unwrap(),
            model.trim_start_matches("site/models/")
        );
    }
    // A second run replaces its own undecided proposals instead of piling up.
    let second = propose();
    let again = read_json(&doc_path);
    let n_drafts = again["symbols"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["state"] == "draft")
        .count();
    assert_eq!(n_drafts, drafts.len());
    let m2 = &second["proposed"][0]["merge"];
    assert_eq!(m2["replaced"], merge["added"]);
}
