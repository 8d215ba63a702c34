//! End to end: `init`, `synth`, `sheets add`, `crops build`, `demo` and their bad input.

mod util;

use std::path::Path;
use util::{drawing, snapshot, symtrust, synthetic_site};

fn init_site(dir: &Path) -> std::path::PathBuf {
    symtrust(dir, &["init", "site", "--quiet"]).expect_code(0);
    dir.join("site")
}

#[test]
fn init_creates_a_site_and_refuses_to_overwrite_one() {
    let tmp = tempfile::tempdir().unwrap();
    let site = init_site(tmp.path());
    assert!(site.join("site.toml").is_file());
    assert!(site.join("sheets").is_dir() && site.join("labels").is_dir());
    let text = std::fs::read_to_string(site.join("site.toml")).unwrap();
    assert!(
        text.contains("window = 100") && text.contains("dpi = 200.0"),
        "{text}"
    );
    let again = symtrust(tmp.path(), &["init", "site"]).expect_code(2);
    assert!(again.stderr.contains("already exists"), "{}", again.stderr);
}

#[test]
fn a_folder_that_is_not_a_site_is_named() {
    let tmp = tempfile::tempdir().unwrap();
    let run = symtrust(tmp.path(), &["crops", "build", "--site", "nowhere"]).expect_code(2);
    assert!(
        run.stderr.contains("nowhere") && run.stderr.contains("not a symtrust site"),
        "{}",
        run.stderr
    );
}

#[test]
fn sheets_add_records_resolution_and_resamples() {
    let tmp = tempfile::tempdir().unwrap();
    let site = init_site(tmp.path());
    // 400 x 300 px at 400 dpi -> 200 x 150 px at the site's 200 dpi.
    let png = symtrust_labels::raster::encode_png_with_dpi(&drawing(400, 300), 400.0).unwrap();
    std::fs::write(tmp.path().join("hi-res.png"), png).unwrap();
    // A JPEG without a density: the site default is assumed, and said so.
    image::DynamicImage::ImageLuma8(drawing(120, 100))
        .save(tmp.path().join("photo.jpg"))
        .unwrap();
    let run = symtrust(
        tmp.path(),
        &[
            "sheets",
            "add",
            "--site",
            "site",
            "hi-res.png",
            "photo.jpg",
            "--json",
        ],
    )
    .expect_code(0);
    let v = run.json();
    let hi = &v["results"][0]["sheet"];
    assert_eq!(
        (hi["width"].as_u64(), hi["height"].as_u64()),
        (Some(200), Some(150))
    );
    assert_eq!(hi["dpi_source"], "file_metadata");
    let jpg = &v["results"][1]["sheet"];
    assert_eq!(jpg["dpi_source"], "site_default");
    assert!(site.join("sheets/hi-res.png").is_file());
    assert!(site.join("labels/photo.json").is_file());
    // Adding the same file again changes nothing.
    let before = snapshot(&site.join("labels"));
    let again = symtrust(
        tmp.path(),
        &["sheets", "add", "--site", "site", "hi-res.png"],
    )
    .expect_code(0);
    assert!(
        again.stderr.contains("already registered"),
        "{}",
        again.stderr
    );
    assert_eq!(snapshot(&site.join("labels")), before);
}

#[test]
fn sheets_add_refuses_bad_images_by_name_and_keeps_the_good_ones() {
    let tmp = tempfile::tempdir().unwrap();
    let site = init_site(tmp.path());
    let good = symtrust_labels::raster::encode_png_with_dpi(&drawing(200, 200), 200.0).unwrap();
    std::fs::write(tmp.path().join("good.png"), &good).unwrap();
    std::fs::write(tmp.path().join("cut.png"), &good[..good.len() / 2]).unwrap();
    std::fs::write(
        tmp.path().join("junk.tif"),
        b"II*\0 this is not really a tiff",
    )
    .unwrap();
    std::fs::write(tmp.path().join("bad name!.png"), &good).unwrap();
    let run = symtrust(
        tmp.path(),
        &[
            "sheets",
            "add",
            "--site",
            "site",
            "good.png",
            "cut.png",
            "junk.tif",
            "bad name!.png",
            "missing.png",
        ],
    )
    .expect_code(2);
    for name in ["cut.png", "junk.tif", "bad name!.png", "missing.png"] {
        assert!(
            run.stderr.contains(name),
            "{name} not named:\n{}",
            run.stderr
        );
    }
    assert!(
        run.stderr.contains("4 of 5 files were not registered"),
        "{}",
        run.stderr
    );
    let labels: Vec<_> = std::fs::read_dir(site.join("labels"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".json") && !n.starts_with('.'))
        .collect();
    assert_eq!(labels, vec!["good.json"]);
    let sheets: Vec<_> = std::fs::read_dir(site.join("sheets")).unwrap().collect();
    assert_eq!(sheets.len(), 1, "only the good sheet is copied");
}

