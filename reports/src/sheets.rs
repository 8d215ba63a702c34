//! The held-out sheets as pictures: one overlay per sheet (downscaled, and at
//! full resolution) and the crops of the error galleries, cut from the sheet
//! images at the evaluation's canonical resolution.

use crate::error::{ReportError, Result};
use crate::load::LoadedEvaluation;
use crate::picture::{Fate, Marked, crop, encode_png, overlay};
use image::{DynamicImage, GrayImage};
use std::path::Path;
use symtrust_eval::match_log::MatchKind;
use symtrust_eval::record::{EvaluationRecord, SheetStamp};
use symtrust_labels::BBox;
use symtrust_labels::document::read_document;
use symtrust_labels::raster::{decode_gray, to_canonical};
use symtrust_labels::site::Site;

/// Width of the downscaled overlays, pixels.
pub const OVERVIEW_WIDTH: u32 = 1100;

/// Side of a gallery crop, pixels.
pub const CROP_SIDE: u32 = 132;

/// One held-out sheet as drawn.
#[derive(Debug, Clone)]
pub struct SheetPicture {
    /// Sheet id.
    pub sheet: String,
    /// The downscaled overlay, PNG.
    pub overview_png: Vec<u8>,
    /// Path of the downscaled overlay, relative to the report folder.
    pub overview_path: String,
    /// Path of the full-resolution overlay, relative to the report folder.
    pub full_path: String,
    /// Sheet size at the canonical resolution.
    pub size: (u32, u32),
    /// Boxes drawn: hits, false alarms, misses.
    pub counts: (usize, usize, usize),
}

/// One crop of an error gallery.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct GalleryItem {
    /// Sheet id.
    pub sheet: String,
    /// False alarm or miss.
    pub fate: Fate,
    /// Reported class (false alarm) or labelled class (miss).
    pub class: String,
    /// For a false alarm: what it sat on (`wrong_class`, `duplicate`,
    /// `background`); for a miss: `None`.
    pub kind: Option<MatchKind>,
    /// For a wrong-class false alarm: the class of the symbol it sat on.
    pub truth_class: Option<String>,
    /// Score of the detection (false alarm), or of the detection that found
    /// the symbol below the threshold (miss), if any.
    pub score: Option<f64>,
    /// Box on the sheet, pixels.
    pub bbox: BBox,
    /// Crop file, relative to the report folder.
    pub path: String,
    /// The crop, PNG.
    #[serde(skip)]
    pub png: Vec<u8>,
}

/// The gallery candidates at threshold `t`, worst first, at most `cap` of each:
/// false alarms by falling score; misses never found by any detection first,
/// then by rising score of the detection that found them too low.
pub fn gallery_candidates(
    r: &EvaluationRecord,
    t: f64,
    cap: usize,
) -> (Vec<GalleryItem>, Vec<GalleryItem>, usize, usize) {
    let mut fa: Vec<GalleryItem> = r
        .matches
        .detections
        .iter()
        .filter(|d| d.score >= t && d.kind != MatchKind::Hit)
        .map(|d| GalleryItem {
            sheet: d.sheet.clone(),
            fate: Fate::FalseAlarm,
            class: d.class.clone(),
            kind: Some(d.kind),
            truth_class: d.truth_class.clone(),
            score: Some(d.score),
            bbox: d.bbox,
            path: String::new(),
            png: Vec::new(),
        })
        .collect();
    fa.sort_by(|a, b| {
        b.score
            .partial_cmp(&a.score)
            .unwrap_or(std::cmp::Ordering::Equal)
            .then(a.sheet.cmp(&b.sheet))
            .then(a.bbox.y.total_cmp(&b.bbox.y))
            .then(a.bbox.x.total_cmp(&b.bbox.x))
    });
    let mut miss: Vec<GalleryItem> = r
        .matches
        .truths
        .iter()
        .filter(|s| s.missed_at(t))
        .map(|s| GalleryItem {
            sheet: s.sheet.clone(),
            fate: Fate::Miss,
            class: s.class.clone(),
            kind: None,
            truth_class: None,
            score: s.found_by_score,
            bbox: s.bbox,
            path: String::new(),
            png: Vec::new(),
        })
        .collect();
    miss.sort_by(|a, b| {
        a.score
            .unwrap_or(-1.0)
            .total_cmp(&b.score.unwrap_or(-1.0))
            .then(a.sheet.cmp(&b.sheet))
            .then(a.bbox.y.total_cmp(&b.bbox.y))
            .then(a.bbox.x.total_cmp(&b.bbox.x))
    });
    let (n_fa, n_miss) = (fa.len(), miss.len());
    fa.truncate(cap);
    miss.truncate(cap);
    // Files named by rank, so a folder listing is worst first too.
    for (i, g) in fa.iter_mut().enumerate() {
        g.path = format!("gallery/false-alarm-{:03}-{}.png", i + 1, safe(&g.sheet));
    }
    for (i, g) in miss.iter_mut().enumerate() {
        g.path = format!("gallery/miss-{:03}-{}.png", i + 1, safe(&g.sheet));
    }
    (fa, miss, n_fa, n_miss)
}

