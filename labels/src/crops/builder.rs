//! Building a crop library from accepted labels on training and validation sheets.
//!
//! - Positives: the window centred on each accepted symbol (see
//!   [`crate::geometry::Window::centered_on`]), plus `jitter_copies` copies shifted
//!   by up to `jitter_pixels` in x and y, so the classifier tolerates imperfect
//!   centring. A window hanging over the sheet edge is padded with paper (255).
//! - Negatives: random windows fully inside the sheet that contain no centre of a
//!   draft or accepted symbol and touch no ignore region, optionally rejecting
//!   blank paper (ink fraction below `min_negative_ink`, ink = gray < 128).
//!   Default 100 per sheet (common practice).
//! - Hard negatives: windows centred on detections of an earlier model that match
//!   no labelled symbol (IoU < 0.3 with every non-rejected symbol, no symbol
//!   centre inside the window), highest score first, capped per sheet.
//!
//! Held-out sheets never contribute a crop, not even a hard negative. Every random
//! choice comes from a stream derived from the seed and the sheet id, so the library
//! is reproducible and its id deterministic.

use super::library::{
    BACKGROUND, CROP_SCHEMA_VERSION, CropCounts, CropKind, CropLibrary, CropManifest, CropRecord,
    CropSettings, CropSplit, ManifestSheet,
};
use crate::atomic::{create_dir_durable, parent_dir};
use crate::clock::now_rfc3339;
use crate::detections::{Detection, read_detections};
use crate::document::{LabelDocument, ReviewState};
use crate::error::{LabelError, Result};
use crate::geometry::{BBox, Window};
use crate::hash::{sha256_file, sha256_hex};
use crate::rng::SeededRng;
use crate::sheets::load_sheet;
use crate::site::Site;
use crate::split::split_sheets;
use crate::store::LabelStore;
use image::GrayImage;
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Gray level below which a pixel counts as ink.
pub const INK_THRESHOLD: u8 = 128;

/// IoU with a labelled symbol at or above which a detection is not a false positive.
pub const HARD_NEGATIVE_MAX_IOU: f64 = 0.3;

/// What to build.
#[derive(Debug, Clone, Default)]
pub struct CropRequest {
    /// Seed; `None` uses the site's seed.
    pub seed: Option<u64>,
    /// A detections file (as written by `symtrust detect`) to mine hard negatives from.
    pub hard_negatives: Option<PathBuf>,
}

/// The result of a build.
#[derive(Debug, Clone)]
pub struct BuildOutcome {
    /// The library (opened and checked).
    pub library: CropLibrary,
    /// True when an identical library already existed and was reused.
    pub reused: bool,
    /// Detections in the hard-negative file that lay on held-out sheets and were dropped.
    pub dropped_held_out_detections: usize,
    /// Negatives asked for but not found (sheet too full of symbols or too blank).
    pub negatives_short: usize,
}

struct SheetInput {
    doc: LabelDocument,
    split: CropSplit,
    detections: Vec<Detection>,
}

struct CutCrop {
    record: CropRecord,
    png: Vec<u8>,
}

