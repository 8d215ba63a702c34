//! Training data: a crop library loaded into memory and checked against the site.
//!
//! Pixels are kept as the library stores them (8-bit, paper 255, ink 0) and
//! turned into network input by [`ink`], the one fixed normalisation:
//! `ink = (255 - pixel) / 255`, so paper is 0 and full ink is 1. Scanned sheets
//! are mostly paper, so zero paper keeps activations sparse and makes padding
//! by paper (augmentation shifts) the same as padding by zero.
//!
//! The split into train and validation is the library's, by sheet.

use crate::error::{Result, TrainerError};
use rayon::prelude::*;
use std::path::{Path, PathBuf};
use symtrust_labels::crops::{CropLibrary, CropSplit};
use symtrust_labels::hash::sha256_file;
use symtrust_labels::site::ClassSpec;

/// The documented input normalisation, as written into every model card.
pub const NORMALISATION: &str = "grayscale 8-bit at the site's canonical resolution; ink = (255 - pixel) / 255 (paper 0, full ink 1)";

/// Network input value of an 8-bit pixel (paper 255, ink 0).
pub fn ink(pixel: u8) -> f32 {
    f32::from(255 - pixel) / 255.0
}

/// One crop: its pixels and its class index.
#[derive(Debug, Clone, PartialEq)]
pub struct Sample {
    /// `window * window` bytes, row-major, paper 255, ink 0.
    pub pixels: Vec<u8>,
    /// Index into [`Dataset::classes`].
    pub class: usize,
}

/// Where a data set came from, for the model card.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct DataSource {
    /// Crop library id (its folder name).
    pub crop_library: String,
    /// SHA-256 of the library's `manifest.json`.
    pub manifest_sha256: String,
    /// SHA-256 of its `index.csv`, as recorded in the manifest.
    pub index_sha256: String,
    /// Canonical resolution of the crops, dots per inch.
    pub dpi: f64,
}

/// Crops split by sheet, ready for training.
#[derive(Debug, Clone)]
pub struct Dataset {
    /// Class names in model order (site classes, then background).
    pub classes: Vec<String>,
    /// Per class: may it be turned by 90 degrees in augmentation.
    pub rotatable: Vec<bool>,
    /// Side of the square window.
    pub window: usize,
    /// Training crops.
    pub train: Vec<Sample>,
    /// Validation crops (from other sheets).
    pub validation: Vec<Sample>,
    /// Provenance.
    pub source: DataSource,
}

impl Dataset {
    /// Loads the library at `dir` for a site with `classes` and `window`:
    /// checks the index hash, every image hash, the classes and the window, and
    /// refuses a class with no training crop or an empty validation split.
    pub fn load(dir: &Path, classes: &[ClassSpec], window: u32) -> Result<Self> {
        let lib = CropLibrary::open(dir)?;
        let manifest_path = dir.join("manifest.json");
        let site_names: Vec<String> = classes.iter().map(|c| c.name.clone()).collect();
        if lib.manifest.classes != site_names {
            return Err(TrainerError::CropLibrary {
                path: manifest_path,
                message: format!(
                    "the library's classes {:?} differ from site.toml's {:?}; rebuild the crops with `symtrust crops build`",
                    lib.manifest.classes, site_names
                ),
            });
        }
        if lib.manifest.settings.window != window {
            return Err(TrainerError::WindowMismatch {
                what: format!("crop library {}", manifest_path.display()),
                expected: format!("{window} x {window} (site.toml)"),
                found: format!("{0} x {0}", lib.manifest.settings.window),
            });
        }
        let loaded: Vec<(CropSplit, Sample)> = lib
            .records
            .par_iter()
            .map(|r| {
                Ok((
                    r.split,
                    Sample {
                        pixels: lib.load_pixels(r)?,
                        class: lib.class_index(r),
                    },
                ))
            })
            .collect::<Result<_>>()?;
        let mut rotatable: Vec<bool> = classes.iter().map(|c| c.rotatable).collect();
        rotatable.push(true);
        let (mut train, mut validation) = (Vec::new(), Vec::new());
        for (split, s) in loaded {
            match split {
                CropSplit::Train => train.push(s),
                CropSplit::Validation => validation.push(s),
            }
        }
        let data = Self {
            classes: lib.class_names(),
            rotatable,
            window: window as usize,
            train,
            validation,
            source: DataSource {
                crop_library: lib.manifest.id.clone(),
                manifest_sha256: sha256_file(&manifest_path)?,
                index_sha256: lib.manifest.index_sha256.clone(),
                dpi: lib.manifest.settings.dpi,
            },
        };
        data.check(dir)?;
        Ok(data)
    }

