//! A small evaluation of the synthetic plant for the report tests: a site of
//! A4 sheets at 100 dpi drawn by the synthetic generator, labelled with its
//! exact ground truth, and a simulated detector (seeded) that finds most
//! symbols, misses some, confuses some classes and raises false alarms, so
//! every kind of figure and gallery has something in it. The evaluation record
//! is computed by `symtrust_eval` itself, as `symtrust eval` would.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::calibration::fit_and_judge;
use symtrust_eval::crop_eval::evaluate_crops;
use symtrust_eval::match_log::match_log;
use symtrust_eval::record::{
    CropDecision, CropLevel, DetectorInfo, EvaluationRecord, METRICS_FILE, METRICS_SCHEMA_VERSION,
    RunStamp, SheetStamp,
};
use symtrust_eval::sheet_eval::{
    SheetEvalConfig, SheetInput, TruthSymbol, evaluate_sheets, prepare_sheets,
};
use symtrust_eval::statement::{CAUTION, trust_statement};
use symtrust_labels::SeededRng;
use symtrust_labels::detections::Detection;
use symtrust_labels::document::{IgnoreRegion, Origin, ReviewState, Symbol};
use symtrust_labels::hash::{sha256_file, sha256_hex};
use symtrust_labels::raster::encode_png_with_dpi;
use symtrust_labels::sheets::register_sheet;
use symtrust_labels::site::{ClassSpec, Site, SiteConfig};
use symtrust_labels::store::LabelStore;
use symtrust_labels::synth::{self, DraftingStyle, Paper, SynthConfig};

/// A site with one evaluation folder in it.
pub struct Fixture {
    /// Keeps the folder alive.
    pub tmp: tempfile::TempDir,
    /// The site folder.
    pub site: PathBuf,
    /// The evaluation folder.
    pub eval_dir: PathBuf,
    /// The record written there.
    pub record: EvaluationRecord,
}

/// How the simulated detector behaves.
#[derive(Debug, Clone, Copy)]
pub struct Detector {
    /// Chance a symbol is found with a high score.
    pub find: f64,
    /// False alarms per sheet.
    pub false_alarms: usize,
    /// Seed of its randomness.
    pub seed: u64,
}

fn classes(style: DraftingStyle) -> Vec<ClassSpec> {
    synth::classes(style)
        .into_iter()
        .map(|c| ClassSpec {
            name: c.name,
            description: c.description,
            nominal_mm: c.nominal_mm,
            rotatable: c.rotatable,
        })
        .collect()
}

/// Writes a site of `n` sheets of `style` under `root/site`.
pub fn write_site(root: &Path, style: DraftingStyle, n: usize, seed: u64) -> Site {
    let mut config = SiteConfig::new("Quillmoor Fictional Works (report test)", classes(style));
    config.dpi = 100.0;
    let mut site = Site::create(&root.join("site"), config).unwrap();
    let store = LabelStore::new(&site);
    let synth_config = SynthConfig {
        dpi: 100.0,
        ..SynthConfig::new(style, seed)
    };
    let mut ids = Vec::new();
    for i in 0..n {
        let sheet = synth::generate_sheet(&synth_config, i, Paper::A4);
        let path = site.sheets_dir().join(format!("{}.png", sheet.id));
        std::fs::write(&path, encode_png_with_dpi(&sheet.image, 100.0).unwrap()).unwrap();
        register_sheet(&site, &path).unwrap();
        let mut doc = store.load(&sheet.id).unwrap();
        for (k, s) in sheet.symbols.iter().enumerate() {
            doc.symbols.push(Symbol {
                id: format!("s{:04}", k + 1),
                class: s.class.clone(),
                bbox: s.bbox,
                state: ReviewState::Accepted,
                origin: Origin::Imported {
                    source: "synthetic plant generator".into(),
                },
                by: "symtrust-synth".into(),
                at: "2026-12-01T10:00:00Z".into(),
            });
        }
        for (k, r) in sheet.ignore.iter().enumerate() {
            doc.ignore.push(IgnoreRegion {
                id: format!("ig{}", k + 1),
                bbox: r.bbox,
                reason: r.reason.clone(),
            });
        }
        store.save(&doc, "symtrust-synth").unwrap();
        ids.push(sheet.id);
    }
    let mut c = site.config.clone();
    c.held_out = ids;
    site.save_config(c).unwrap();
    site
}