/// Builds (or reuses) the crop library for the site's current accepted labels.
pub fn build_library(
    site: &Site,
    request: &CropRequest,
    on_sheet_done: &(dyn Fn(&str) + Sync),
) -> Result<BuildOutcome> {
    let config = &site.config;
    let seed = request.seed.unwrap_or(config.seed);
    let store = LabelStore::new(site);
    let ids = store.sheet_ids()?;
    let classes = config.class_names();
    let split = split_sheets(config, &ids);

    let mut detections_by_sheet: BTreeMap<String, Vec<Detection>> = BTreeMap::new();
    let mut dropped = 0;
    let mut hard_sha = None;
    if let Some(path) = &request.hard_negatives {
        let set = read_detections(path)?;
        hard_sha = Some(sha256_file(path)?);
        for d in set.detections {
            if !ids.contains(&d.sheet) {
                return Err(LabelError::invalid(
                    path,
                    format!(
                        "detection on sheet {:?}, which this site does not have; was the file made for another site?",
                        d.sheet
                    ),
                ));
            }
            if split.held_out.contains(&d.sheet) {
                dropped += 1;
            } else {
                detections_by_sheet
                    .entry(d.sheet.clone())
                    .or_default()
                    .push(d);
            }
        }
    }

    let mut inputs = Vec::new();
    let mut manifest_sheets = Vec::new();
    for (ids, crop_split) in [
        (&split.train, CropSplit::Train),
        (&split.validation, CropSplit::Validation),
    ] {
        for id in ids {
            let path = store.path(id);
            let doc = store.load(id)?;
            doc.check_against(&path, &classes)?;
            manifest_sheets.push(ManifestSheet {
                sheet: id.clone(),
                sheet_sha256: doc.sheet.sha256.clone(),
                labels_sha256: sha256_file(&path)?,
                labels_revision: doc.revision,
                split: crop_split,
            });
            inputs.push(SheetInput {
                detections: detections_by_sheet.remove(id).unwrap_or_default(),
                doc,
                split: crop_split,
            });
        }
    }
    manifest_sheets.sort_by(|a, b| a.sheet.cmp(&b.sheet));
    inputs.sort_by(|a, b| a.doc.sheet.id.cmp(&b.doc.sheet.id));
    if inputs.is_empty() {
        return Err(LabelError::invalid(
            store.path("*"),
            "no training sheets: register sheets with `symtrust sheets add` (held-out sheets never give crops)",
        ));
    }

    let settings = CropSettings {
        hard_negatives_sha256: hard_sha,
        ..site_crop_settings(site)
    };
    let id = CropManifest::compute_id(seed, &classes, &settings, &manifest_sheets, &split.held_out);
    let final_dir = site.crops_dir().join(&id);
    if final_dir.join("manifest.json").is_file() {
        let library = CropLibrary::open(&final_dir)?;
        return Ok(BuildOutcome {
            library,
            reused: true,
            dropped_held_out_detections: dropped,
            negatives_short: 0,
        });
    }

    let results: Vec<Result<(Vec<CutCrop>, usize)>> = inputs
        .par_iter()
        .map(|input| {
            let out = cut_sheet(site, input, &settings, seed);
            on_sheet_done(&input.doc.sheet.id);
            out
        })
        .collect();
    let mut crops = Vec::new();
    let mut short = 0;
    for r in results {
        let (c, s) = r?;
        crops.extend(c);
        short += s;
    }

    let counts = CropCounts {
        positive: crops
            .iter()
            .filter(|c| c.record.kind == CropKind::Positive)
            .count(),
        negative: crops
            .iter()
            .filter(|c| c.record.kind == CropKind::Negative)
            .count(),
        hard_negative: crops
            .iter()
            .filter(|c| c.record.kind == CropKind::HardNegative)
            .count(),
    };
    let mut index = csv::Writer::from_writer(Vec::new());
    for c in &crops {
        index
            .serialize(&c.record)
            .map_err(|e| LabelError::invalid(&final_dir, e.to_string()))?;
    }
    let index_bytes = index
        .into_inner()
        .map_err(|e| LabelError::invalid(&final_dir, e.to_string()))?;
    let manifest = CropManifest {
        schema_version: CROP_SCHEMA_VERSION,
        id: id.clone(),
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        seed,
        classes,
        settings,
        sheets: manifest_sheets,
        held_out: split.held_out.clone(),
        index_sha256: sha256_hex(&index_bytes),
        counts,
        created: now_rfc3339(),
    };
    let mut manifest_bytes = serde_json::to_vec_pretty(&manifest).expect("manifest serialises");
    manifest_bytes.push(b'\n');

    write_library_dir(site, &final_dir, &crops, &index_bytes, &manifest_bytes)?;
    let library = CropLibrary::open(&final_dir)?;
    Ok(BuildOutcome {
        library,
        reused: false,
        dropped_held_out_detections: dropped,
        negatives_short: short,
    })
}

