//! Writes a small crop library through the labels crate's public types, so the
//! trainer is tested before `symtrust crops build` exists: a fictional plant's
//! three symbol shapes (ring, cross, box) and background line work, drawn with
//! a seeded generator, split by sheet like a real library.

use std::path::{Path, PathBuf};
use symtrust_labels::SeededRng;
use symtrust_labels::crops::{
    BACKGROUND, CROP_SCHEMA_VERSION, CropCounts, CropKind, CropManifest, CropRecord, CropSettings,
    CropSplit, ManifestSheet,
};
use symtrust_labels::hash::sha256_hex;
use symtrust_labels::site::{ClassSpec, ModelSettings};
use symtrust_trainer::Architecture;

/// Window of the test libraries.
pub const WINDOW: u32 = 22;

/// The test site's classes.
pub fn classes() -> Vec<ClassSpec> {
    ["ring", "cross", "box"]
        .iter()
        .map(|n| ClassSpec {
            name: n.to_string(),
            description: format!("test symbol {n}"),
            nominal_mm: 3.0,
            rotatable: *n == "cross",
        })
        .collect()
}

/// A tiny network for the test window: 22 -3+1 = 20 -> 10 -3+1 = 8 -> 4.
pub fn tiny_arch(classes: usize) -> Architecture {
    let settings = ModelSettings {
        conv_channels: vec![6, 8],
        conv_kernels: vec![3, 3],
        hidden: 24,
        dropout: 0.1,
    };
    Architecture::from_settings(&settings, WINDOW as usize, classes).unwrap()
}

fn put(img: &mut [u8], side: i64, x: i64, y: i64) {
    if (0..side).contains(&x) && (0..side).contains(&y) {
        img[(y * side + x) as usize] = 0;
    }
}

/// Draws one crop of class `class` (3 = background) with seeded jitter.
pub fn draw(class: usize, rng: &mut SeededRng) -> Vec<u8> {
    let s = i64::from(WINDOW);
    let mut img = vec![255u8; (s * s) as usize];
    let cx = s / 2 + rng.range_i64(-2, 2);
    let cy = s / 2 + rng.range_i64(-2, 2);
    let r = rng.range_i64(5, 7);
    match class {
        0 => {
            for t in 0..96 {
                let a = t as f64 / 96.0 * std::f64::consts::TAU;
                let (x, y) = (
                    cx as f64 + r as f64 * a.cos(),
                    cy as f64 + r as f64 * a.sin(),
                );
                put(&mut img, s, x.round() as i64, y.round() as i64);
            }
        }
        1 => {
            for d in -r..=r {
                put(&mut img, s, cx + d, cy + d);
                put(&mut img, s, cx + d, cy - d);
            }
        }
        2 => {
            for d in -r..=r {
                put(&mut img, s, cx + d, cy - r);
                put(&mut img, s, cx + d, cy + r);
                put(&mut img, s, cx - r, cy + d);
                put(&mut img, s, cx + r, cy + d);
            }
        }
        _ => {
            for _ in 0..rng.below(3) {
                let at = rng.range_i64(0, s - 1);
                let horizontal = rng.chance(0.5);
                for d in 0..s {
                    if horizontal {
                        put(&mut img, s, d, at);
                    } else {
                        put(&mut img, s, at, d);
                    }
                }
            }
        }
    }
    img
}

fn png(pixels: &[u8]) -> Vec<u8> {
    let img = image::GrayImage::from_raw(WINDOW, WINDOW, pixels.to_vec()).unwrap();
    let mut out = std::io::Cursor::new(Vec::new());
    img.write_to(&mut out, image::ImageFormat::Png).unwrap();
    out.into_inner()
}

/// Writes a library under `crops_dir` with `per_class` training crops per
/// symbol class (twice that of background) on four sheets, and a quarter of
/// that on a validation sheet; `skip_class` leaves one class out of training.
pub fn write_library(
    crops_dir: &Path,
    seed: u64,
    per_class: usize,
    skip_class: Option<usize>,
) -> PathBuf {
    let names: Vec<String> = classes().iter().map(|c| c.name.clone()).collect();
    let mut rng = SeededRng::new(seed);
    let mut records = Vec::new();
    let mut images = Vec::new();
    for (split, count) in [
        (CropSplit::Train, per_class),
        (CropSplit::Validation, per_class / 4),
    ] {
        for class in 0..4 {
            let n = if class == 3 { 2 * count } else { count };
            if split == CropSplit::Train && skip_class == Some(class) {
                continue;
            }
            for i in 0..n {
                let pixels = draw(class, &mut rng);
                let bytes = png(&pixels);
                let file = format!("images/{:06}.png", records.len());
                let sheet = match split {
                    CropSplit::Train => format!("sheet-{}", 1 + i % 4),
                    CropSplit::Validation => "sheet-5".to_string(),
                };
                records.push(CropRecord {
                    file: file.clone(),
                    class: names
                        .get(class)
                        .cloned()
                        .unwrap_or_else(|| BACKGROUND.to_string()),
                    sheet,
                    x: 0,
                    y: 0,
                    w: WINDOW,
                    h: WINDOW,
                    kind: if class == 3 {
                        CropKind::Negative
                    } else {
                        CropKind::Positive
                    },
                    split,
                    symbol: String::new(),
                    sha256: sha256_hex(&bytes),
                });
                images.push((file, bytes));
            }
        }
    }
    let mut csv = csv::Writer::from_writer(Vec::new());
    for r in &records {
        csv.serialize(r).unwrap();
    }
    let index = csv.into_inner().unwrap();
    let settings = CropSettings {
        window: WINDOW,
        dpi: 200.0,
        jitter_copies: 0,
        jitter_pixels: 2,
        negatives_per_sheet: 10,
        min_negative_ink: 0.0,
        hard_negatives_per_sheet: 0,
        hard_negatives_sha256: None,
    };
    let sheets: Vec<ManifestSheet> = (1..=5)
        .map(|i| ManifestSheet {
            sheet: format!("sheet-{i}"),
            sheet_sha256: sha256_hex(format!("sheet {i}").as_bytes()),
            labels_sha256: sha256_hex(format!("labels {i}").as_bytes()),
            labels_revision: 1,
            split: if i == 5 {
                CropSplit::Validation
            } else {
                CropSplit::Train
            },
        })
        .collect();
    let id = CropManifest::compute_id(seed, &names, &settings, &sheets, &[]);
    let counts = CropCounts {
        positive: records
            .iter()
            .filter(|r| r.kind == CropKind::Positive)
            .count(),
        negative: records
            .iter()
            .filter(|r| r.kind == CropKind::Negative)
            .count(),
        hard_negative: 0,
    };
    let manifest = CropManifest {
        schema_version: CROP_SCHEMA_VERSION,
        id: id.clone(),
        tool_version: "test".to_string(),
        seed,
        classes: names,
        settings,
        sheets,
        held_out: vec![],
        index_sha256: sha256_hex(&index),
        counts,
        created: "2026-12-01T00:00:00Z".to_string(),
    };
    let dir = crops_dir.join(&id);
    std::fs::create_dir_all(dir.join("images")).unwrap();
    for (file, bytes) in images {
        std::fs::write(dir.join(file), bytes).unwrap();
    }
    std::fs::write(dir.join("index.csv"), index).unwrap();
    std::fs::write(
        dir.join("manifest.json"),
        serde_json::to_string_pretty(&manifest).unwrap(),
    )
    .unwrap();
    dir
}