#[test]
fn sheets_add_refuses_an_absurdly_large_image_before_decoding() {
    let tmp = tempfile::tempdir().unwrap();
    let site = init_site(tmp.path());
    let toml = std::fs::read_to_string(site.join("site.toml")).unwrap();
    std::fs::write(
        site.join("site.toml"),
        toml.replace("max_sheet_pixels = 600000000", "max_sheet_pixels = 10000"),
    )
    .unwrap();
    let png = symtrust_labels::raster::encode_png_with_dpi(&drawing(200, 100), 200.0).unwrap();
    std::fs::write(tmp.path().join("big.png"), png).unwrap();
    let run = symtrust(tmp.path(), &["sheets", "add", "--site", "site", "big.png"]).expect_code(2);
    assert!(
        run.stderr.contains("big.png") && run.stderr.contains("exceeds the limit"),
        "{}",
        run.stderr
    );
}

#[test]
fn synth_then_crops_build_keeps_held_out_sheets_out() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    let config = std::fs::read_to_string(site.join("site.toml")).unwrap();
    assert!(config.contains("held_out = [\"fp-a-0002\"]"), "{config}");
    let run = symtrust(tmp.path(), &["crops", "build", "--site", "site", "--json"]).expect_code(0);
    let v = run.json();
    let dir = Path::new(v["dir"].as_str().unwrap());
    let dir = if dir.is_absolute() {
        dir.to_path_buf()
    } else {
        tmp.path().join(dir)
    };
    let index = std::fs::read_to_string(dir.join("index.csv")).unwrap();
    let rows: Vec<&str> = index.lines().skip(1).collect();
    assert!(rows.len() > 100, "{} crops", rows.len());
    assert!(
        rows.iter().all(|r| !r.contains("fp-a-0002")),
        "a held-out sheet gave a crop"
    );
    assert!(
        rows.iter().any(|r| r.contains(",positive,"))
            && rows.iter().any(|r| r.contains(",negative,"))
    );
    assert!(v["counts"]["positive"].as_u64().unwrap() > 0);
    // The crops are real windows: positives hold ink, files match their hashes.
    let lib = symtrust_labels::crops::CropLibrary::open(&dir).unwrap();
    for r in lib.records.iter().step_by(25) {
        let px = lib.load_pixels(r).unwrap();
        assert_eq!(px.len(), 100 * 100);
        assert!(px.iter().any(|p| *p < 128), "{} has no ink", r.file);
    }
    // A second build with the same labels and seed reuses the same library.
    let again =
        symtrust(tmp.path(), &["crops", "build", "--site", "site", "--json"]).expect_code(0);
    assert_eq!(again.json()["id"], v["id"]);
    assert_eq!(again.json()["reused"], true);
}

fn crops_build_fails_cleanly(site: &Path, tmp: &Path, expect: &[&str]) {
    let before = snapshot(site);
    let run = symtrust(tmp, &["crops", "build", "--site", "site"]).expect_code(2);
    for e in expect {
        assert!(run.stderr.contains(e), "missing {e:?} in:\n{}", run.stderr);
    }
    assert_eq!(snapshot(site), before, "a failed build changed the site");
}

#[test]
fn crops_build_refuses_a_truncated_label_document_with_its_line() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    let doc = site.join("labels/fp-a-0001.json");
    let text = std::fs::read_to_string(&doc).unwrap();
    std::fs::write(&doc, &text[..text.len() / 3]).unwrap();
    crops_build_fails_cleanly(&site, tmp.path(), &["fp-a-0001.json:"]);
}

#[test]
fn crops_build_refuses_a_document_for_a_missing_sheet() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    std::fs::remove_file(site.join("sheets/fp-a-0000.png")).unwrap();
    crops_build_fails_cleanly(&site, tmp.path(), &["fp-a-0000.png"]);
}

fn edit_first_symbol(site: &Path, f: impl Fn(&mut serde_json::Value)) {
    let path = site.join("labels/fp-a-0000.json");
    let mut v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
    f(&mut v["symbols"][0]);
    std::fs::write(&path, serde_json::to_string_pretty(&v).unwrap()).unwrap();
}