/// Writes the library under a temporary name, fsyncs it and renames it into place.
fn write_library_dir(
    site: &Site,
    final_dir: &Path,
    crops: &[CutCrop],
    index: &[u8],
    manifest: &[u8],
) -> Result<()> {
    let crops_root = site.crops_dir();
    create_dir_durable(&crops_root)?;
    let name = final_dir
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let tmp = crops_root.join(format!(".build-{name}-{}", std::process::id()));
    if tmp.exists() {
        std::fs::remove_dir_all(&tmp).map_err(|e| LabelError::io(&tmp, e))?;
    }
    let images = tmp.join("images");
    std::fs::create_dir_all(&images).map_err(|e| LabelError::io(&images, e))?;
    let write = |path: PathBuf, bytes: &[u8]| -> Result<()> {
        let mut f = std::fs::File::create(&path).map_err(|e| LabelError::io(&path, e))?;
        f.write_all(bytes).map_err(|e| LabelError::io(&path, e))?;
        f.sync_all().map_err(|e| LabelError::io(&path, e))
    };
    let result = (|| -> Result<()> {
        crops
            .par_iter()
            .try_for_each(|c| write(tmp.join(&c.record.file), &c.png))?;
        write(tmp.join("index.csv"), index)?;
        write(tmp.join("manifest.json"), manifest)?;
        for d in [&images, &tmp] {
            std::fs::File::open(d)
                .and_then(|f| f.sync_all())
                .map_err(|e| LabelError::io(d, e))?;
        }
        std::fs::rename(&tmp, final_dir).map_err(|e| LabelError::io(final_dir, e))?;
        let parent = parent_dir(final_dir);
        std::fs::File::open(&parent)
            .and_then(|f| f.sync_all())
            .map_err(|e| LabelError::io(&parent, e))
    })();
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&tmp);
    }
    result
}

/// Removes build folders left by crashed runs (`crops/.build-*`).
pub fn remove_stale_builds(site: &Site) -> Result<usize> {
    let root = site.crops_dir();
    let Ok(entries) = std::fs::read_dir(&root) else {
        return Ok(0);
    };
    let mut n = 0;
    for e in entries.flatten() {
        if e.file_name().to_string_lossy().starts_with(".build-") {
            std::fs::remove_dir_all(e.path()).map_err(|err| LabelError::io(e.path(), err))?;
            n += 1;
        }
    }
    Ok(n)
}

/// Copies a window out of the sheet, padding with paper outside it.
pub fn cut_window(sheet: &GrayImage, window: Window) -> GrayImage {
    let (w, h) = (i64::from(sheet.width()), i64::from(sheet.height()));
    let size = window.size;
    GrayImage::from_fn(size, size, |x, y| {
        let sx = window.left + i64::from(x);
        let sy = window.top + i64::from(y);
        if sx >= 0 && sy >= 0 && sx < w && sy < h {
            *sheet.get_pixel(sx as u32, sy as u32)
        } else {
            image::Luma([255])
        }
    })
}

/// Fraction of pixels darker than [`INK_THRESHOLD`].
pub fn ink_fraction(img: &GrayImage) -> f64 {
    let ink = img.as_raw().iter().filter(|p| **p < INK_THRESHOLD).count();
    ink as f64 / img.as_raw().len().max(1) as f64
}

/// One window the crop rules chose on a sheet, before it is cut.
#[derive(Debug, Clone, PartialEq)]
pub struct PlannedCrop {
    /// Positive, random negative or hard negative.
    pub kind: CropKind,
    /// Class name, or [`BACKGROUND`].
    pub class: String,
    /// Symbol id for positives, empty otherwise.
    pub symbol: String,
    /// The window in sheet pixels.
    pub window: Window,
}