/// Simulated detections on one sheet.
fn detect(
    sheet: &str,
    truths: &[TruthSymbol],
    names: &[String],
    d: &Detector,
    w: u32,
    h: u32,
) -> Vec<Detection> {
    let mut rng = SeededRng::derive(d.seed, sheet);
    let mut out = Vec::new();
    for t in truths {
        let b = t.bbox;
        let jitter = |rng: &mut SeededRng| rng.range_f64(-1.5, 1.5);
        if rng.chance(d.find) {
            let class = if rng.chance(0.06) {
                rng.pick(names).unwrap().clone()
            } else {
                t.class.clone()
            };
            out.push(Detection {
                sheet: sheet.into(),
                class,
                score: rng.range_f64(0.45, 0.99),
                x: b.x + jitter(&mut rng),
                y: b.y + jitter(&mut rng),
                w: b.w,
                h: b.h,
            });
            if rng.chance(0.05) {
                out.push(Detection {
                    sheet: sheet.into(),
                    class: t.class.clone(),
                    score: rng.range_f64(0.3, 0.7),
                    x: b.x + 2.0,
                    y: b.y + 1.0,
                    w: b.w,
                    h: b.h,
                });
            }
        } else if rng.chance(0.5) {
            out.push(Detection {
                sheet: sheet.into(),
                class: t.class.clone(),
                score: rng.range_f64(0.05, 0.4),
                x: b.x + jitter(&mut rng),
                y: b.y + jitter(&mut rng),
                w: b.w,
                h: b.h,
            });
        }
    }
    for _ in 0..d.false_alarms {
        let side = rng.range_f64(18.0, 30.0);
        out.push(Detection {
            sheet: sheet.into(),
            class: rng.pick(names).unwrap().clone(),
            score: rng.range_f64(0.1, 0.9),
            x: rng.range_f64(60.0, f64::from(w) - 120.0),
            y: rng.range_f64(60.0, f64::from(h) - 200.0),
            w: side,
            h: side,
        });
    }
    out
}