#[test]
fn crops_build_refuses_an_unknown_class() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    edit_first_symbol(&site, |s| s["class"] = "gate_valve".into());
    crops_build_fails_cleanly(
        &site,
        tmp.path(),
        &["fp-a-0000.json", "s0001", "gate_valve"],
    );
}

#[test]
fn crops_build_refuses_a_box_partly_outside_the_sheet() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    edit_first_symbol(&site, |s| s["box"]["x"] = 3300.0.into());
    crops_build_fails_cleanly(&site, tmp.path(), &["fp-a-0000.json", "s0001", "outside"]);
}

#[test]
fn crops_build_refuses_a_changed_sheet() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    let other = std::fs::read(site.join("sheets/fp-a-0001.png")).unwrap();
    std::fs::write(site.join("sheets/fp-a-0000.png"), other).unwrap();
    crops_build_fails_cleanly(&site, tmp.path(), &["fp-a-0000.png", "SHA-256"]);
}

#[test]
fn every_command_has_help_with_an_example() {
    let tmp = tempfile::tempdir().unwrap();
    for cmd in [
        vec!["init", "--help"],
        vec!["synth", "--help"],
        vec!["sheets", "add", "--help"],
        vec!["crops", "build", "--help"],
        vec!["demo", "--help"],
        vec!["detect", "--help"],
        vec!["train", "--help"],
    ] {
        let run = symtrust(tmp.path(), &cmd).expect_code(0);
        assert!(run.stdout.contains("Example"), "{cmd:?}:\n{}", run.stdout);
    }
    let bad = symtrust(tmp.path(), &["crops", "bake"]).expect_code(2);
    assert!(bad.stderr.contains("bake"));
}

#[test]
fn demo_runs_the_whole_job_and_writes_the_report() {
    let tmp = tempfile::tempdir().unwrap();
    // One epoch per model keeps the test short; the README's demo trains four.
    let run = symtrust(
        tmp.path(),
        &["demo", "--out", "d", "--epochs", "1", "--json"],
    )
    .expect_code(0);
    let v = run.json();
    let report = std::path::PathBuf::from(v["report"].as_str().unwrap());
    assert!(report.is_file(), "{}", report.display());
    assert!(
        report.ends_with("d/reports/demo/index.html"),
        "{}",
        report.display()
    );
    let html = std::fs::read_to_string(&report).unwrap();
    assert!(
        html.contains("qualified people"),
        "the report carries the caution"
    );
    let statement = v["trust_statement"].as_str().unwrap();
    assert!(
        statement.starts_with("On 2 held-out sheets with"),
        "{statement}"
    );
    // HTML escapes ">=", so compare the opening words.
    assert!(
        html.contains(&statement[..40]),
        "the report opens with the same trust statement"
    );
    // The three evaluations exist and name the sheets they were made on.
    for (name, prefix) in [
        ("style-a-model-on-style-a", "fp-a-"),
        ("style-a-model-on-style-b", "fp-b-"),
        ("retrained-on-style-b", "fp-b-"),
    ] {
        let m: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(tmp.path().join("d/evals").join(name).join("metrics.json"))
                .unwrap(),
        )
        .unwrap();
        let sheets = m["sheets"].as_array().unwrap();
        assert!(!sheets.is_empty());
        assert!(
            sheets
                .iter()
                .all(|s| s["sheet"].as_str().unwrap().starts_with(prefix)),
            "{name}"
        );
        assert!(m["sheet_level"]["map_all_point"].is_number(), "{name}");
    }
    // Held-out sheets never gave a crop to either library.
    let held = symtrust_labels::site::Site::open(&tmp.path().join("d"))
        .unwrap()
        .config
        .held_out;
    assert_eq!(held.len(), 5, "{held:?}");
    for entry in std::fs::read_dir(tmp.path().join("d/crops")).unwrap() {
        let dir = entry.unwrap().path();
        if !dir.join("manifest.json").is_file() {
            continue;
        }
        let lib = symtrust_labels::crops::CropLibrary::open(&dir).unwrap();
        assert!(lib.records.iter().all(|r| !held.contains(&r.sheet)));
    }
}