/// The boxes of one sheet at threshold `t`.
pub fn sheet_marks(ev: &LoadedEvaluation, sheet: &str, t: f64) -> Vec<Marked> {
    let r = &ev.record;
    let mut marks = Vec::new();
    if let Some(input) = r.inputs.iter().find(|i| i.sheet == sheet) {
        marks.extend(input.ignore.iter().map(|b| Marked {
            bbox: *b,
            fate: Fate::Ignored,
        }));
    }
    for d in r
        .matches
        .detections
        .iter()
        .filter(|d| d.sheet == sheet && d.score >= t)
    {
        marks.push(Marked {
            bbox: d.bbox,
            fate: if d.kind == MatchKind::Hit {
                Fate::Hit
            } else {
                Fate::FalseAlarm
            },
        });
    }
    for s in r
        .matches
        .truths
        .iter()
        .filter(|s| s.sheet == sheet && s.missed_at(t))
    {
        marks.push(Marked {
            bbox: s.bbox,
            fate: Fate::Miss,
        });
    }
    marks
}

/// Loads a held-out sheet at the canonical resolution of its label document.
pub fn load_sheet_image(site: &Site, stamp: &SheetStamp) -> Result<GrayImage> {
    let path = site.root.join(&stamp.file);
    let doc = read_document(&site.root.join(&stamp.labels_file))?;
    let (_, img) = decode_gray(&path, site.config.max_sheet_pixels)?;
    let img = to_canonical(img, doc.sheet.source_dpi, doc.sheet.dpi);
    if img.dimensions() != (stamp.width, stamp.height) {
        return Err(ReportError::input(
            &path,
            format!(
                "loads at {}x{} but the evaluation recorded {}x{}",
                img.width(),
                img.height(),
                stamp.width,
                stamp.height
            ),
        ));
    }
    Ok(img)
}

fn write(dir: &Path, rel: &str, bytes: &[u8]) -> Result<()> {
    let path = dir.join(rel);
    if let Some(parent) = path.parent() {
        std::fs::create_dir_all(parent).map_err(|e| ReportError::io(parent, e))?;
    }
    std::fs::write(&path, bytes).map_err(|e| ReportError::io(&path, e))
}

fn png(img: image::RgbImage, what: &str) -> Result<Vec<u8>> {
    encode_png(&DynamicImage::ImageRgb8(img)).map_err(|e| ReportError::Plot {
        figure: what.to_string(),
        message: e.to_string(),
    })
}

/// File-name-safe form of a sheet id (ids are file stems already; this guards
/// against anything else).
fn safe(id: &str) -> String {
    id.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// Draws every sheet's overlays and cuts the gallery crops, writing the files
/// under `out` (`sheets/`, `gallery/`); returns the pictures and fills in the
/// crops of `gallery`.
pub fn draw_sheets(
    ev: &LoadedEvaluation,
    t: f64,
    gallery: &mut [&mut GalleryItem],
    out: &Path,
    on_sheet: &dyn Fn(&str),
) -> Result<Vec<SheetPicture>> {
    let site = Site::open(&ev.input.site_root)?;
    let mut pictures = Vec::new();
    for stamp in &ev.record.sheets {
        let img = load_sheet_image(&site, stamp)?;
        let marks = sheet_marks(ev, &stamp.sheet, t);
        let count = |f: Fate| marks.iter().filter(|m| m.fate == f).count();
        let name = safe(&stamp.sheet);
        let what = format!("overlay of sheet {}", stamp.sheet);
        let plot_err = |message: String| ReportError::Plot {
            figure: what.clone(),
            message,
        };
        let overview = png(
            overlay(&img, &marks, Some(OVERVIEW_WIDTH)).map_err(plot_err)?,
            &what,
        )?;
        let overview_path = format!("sheets/{name}.png");
        write(out, &overview_path, &overview)?;
        let full = png(overlay(&img, &marks, None).map_err(plot_err)?, &what)?;
        let full_path = format!("sheets/{name}-full.png");
        write(out, &full_path, &full)?;
        for item in gallery.iter_mut().filter(|g| g.sheet == stamp.sheet) {
            let m = Marked {
                bbox: item.bbox,
                fate: item.fate,
            };
            item.png = png(crop(&img, &m, CROP_SIDE), "gallery crop")?;
            write(out, &item.path, &item.png)?;
        }
        pictures.push(SheetPicture {
            sheet: stamp.sheet.clone(),
            overview_png: overview,
            overview_path,
            full_path,
            size: (img.width(), img.height()),
            counts: (count(Fate::Hit), count(Fate::FalseAlarm), count(Fate::Miss)),
        });
        on_sheet(&stamp.sheet);
    }
    Ok(pictures)
}