/// Chooses a sheet's crop windows by the rules in the module comment: centred
/// positives (plus `jitter_copies` shifted copies), random negatives and hard
/// negatives from `detections`. Returns the windows and how many negatives
/// could not be found. Deterministic in `seed` and the sheet id.
pub fn plan_crops(
    doc: &LabelDocument,
    img: &GrayImage,
    settings: &CropSettings,
    seed: u64,
    detections: &[Detection],
) -> (Vec<PlannedCrop>, usize) {
    let sheet_id = &doc.sheet.id;
    let size = settings.window;
    let mut rng = SeededRng::derive(seed, &format!("crops/{sheet_id}"));
    let mut out = Vec::new();
    let mut push = |kind: CropKind, class: &str, symbol: &str, window: Window| {
        out.push(PlannedCrop {
            kind,
            class: class.to_string(),
            symbol: symbol.to_string(),
            window,
        });
    };

    for s in doc.accepted() {
        let (cx, cy) = s.bbox.center();
        push(
            CropKind::Positive,
            &s.class,
            &s.id,
            Window::centered_on(cx, cy, size),
        );
        let j = i64::from(settings.jitter_pixels);
        for _ in 0..settings.jitter_copies {
            let dx = rng.range_i64(-j, j) as f64;
            let dy = rng.range_i64(-j, j) as f64;
            push(
                CropKind::Positive,
                &s.class,
                &s.id,
                Window::centered_on(cx + dx, cy + dy, size),
            );
        }
    }

    let live: Vec<BBox> = doc
        .symbols
        .iter()
        .filter(|s| s.state != ReviewState::Rejected)
        .map(|s| s.bbox)
        .collect();
    let holds_centre = |w: &BBox| {
        live.iter().any(|b| {
            let (cx, cy) = b.center();
            w.contains_point(cx, cy)
        })
    };
    let touches_ignore = |w: &BBox| doc.ignore.iter().any(|r| r.bbox.intersection_area(w) > 0.0);

    let mut short = 0;
    let (sw, sh) = (i64::from(img.width()), i64::from(img.height()));
    let want = settings.negatives_per_sheet as usize;
    if sw >= i64::from(size) && sh >= i64::from(size) && want > 0 {
        let mut got = 0;
        let mut tries = 0;
        while got < want && tries < want * 50 {
            tries += 1;
            let window = Window {
                left: rng.range_i64(0, sw - i64::from(size)),
                top: rng.range_i64(0, sh - i64::from(size)),
                size,
            };
            let b = window.bbox();
            if holds_centre(&b) || touches_ignore(&b) {
                continue;
            }
            if settings.min_negative_ink > 0.0
                && ink_fraction(&cut_window(img, window)) < settings.min_negative_ink
            {
                continue;
            }
            push(CropKind::Negative, BACKGROUND, "", window);
            got += 1;
        }
        short += want - got;
    } else {
        short += want;
    }

    let mut dets: Vec<&Detection> = detections.iter().collect();
    dets.sort_by(|a, b| b.score.total_cmp(&a.score));
    let mut taken = 0;
    for d in dets {
        if taken >= settings.hard_negatives_per_sheet as usize {
            break;
        }
        let db = d.bbox();
        let (cx, cy) = db.center();
        if live.iter().any(|b| b.iou(&db) >= HARD_NEGATIVE_MAX_IOU) || doc.in_ignore(cx, cy) {
            continue;
        }
        let window = Window::centered_on(cx, cy, size);
        if holds_centre(&window.bbox()) {
            continue;
        }
        push(CropKind::HardNegative, BACKGROUND, "", window);
        taken += 1;
    }
    (out, short)
}

fn cut_sheet(
    site: &Site,
    input: &SheetInput,
    settings: &CropSettings,
    seed: u64,
) -> Result<(Vec<CutCrop>, usize)> {
    let doc = &input.doc;
    let sheet_id = &doc.sheet.id;
    let img = load_sheet(site, &doc.sheet)?;
    let (planned, short) = plan_crops(doc, &img, settings, seed, &input.detections);
    let mut out = Vec::with_capacity(planned.len());
    for (n, p) in planned.into_iter().enumerate() {
        let crop = cut_window(&img, p.window);
        let png = crate::raster::encode_png_with_dpi(&crop, settings.dpi)?;
        let tag = match p.kind {
            CropKind::Positive => "pos",
            CropKind::Negative => "neg",
            CropKind::HardNegative => "hard",
        };
        out.push(CutCrop {
            record: CropRecord {
                file: format!("images/{sheet_id}_{tag}_{n:05}.png"),
                class: p.class,
                sheet: sheet_id.clone(),
                x: p.window.left,
                y: p.window.top,
                w: settings.window,
                h: settings.window,
                kind: p.kind,
                split: input.split,
                symbol: p.symbol,
                sha256: sha256_hex(&png),
            },
            png,
        });
    }
    Ok((out, short))
}