#[test]
fn labels_check_passes_on_the_synthetic_plant() {
    let tmp = tempfile::tempdir().unwrap();
    synthetic_site(tmp.path());
    let run = symtrust(tmp.path(), &["labels", "check", "--site", "site", "--json"]).expect_code(0);
    let v = run.json();
    assert_eq!(v["errors"], 0, "{}", run.stdout);
    // Only "too few examples" warnings are expected on a 3-sheet plant.
    for f in v["findings"].as_array().unwrap() {
        assert_eq!(f["severity"], "warning", "{f}");
        assert!(
            f["symbol"].is_null(),
            "no symbol-level finding on exact ground truth: {f}"
        );
    }
}

#[test]
fn train_on_the_synthetic_plant_writes_a_checked_model() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    symtrust(tmp.path(), &["crops", "build", "--site", "site", "--quiet"]).expect_code(0);
    let run = symtrust(
        tmp.path(),
        &[
            "train", "--site", "site", "--epochs", "1", "--quiet", "--json",
        ],
    )
    .expect_code(0);
    let card = run.json();
    let id = card["id"].as_str().unwrap();
    let dir = site.join("models").join(id);
    let weights = std::fs::read(dir.join("weights.safetensors")).unwrap();
    assert_eq!(
        card["weights_sha256"].as_str().unwrap(),
        symtrust_labels::hash::sha256_hex(&weights),
        "the card's hash is the weights' SHA-256"
    );
    assert_eq!(
        card["classes"].as_array().unwrap().last().unwrap(),
        "background"
    );
    // A held-out sheet never reaches training: the library the model names has none.
    let lib = symtrust_labels::crops::CropLibrary::open(
        &site
            .join("crops")
            .join(card["data"]["crop_library"].as_str().unwrap()),
    )
    .unwrap();
    assert!(lib.records.iter().all(|r| r.sheet != "fp-a-0002"));

    // Sweep the model over a training sheet and the held-out sheet.
    let model = format!("site/models/{id}");
    let det = symtrust(
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
            "fp-a-0000",
            "fp-a-0002",
            "--quiet",
            "--json",
        ],
    )
    .expect_code(0);
    assert_eq!(det.json()["model"], card["id"]);
    let set = symtrust_labels::detections::read_detections(&tmp.path().join("found.csv")).unwrap();
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(site.join("labels/fp-a-0000.json")).unwrap())
            .unwrap();
    let (w, h) = (
        doc["sheet"]["width"].as_f64().unwrap(),
        doc["sheet"]["height"].as_f64().unwrap(),
    );
    for d in &set.detections {
        assert!(d.sheet == "fp-a-0000" || d.sheet == "fp-a-0002");
        assert!((0.3..=1.0).contains(&d.score), "{d:?}");
        let (cx, cy) = d.bbox().center();
        assert!((0.0..w).contains(&cx) && (0.0..h).contains(&cy), "{d:?}");
        // No detection centre inside an ignore region (title block, legend).
        for r in doc["ignore"].as_array().unwrap() {
            let b = &r["box"];
            let (x, y) = (b["x"].as_f64().unwrap(), b["y"].as_f64().unwrap());
            let inside = cx >= x
                && cx < x + b["w"].as_f64().unwrap()
                && cy >= y
                && cy < y + b["h"].as_f64().unwrap();
            assert!(!(inside && d.sheet == "fp-a-0000"), "{d:?} in {r}");
        }
    }
    // The file feeds hard-negative mining; detections on the held-out sheet are dropped.
    let held = set
        .detections
        .iter()
        .filter(|d| d.sheet == "fp-a-0002")
        .count();
    let mined = symtrust(
        tmp.path(),
        &[
            "crops",
            "build",
            "--site",
            "site",
            "--hard-negatives",
            "found.csv",
            "--quiet",
            "--json",
        ],
    )
    .expect_code(0);
    assert_eq!(mined.json()["dropped_held_out_detections"], held);
    // An unregistered sheet is bad input.
    let bad = symtrust(
        tmp.path(),
        &[
            "detect",
            "--site",
            "site",
            "--model",
            &model,
            "--out",
            "x.csv",
            "no-such-sheet",
        ],
    )
    .expect_code(2);
    assert!(bad.stderr.contains("no-such-sheet"), "{}", bad.stderr);
    assert!(!tmp.path().join("x.csv").exists());

    // Training without a crop library is bad input, named.
    let tmp2 = tempfile::tempdir().unwrap();
    synthetic_site(tmp2.path());
    let bad = symtrust(tmp2.path(), &["train", "--site", "site", "--quiet"]).expect_code(2);
    assert!(bad.stderr.contains("crops"), "{}", bad.stderr);
}
