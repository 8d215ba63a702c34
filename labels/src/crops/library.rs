//! The on-disk format of a crop library and its checked reader.
//!
//! ```text
//! crops/<id>/manifest.json   settings, seed, per-sheet hashes, index hash, counts
//! crops/<id>/index.csv       one row per crop (see [`CropRecord`])
//! crops/<id>/images/*.png    8-bit grayscale windows, paper 255, ink 0
//! ```
//!
//! The id is the first 16 hex digits of the SHA-256 of the manifest's inputs
//! (settings, seed, classes, sheet and label hashes), so the same labels and seed
//! always give the same id. Opening a library checks the index against the hash
//! in the manifest; loading an image checks it against its hash in the index.

use crate::error::{LabelError, Result};
use crate::hash::{sha256_file, sha256_hex};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Version of the crop library format written by this build.
pub const CROP_SCHEMA_VERSION: u32 = 1;

/// The class name used for every negative window.
pub const BACKGROUND: &str = "background";

/// Why a crop is in the library.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CropKind {
    /// A window centred on an accepted symbol (possibly jittered).
    Positive,
    /// A random window with no symbol centre in it.
    Negative,
    /// A window around a false detection of an earlier model.
    HardNegative,
}

/// Which part of training a crop serves; decided per sheet, never per crop.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CropSplit {
    /// Used to fit weights.
    Train,
    /// Used for early stopping and model selection.
    Validation,
}

/// One row of `index.csv`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CropRecord {
    /// Image file, relative to the library folder (e.g. `images/000123.png`).
    pub file: String,
    /// Class name, or [`BACKGROUND`] for negatives.
    pub class: String,
    /// Sheet id the crop was cut from.
    pub sheet: String,
    /// Left column of the window on the canonical-resolution sheet.
    pub x: i64,
    /// Top row of the window.
    pub y: i64,
    /// Window width in pixels.
    pub w: u32,
    /// Window height in pixels.
    pub h: u32,
    /// Positive, negative or hard negative.
    pub kind: CropKind,
    /// Train or validation (by sheet).
    pub split: CropSplit,
    /// Symbol id for positives; empty otherwise.
    pub symbol: String,
    /// SHA-256 of the image file.
    pub sha256: String,
}

/// One sheet's contribution to a library, as recorded in the manifest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ManifestSheet {
    /// Sheet id.
    pub sheet: String,
    /// SHA-256 of the sheet image file.
    pub sheet_sha256: String,
    /// SHA-256 of the label document as read.
    pub labels_sha256: String,
    /// Revision of the label document as read.
    pub labels_revision: u64,
    /// Split of every crop from this sheet.
    pub split: CropSplit,
}

/// Settings that decide which crops a library holds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CropSettings {
    /// Side of the square window in pixels.
    pub window: u32,
    /// Canonical resolution of the sheets, dots per inch.
    pub dpi: f64,
    /// Jittered copies per positive, besides the centred one.
    pub jitter_copies: u32,
    /// Largest jitter shift in pixels.
    pub jitter_pixels: u32,
    /// Random negatives per sheet.
    pub negatives_per_sheet: u32,
    /// Reject negative windows whose ink fraction is below this (0 keeps blank paper).
    pub min_negative_ink: f64,
    /// Hard negatives per sheet at most.
    pub hard_negatives_per_sheet: u32,
    /// SHA-256 of the hard-negative detections file, when one was given.
    pub hard_negatives_sha256: Option<String>,
}

/// Counts per kind, for a quick look without reading the index.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct CropCounts {
    /// Positive crops (including jittered copies).
    pub positive: usize,
    /// Random negatives.
    pub negative: usize,
    /// Hard negatives.
    pub hard_negative: usize,
}

/// `manifest.json` of a crop library.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CropManifest {
    /// Format version ([`CROP_SCHEMA_VERSION`]).
    pub schema_version: u32,
    /// The library id (also its folder name).
    pub id: String,
    /// Version of symtrust that built it.
    pub tool_version: String,
    /// Seed of every random choice.
    pub seed: u64,
    /// Symbol classes in site order (the background class is implicit and last).
    pub classes: Vec<String>,
    /// Settings.
    pub settings: CropSettings,
    /// Every training and validation sheet that contributed, in id order.
    pub sheets: Vec<ManifestSheet>,
    /// Held-out sheets, listed so an auditor sees that none contributed.
    pub held_out: Vec<String>,
    /// SHA-256 of `index.csv`.
    pub index_sha256: String,
    /// Crops per kind.
    pub counts: CropCounts,
    /// Creation time, RFC 3339 UTC (not part of the id).
    pub created: String,
}

impl CropManifest {
    /// The deterministic id of a library with these inputs.
    pub fn compute_id(
        seed: u64,
        classes: &[String],
        settings: &CropSettings,
        sheets: &[ManifestSheet],
        held_out: &[String],
    ) -> String {
        let key = serde_json::json!({
            "schema_version": CROP_SCHEMA_VERSION,
            "seed": seed,
            "classes": classes,
            "settings": settings,
            "sheets": sheets,
            "held_out": held_out,
        });
        sha256_hex(key.to_string().as_bytes())[..16].to_string()
    }
}