/// Evaluates the simulated detector on every sheet of `site` and writes the
/// evaluation folder `site/evals/<name>` (with a model folder and crop
/// manifest the record points to, and the model's training log).
pub fn evaluate(site: &Site, name: &str, d: &Detector) -> EvaluationRecord {
    let names = site.config.class_names();
    let store = LabelStore::new(site);
    let mut inputs = Vec::new();
    let mut stamps = Vec::new();
    for id in &site.config.held_out {
        let doc = store.load(id).unwrap();
        let truths: Vec<TruthSymbol> = doc
            .accepted()
            .map(|s| TruthSymbol {
                class: s.class.clone(),
                bbox: s.bbox,
            })
            .collect();
        let detections = detect(id, &truths, &names, d, doc.sheet.width, doc.sheet.height);
        inputs.push(SheetInput {
            sheet: id.clone(),
            truths,
            detections,
            ignore: doc.ignore.iter().map(|r| r.bbox).collect(),
        });
        let labels_file = format!("labels/{id}.json");
        // Built from JSON, so fields the record gains later take their defaults.
        let stamp: SheetStamp = serde_json::from_value(serde_json::json!({
            "sheet": id,
            "file": doc.sheet.file,
            "sheet_sha256": sha256_file(&site.root.join(&doc.sheet.file)).unwrap(),
            "labels_file": labels_file,
            "labels_sha256": sha256_file(&site.root.join(&labels_file)).unwrap(),
            "labels_revision": doc.revision,
            "width": doc.sheet.width,
            "height": doc.sheet.height,
        }))
        .unwrap();
        stamps.push(stamp);
    }
    let cfg = SheetEvalConfig {
        bootstrap: Some(BootstrapConfig {
            resamples: 200,
            seed: 11,
            level: 0.95,
        }),
        ..SheetEvalConfig::default()
    };
    let e = evaluate_sheets(&inputs, &names, &cfg).unwrap();
    let prepared = prepare_sheets(&inputs, &names).unwrap();
    let matches = match_log(&prepared, &names, &cfg.criterion);
    // Crop level: one crop per symbol and a few background crops per sheet,
    // scored by a simulated classifier that leans to the true class.
    let mut crop_classes = names.clone();
    crop_classes.push("background".into());
    let mut rng = SeededRng::new(d.seed ^ 0xc0);
    let mut crops = Vec::new();
    for inp in &inputs {
        let mut items: Vec<(usize, i64, i64)> = inp
            .truths
            .iter()
            .map(|t| {
                (
                    names.iter().position(|n| *n == t.class).unwrap(),
                    t.bbox.x as i64,
                    t.bbox.y as i64,
                )
            })
            .collect();
        for k in 0..6 {
            items.push((names.len(), 80 + 90 * k, 90));
        }
        for (truth, x, y) in items {
            let mut scores: Vec<f64> = (0..crop_classes.len()).map(|_| rng.uniform()).collect();
            if rng.chance(d.find) {
                scores[truth] += 2.0;
            }
            let sum: f64 = scores.iter().sum();
            let scores: Vec<f64> = scores.iter().map(|s| s / sum).collect();
            let predicted = crop_classes[symtrust_eval::crop_eval::argmax(&scores)].clone();
            crops.push(CropDecision {
                sheet: inp.sheet.clone(),
                x,
                y,
                truth: crop_classes[truth].clone(),
                predicted,
                scores,
            });
        }
    }
    let truth_idx: Vec<usize> = crops
        .iter()
        .map(|c| crop_classes.iter().position(|n| *n == c.truth).unwrap())
        .collect();
    let score_rows: Vec<Vec<f64>> = crops.iter().map(|c| c.scores.clone()).collect();
    let crop_eval = evaluate_crops(&truth_idx, &score_rows, &crop_classes).unwrap();
    // Calibration fitted on "validation" pairs drawn like the held-out ones.
    let held: Vec<(f64, bool)> = matches
        .detections
        .iter()
        .map(|m| (m.score, m.kind == symtrust_eval::match_log::MatchKind::Hit))
        .collect();
    let validation: Vec<(f64, bool)> = held.iter().rev().cloned().collect();
    let calibration_fit = fit_and_judge(&validation, &held, 10).ok();
    // The model folder and crop manifest the record points to.
    let model_id = format!("model-{name}");
    let model_dir = site.models_dir().join(&model_id);
    std::fs::create_dir_all(&model_dir).unwrap();
    let weights = format!("weights of {model_id}").into_bytes();
    let card = format!("{{\"id\":\"{model_id}\"}}").into_bytes();
    std::fs::write(model_dir.join("weights.safetensors"), &weights).unwrap();
    std::fs::write(model_dir.join("card.json"), &card).unwrap();
    let mut log =
        String::from("epoch,train_loss,val_loss,val_accuracy,val_macro_f1,learning_rate,seconds\n");
    for ep in 1..=8u32 {
        let f = f64::from(ep);
        log.push_str(&format!(
            "{ep},{:.6},{:.6},{:.6},{:.6},{:.3e},{:.2}\n",
            1.6 / f,
            1.7 / f + 0.02 * f,
            1.0 - 0.5 / f,
            0.95 - 0.55 / f,
            1e-3,
            2.5
        ));
    }
    std::fs::write(model_dir.join("epochs.csv"), log).unwrap();
    let manifest_dir = site.crops_dir().join("lib-1");
    std::fs::create_dir_all(&manifest_dir).unwrap();
    let manifest = b"{\"id\":\"lib-1\"}".to_vec();
    std::fs::write(manifest_dir.join("manifest.json"), &manifest).unwrap();
    let detector = DetectorInfo::Model {
        id: model_id.clone(),
        dir: format!("models/{model_id}"),
        weights_sha256: sha256_hex(&weights),
        card_sha256: sha256_hex(&card),
        crop_library: "lib-1".into(),
        crop_manifest_sha256: sha256_hex(&manifest),
    };
    // Built from JSON, so fields the record gains later take their defaults.
    let record: EvaluationRecord = serde_json::from_value(serde_json::json!({
        "schema_version": METRICS_SCHEMA_VERSION,
        "trust_statement": trust_statement(&e, &detector.label()),
        "caution": CAUTION,
        "stamp": RunStamp {
            tool_version: "0.1.0".into(),
            created: "2026-12-01T10:30:00Z".into(),
            command_line: vec!["symtrust".into(), "eval".into(), "--out".into(), format!("evals/{name}")],
            host: "test-host".into(),
            user: "tester".into(),
            threads: 1,
            seconds: 1.0,
        },
        "detector": detector,
        "classes": names,
        "held_out": site.config.held_out,
        "sheets": stamps,
        "detect_settings": null,
        "sheet_level": e,
        "crop_level": CropLevel {
            classes: crop_classes,
            evaluation: crop_eval,
            crops,
        },
        "calibration_fit": calibration_fit,
        "matches": matches,
        "inputs": inputs,
        "shard": null,
    }))
    .unwrap();
    let dir = site.root.join("evals").join(name);
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(
        dir.join(METRICS_FILE),
        serde_json::to_vec_pretty(&record).unwrap(),
    )
    .unwrap();
    record
}

/// The default fixture: 3 style-a sheets, a fair detector.
pub fn fixture() -> Fixture {
    let tmp = tempfile::tempdir().unwrap();
    let site = write_site(tmp.path(), DraftingStyle::A, 3, 5);
    let record = evaluate(
        &site,
        "first",
        &Detector {
            find: 0.85,
            false_alarms: 3,
            seed: 3,
        },
    );
    Fixture {
        site: site.root.clone(),
        eval_dir: site.root.join("evals").join("first"),
        record,
        tmp,
    }
}