/// The crop settings a site's configuration gives (no hard-negative file).
pub fn site_crop_settings(site: &Site) -> CropSettings {
    let config = &site.config;
    CropSettings {
        window: config.window,
        dpi: config.dpi,
        jitter_copies: config.crops.jitter_copies,
        jitter_pixels: config.crops.jitter_pixels,
        negatives_per_sheet: config.negatives_per_sheet,
        min_negative_ink: config.crops.min_negative_ink,
        hard_negatives_per_sheet: config.crops.hard_negatives_per_sheet,
        hard_negatives_sha256: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::{Origin, Symbol};
    use crate::site::{ClassSpec, SiteConfig};

    /// A site with `n` small sheets; each has ink rings at known places, labelled.
    fn tiny_site(n: usize, held: &[&str]) -> (tempfile::TempDir, Site) {
        let dir = tempfile::tempdir().unwrap();
        let mut config = SiteConfig::new(
            "t",
            vec![ClassSpec {
                name: "ring".into(),
                description: "a ring".into(),
                nominal_mm: 5.0,
                rotatable: false,
            }],
        );
        config.window = 32;
        config.negatives_per_sheet = 10;
        config.validation_fraction = 0.25;
        config.held_out = held.iter().map(|s| s.to_string()).collect();
        let site = Site::create(dir.path(), config).unwrap();
        let store = LabelStore::new(&site);
        for i in 0..n {
            let id = format!("sheet-{i}");
            let centres = [(60.0, 60.0), (200.0, 120.0)];
            let img = GrayImage::from_fn(300, 200, |x, y| {
                let on_ring = centres.iter().any(|(cx, cy)| {
                    let d = ((f64::from(x) + 0.5 - cx).powi(2) + (f64::from(y) + 0.5 - cy).powi(2))
                        .sqrt();
                    (d - 12.0).abs() < 1.5
                });
                let grid = x % 50 == 25; // a vertical line: ink for negatives
                image::Luma([if on_ring || grid { 0 } else { 255 }])
            });
            let path = site.sheets_dir().join(format!("{id}.png"));
            std::fs::write(
                &path,
                crate::raster::encode_png_with_dpi(&img, 200.0).unwrap(),
            )
            .unwrap();
            crate::sheets::register_sheet(&site, &path).unwrap();
            let mut doc = store.load(&id).unwrap();
            for (k, (cx, cy)) in centres.iter().enumerate() {
                doc.symbols.push(Symbol {
                    id: format!("s{k}"),
                    class: "ring".into(),
                    bbox: BBox::centered(*cx, *cy, 27.0, 27.0),
                    state: ReviewState::Accepted,
                    origin: Origin::Manual,
                    by: "t".into(),
                    at: "2026-12-01T00:00:00Z".into(),
                });
            }
            store.save(&doc, "t").unwrap();
        }
        (dir, site)
    }

    #[test]
    fn held_out_sheets_never_contribute_a_crop() {
        let (_d, site) = tiny_site(5, &["sheet-1", "sheet-3"]);
        let out = build_library(&site, &CropRequest::default(), &|_| {}).unwrap();
        let lib = out.library;
        assert!(!lib.records.is_empty());
        assert!(
            lib.records
                .iter()
                .all(|r| r.sheet != "sheet-1" && r.sheet != "sheet-3")
        );
        assert!(
            lib.manifest
                .sheets
                .iter()
                .all(|s| !site.is_held_out(&s.sheet))
        );
        assert_eq!(lib.manifest.held_out, vec!["sheet-1", "sheet-3"]);
        // 3 sheets x 2 symbols x (1 + 2 jitter copies).
        assert_eq!(lib.manifest.counts.positive, 18);
        // Validation is by sheet: every crop of a sheet has that sheet's split.
        for s in &lib.manifest.sheets {
            assert!(
                lib.records
                    .iter()
                    .filter(|r| r.sheet == s.sheet)
                    .all(|r| r.split == s.split)
            );
        }
        assert_eq!(
            lib.manifest
                .sheets
                .iter()
                .filter(|s| s.split == CropSplit::Validation)
                .count(),
            1
        );
    }

    #[test]
    fn positives_are_centred_and_negatives_hold_no_symbol_centre() {
        let (_d, site) = tiny_site(2, &[]);
        let lib = build_library(&site, &CropRequest::default(), &|_| {})
            .unwrap()
            .library;
        let first = lib
            .records
            .iter()
            .find(|r| r.kind == CropKind::Positive)
            .unwrap();
        // Symbol centre (60, 60), window 32: left = round(60 - 16) = 44.
        assert_eq!((first.x, first.y), (44, 44));
        let pixels = lib.load_pixels(first).unwrap();
        // The ring of radius 12 around the window centre: pixel (16+12, 16) is ink.
        assert!(pixels[16 * 32 + 28] < 128);
        for r in lib.records.iter().filter(|r| r.kind == CropKind::Negative) {
            let b = BBox::new(r.x as f64, r.y as f64, 32.0, 32.0);
            assert!(!b.contains_point(60.0, 60.0) && !b.contains_point(200.0, 120.0));
            let px = lib.load_pixels(r).unwrap();
            let ink = px.iter().filter(|p| **p < 128).count() as f64 / px.len() as f64;
            assert!(ink >= site.config.crops.min_negative_ink);
        }
    }

    #[test]
    fn same_inputs_same_id_and_bytes() {
        let (_d, site) = tiny_site(2, &[]);
        let a = build_library(&site, &CropRequest::default(), &|_| {}).unwrap();
        let b = build_library(&site, &CropRequest::default(), &|_| {}).unwrap();
        assert!(b.reused);
        assert_eq!(a.library.manifest.id, b.library.manifest.id);
        let other = build_library(
            &site,
            &CropRequest {
                seed: Some(99),
                hard_negatives: None,
            },
            &|_| {},
        )
        .unwrap();
        assert_ne!(other.library.manifest.id, a.library.manifest.id);
        // Rebuilding from scratch gives the same index bytes.
        let index_a = std::fs::read(a.library.dir.join("index.csv")).unwrap();
        std::fs::remove_dir_all(&a.library.dir).unwrap();
        let c = build_library(&site, &CropRequest::default(), &|_| {}).unwrap();
        assert_eq!(
            std::fs::read(c.library.dir.join("index.csv")).unwrap(),
            index_a
        );
    }

    #[test]
    fn hard_negatives_skip_true_symbols_and_held_out_sheets() {
        let (_d, site) = tiny_site(3, &["sheet-2"]);
        let det = |sheet: &str, cx: f64, cy: f64, score: f64| Detection {
            sheet: sheet.into(),
            class: "ring".into(),
            score,
            x: cx - 13.5,
            y: cy - 13.5,
            w: 27.0,
            h: 27.0,
        };
        let set = crate::detections::DetectionSet {
            schema_version: 1,
            model: None,
            detections: vec![
                det("sheet-0", 60.0, 60.0, 0.99), // a true symbol: not a hard negative
                det("sheet-0", 150.0, 170.0, 0.8), // a false alarm
                det("sheet-2", 150.0, 170.0, 0.9), // held out: dropped
            ],
        };
        let path = site.root.join("found.csv");
        crate::detections::write_detections(&path, &set).unwrap();
        let out = build_library(
            &site,
            &CropRequest {
                seed: None,
                hard_negatives: Some(path),
            },
            &|_| {},
        )
        .unwrap();
        assert_eq!(out.dropped_held_out_detections, 1);
        let hard: Vec<_> = out
            .library
            .records
            .iter()
            .filter(|r| r.kind == CropKind::HardNegative)
            .collect();
        assert_eq!(hard.len(), 1);
        assert_eq!(
            (hard[0].sheet.as_str(), hard[0].x, hard[0].y),
            ("sheet-0", 134, 154)
        );
    }

    #[test]
    fn tampered_crop_and_index_are_detected() {
        let (_d, site) = tiny_site(2, &[]);
        let lib = build_library(&site, &CropRequest::default(), &|_| {})
            .unwrap()
            .library;
        let rec = &lib.records[0];
        let img_path = lib.dir.join(&rec.file);
        let mut bytes = std::fs::read(&img_path).unwrap();
        let last = bytes.len() - 20;
        bytes[last] ^= 0xff;
        std::fs::write(&img_path, bytes).unwrap();
        assert!(
            lib.load_pixels(rec)
                .unwrap_err()
                .to_string()
                .contains("hash")
        );
        let index = lib.dir.join("index.csv");
        let mut text = std::fs::read_to_string(&index).unwrap();
        text.push_str("extra\n");
        std::fs::write(&index, text).unwrap();
        let msg = CropLibrary::open(&lib.dir).unwrap_err().to_string();
        assert!(
            msg.contains("index.csv") && msg.contains("crops build"),
            "{msg}"
        );
    }

    #[test]
    fn invalid_labels_stop_the_build_with_the_symbol_named() {
        let (_d, site) = tiny_site(2, &[]);
        let store = LabelStore::new(&site);
        let mut doc = store.load("sheet-0").unwrap();
        doc.symbols[1].bbox.x = 290.0;
        store.save(&doc, "t").unwrap();
        let msg = build_library(&site, &CropRequest::default(), &|_| {})
            .unwrap_err()
            .to_string();
        assert!(
            msg.contains("sheet-0.json") && msg.contains("s1") && msg.contains("outside"),
            "{msg}"
        );
        assert!(
            !site.crops_dir().exists() || std::fs::read_dir(site.crops_dir()).unwrap().count() == 0
        );
    }
}