/// An opened, checked crop library.
#[derive(Debug, Clone)]
pub struct CropLibrary {
    /// The library folder.
    pub dir: PathBuf,
    /// Its manifest.
    pub manifest: CropManifest,
    /// Its index rows, in file order.
    pub records: Vec<CropRecord>,
}

impl CropLibrary {
    /// Opens `dir`, parses the manifest and index, and checks the index hash.
    pub fn open(dir: &Path) -> Result<Self> {
        let manifest_path = dir.join("manifest.json");
        let text = std::fs::read_to_string(&manifest_path)
            .map_err(|e| LabelError::io(&manifest_path, e))?;
        let manifest: CropManifest =
            serde_json::from_str(&text).map_err(|e| LabelError::json(&manifest_path, &e))?;
        if manifest.schema_version != CROP_SCHEMA_VERSION {
            return Err(LabelError::CropLibrary {
                path: manifest_path,
                message: format!(
                    "schema version {} is not the supported {}",
                    manifest.schema_version, CROP_SCHEMA_VERSION
                ),
            });
        }
        let index_path = dir.join("index.csv");
        let found = sha256_file(&index_path)?;
        if found != manifest.index_sha256 {
            return Err(LabelError::CropLibrary {
                path: index_path,
                message: format!(
                    "index hash {found} does not match the manifest's {}",
                    manifest.index_sha256
                ),
            });
        }
        let records = read_index(&index_path)?;
        let known: std::collections::HashSet<&str> =
            manifest.classes.iter().map(String::as_str).collect();
        for (i, r) in records.iter().enumerate() {
            if r.class != BACKGROUND && !known.contains(r.class.as_str()) {
                return Err(LabelError::Csv {
                    path: index_path,
                    line: i as u64 + 2,
                    message: format!("class {:?} is not in the manifest's classes", r.class),
                });
            }
            if r.w != manifest.settings.window || r.h != manifest.settings.window {
                return Err(LabelError::Csv {
                    path: index_path,
                    line: i as u64 + 2,
                    message: format!(
                        "crop is {}x{} but the library window is {}",
                        r.w, r.h, manifest.settings.window
                    ),
                });
            }
        }
        Ok(Self {
            dir: dir.to_path_buf(),
            manifest,
            records,
        })
    }

    /// Class names in model order: the site's classes, then [`BACKGROUND`].
    pub fn class_names(&self) -> Vec<String> {
        let mut names = self.manifest.classes.clone();
        names.push(BACKGROUND.to_string());
        names
    }

    /// Index of a record's class in [`CropLibrary::class_names`].
    pub fn class_index(&self, record: &CropRecord) -> usize {
        self.manifest
            .classes
            .iter()
            .position(|c| *c == record.class)
            .unwrap_or(self.manifest.classes.len())
    }

    /// Reads one crop as 8-bit grayscale pixels (row-major, `w * h` bytes,
    /// paper 255, ink 0), after checking its hash against the index.
    pub fn load_pixels(&self, record: &CropRecord) -> Result<Vec<u8>> {
        let path = self.dir.join(&record.file);
        let bytes = std::fs::read(&path).map_err(|e| LabelError::io(&path, e))?;
        let found = sha256_hex(&bytes);
        if found != record.sha256 {
            return Err(LabelError::CropLibrary {
                path,
                message: format!(
                    "image hash {found} does not match the index's {}",
                    record.sha256
                ),
            });
        }
        let img = image::load_from_memory_with_format(&bytes, image::ImageFormat::Png)
            .map_err(|e| LabelError::CropLibrary {
                path: path.clone(),
                message: format!("cannot decode crop: {e}"),
            })?
            .into_luma8();
        if img.width() != record.w || img.height() != record.h {
            return Err(LabelError::CropLibrary {
                path,
                message: format!(
                    "crop is {}x{}, the index says {}x{}",
                    img.width(),
                    img.height(),
                    record.w,
                    record.h
                ),
            });
        }
        Ok(img.into_raw())
    }
}

/// Reads `index.csv`, reporting the line of the first bad row.
pub fn read_index(path: &Path) -> Result<Vec<CropRecord>> {
    let mut reader = csv::Reader::from_path(path).map_err(|e| csv_error(path, &e))?;
    let mut records = Vec::new();
    for row in reader.deserialize() {
        records.push(row.map_err(|e| csv_error(path, &e))?);
    }
    Ok(records)
}

/// Turns a `csv` error into a [`LabelError::Csv`] with its line.
pub(crate) fn csv_error(path: &Path, err: &csv::Error) -> LabelError {
    if let csv::ErrorKind::Io(io) = err.kind() {
        return LabelError::io(path, std::io::Error::new(io.kind(), io.to_string()));
    }
    LabelError::Csv {
        path: path.to_path_buf(),
        line: err.position().map(|p| p.line()).unwrap_or(0),
        message: err.to_string(),
    }
}