    /// Refuses a class without training crops and an empty validation split.
    pub fn check(&self, dir: &Path) -> Result<()> {
        let counts = self.class_counts(&self.train);
        for (name, n) in self.classes.iter().zip(&counts) {
            if *n == 0 {
                return Err(TrainerError::CropLibrary {
                    path: dir.to_path_buf(),
                    message: format!(
                        "class {name:?} has no training crops; label some of it on a training sheet or remove it from site.toml, then rebuild the crops"
                    ),
                });
            }
        }
        if self.validation.is_empty() {
            return Err(TrainerError::CropLibrary {
                path: dir.to_path_buf(),
                message: "no validation crops: early stopping needs validation sheets (raise validation_fraction in site.toml and rebuild the crops)".to_string(),
            });
        }
        for s in self.train.iter().chain(&self.validation) {
            if s.pixels.len() != self.window * self.window || s.class >= self.classes.len() {
                return Err(TrainerError::WindowMismatch {
                    what: format!("a crop in {}", dir.display()),
                    expected: format!("{} pixels", self.window * self.window),
                    found: format!("{} pixels", s.pixels.len()),
                });
            }
        }
        Ok(())
    }

    /// Crops per class in `samples`.
    pub fn class_counts(&self, samples: &[Sample]) -> Vec<usize> {
        let mut counts = vec![0; self.classes.len()];
        for s in samples {
            counts[s.class] += 1;
        }
        counts
    }
}

/// The library folder to train on: `crops/<id>` when `id` is given, else the
/// newest library in `crops/` (by manifest creation time, then id).
pub fn find_library(crops_dir: &Path, id: Option<&str>) -> Result<PathBuf> {
    if let Some(id) = id {
        let dir = crops_dir.join(id);
        if !dir.join("manifest.json").is_file() {
            return Err(TrainerError::CropLibrary {
                path: dir,
                message: format!(
                    "no crop library {id:?} here; list {} for the ids",
                    crops_dir.display()
                ),
            });
        }
        return Ok(dir);
    }
    let entries = std::fs::read_dir(crops_dir).map_err(|e| TrainerError::CropLibrary {
        path: crops_dir.to_path_buf(),
        message: format!("cannot list crop libraries ({e}); build one with `symtrust crops build`"),
    })?;
    let mut best: Option<(String, String, PathBuf)> = None;
    for entry in entries {
        let entry = entry.map_err(|e| TrainerError::io(crops_dir, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        let manifest = entry.path().join("manifest.json");
        if name.starts_with('.') || !manifest.is_file() {
            continue;
        }
        let text =
            std::fs::read_to_string(&manifest).map_err(|e| TrainerError::io(&manifest, e))?;
        let created = serde_json::from_str::<serde_json::Value>(&text)
            .ok()
            .and_then(|v| {
                v.get("created")
                    .and_then(|c| c.as_str())
                    .map(str::to_string)
            })
            .unwrap_or_default();
        if best
            .as_ref()
            .is_none_or(|(c, n, _)| (&created, &name) > (c, n))
        {
            best = Some((created, name, entry.path()));
        }
    }
    best.map(|(_, _, p)| p)
        .ok_or_else(|| TrainerError::CropLibrary {
            path: crops_dir.to_path_buf(),
            message: "no crop library found; build one with `symtrust crops build`".to_string(),
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paper_is_zero_and_ink_is_one() {
        assert_eq!(ink(255), 0.0);
        assert_eq!(ink(0), 1.0);
        assert!((ink(128) - 127.0 / 255.0).abs() < 1e-7);
    }

    #[test]
    fn missing_crops_folder_names_the_folder() {
        let dir = tempfile::tempdir().unwrap();
        let err = find_library(&dir.path().join("crops"), None).unwrap_err();
        assert!(err.to_string().contains("crops"), "{err}");
        assert!(err.is_bad_input());
    }
}
