//! The site folder and its configuration file `site.toml`.
//!
//! A site is a folder holding `site.toml`, `sheets/` (raster sheets as given),
//! `labels/` (one label document per sheet), `crops/<id>/`, `models/<id>/` and
//! `reports/<id>/`. Every setting that decides a figure lives in `site.toml`, so
//! two people with the same folder get the same crops, models and numbers.

use crate::error::{LabelError, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Version of the `site.toml` format written by this build.
pub const SITE_SCHEMA_VERSION: u32 = 1;

/// Name of the configuration file at the root of a site.
pub const SITE_FILE: &str = "site.toml";

/// One symbol class the site labels and detects.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ClassSpec {
    /// Short name used in labels and reports (letters, digits, `_`, `-`).
    pub name: String,
    /// What the symbol is, in words.
    pub description: String,
    /// Nominal size on paper in millimetres (the larger side of the symbol).
    pub nominal_mm: f64,
    /// True when the symbol may appear turned by 90 degrees (augmentation may rotate it).
    #[serde(default)]
    pub rotatable: bool,
}

/// How crop libraries are cut.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct CropOptions {
    /// Jittered copies of each positive besides the centred one.
    pub jitter_copies: u32,
    /// Largest jitter shift in pixels.
    pub jitter_pixels: u32,
    /// Reject random negatives whose ink fraction is below this (0 keeps blank paper).
    pub min_negative_ink: f64,
    /// Cap on hard negatives taken from one sheet.
    pub hard_negatives_per_sheet: u32,
}

impl Default for CropOptions {
    fn default() -> Self {
        Self {
            jitter_copies: 2,
            jitter_pixels: 4,
            min_negative_ink: 0.005,
            hard_negatives_per_sheet: 50,
        }
    }
}

/// Architecture of the classifier (read by the trainer).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ModelSettings {
    /// Output channels of each convolution layer.
    pub conv_channels: Vec<usize>,
    /// Kernel side of each convolution layer (same length as `conv_channels`).
    pub conv_kernels: Vec<usize>,
    /// Units of the fully connected hidden layer.
    pub hidden: usize,
    /// Dropout probability before the output layer, in `[0, 1)`.
    pub dropout: f64,
}

impl Default for ModelSettings {
    fn default() -> Self {
        Self {
            conv_channels: vec![16, 32, 64],
            conv_kernels: vec![5, 5, 3],
            hidden: 128,
            dropout: 0.25,
        }
    }
}

/// Training schedule (read by the trainer).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct TrainSettings {
    /// Largest number of epochs.
    pub epochs: usize,
    /// Crops per optimiser step.
    pub batch_size: usize,
    /// Peak learning rate of AdamW.
    pub learning_rate: f64,
    /// AdamW weight decay.
    pub weight_decay: f64,
    /// Epochs without improvement of the validation metric before stopping early.
    pub patience: usize,
}

impl Default for TrainSettings {
    fn default() -> Self {
        Self {
            epochs: 30,
            batch_size: 64,
            learning_rate: 1e-3,
            weight_decay: 1e-4,
            patience: 5,
        }
    }
}

/// The contents of `site.toml`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SiteConfig {
    /// Format version ([`SITE_SCHEMA_VERSION`]).
    pub schema_version: u32,
    /// A name for people.
    pub name: String,
    /// Side of the square crop window in pixels at the canonical resolution.
    #[serde(default = "default_window")]
    pub window: u32,
    /// Canonical resolution in dots per inch; every sheet is resampled to it on load.
    #[serde(default = "default_dpi")]
    pub dpi: f64,
    /// Random negative windows per training sheet.
    #[serde(default = "default_negatives")]
    pub negatives_per_sheet: u32,
    /// Fraction of the non-held-out sheets used for validation (by sheet).
    #[serde(default = "default_validation_fraction")]
    pub validation_fraction: f64,
    /// Seed of every random choice.
    #[serde(default = "default_seed")]
    pub seed: u64,
    /// Largest sheet accepted, in pixels (width times height), before resampling.
    #[serde(default = "default_max_pixels")]
    pub max_sheet_pixels: u64,
    /// Fewest accepted examples of a class for training to be meaningful.
    #[serde(default = "default_min_examples")]
    pub min_examples: usize,
    /// Sheet ids frozen for evaluation; never used for crops or training.
    #[serde(default)]
    pub held_out: Vec<String>,
    /// The symbol classes.
    pub classes: Vec<ClassSpec>,
    /// Crop library settings.
    #[serde(default)]
    pub crops: CropOptions,
    /// Classifier architecture.
    #[serde(default)]
    pub model: ModelSettings,
    /// Training schedule.
    #[serde(default)]
    pub train: TrainSettings,
}

fn default_window() -> u32 {
    100
}
fn default_dpi() -> f64 {
    200.0
}
fn default_negatives() -> u32 {
    100
}
fn default_validation_fraction() -> f64 {
    0.2
}
fn default_seed() -> u64 {
    1
}
fn default_max_pixels() -> u64 {
    DEFAULT_MAX_SHEET_PIXELS
}
fn default_min_examples() -> usize {
    20
}

/// Default pixel limit: an ISO A0 sheet at 600 dpi is about 19866 x 28087 px,
/// 558 Mpx; 600 Mpx admits it and refuses decompression bombs beyond it.
pub const DEFAULT_MAX_SHEET_PIXELS: u64 = 600_000_000;

impl SiteConfig {
    /// A new configuration with the given classes and default settings.
    pub fn new(name: &str, classes: Vec<ClassSpec>) -> Self {
        Self {
            schema_version: SITE_SCHEMA_VERSION,
            name: name.to_string(),
            window: default_window(),
            dpi: default_dpi(),
            negatives_per_sheet: default_negatives(),
            validation_fraction: default_validation_fraction(),
            seed: default_seed(),
            max_sheet_pixels: default_max_pixels(),
            min_examples: default_min_examples(),
            held_out: Vec::new(),
            classes,
            crops: CropOptions::default(),
            model: ModelSettings::default(),
            train: TrainSettings::default(),
        }
    }

    /// Checks every setting; `path` names the file in the message.
    pub fn validate(&self, path: &Path) -> Result<()> {
        let bad = |message: String| {
            Err(LabelError::Config {
                path: path.to_path_buf(),
                message,
            })
        };
        if self.schema_version != SITE_SCHEMA_VERSION {
            return bad(format!(
                "schema_version {} is not supported (this build reads {SITE_SCHEMA_VERSION})",
                self.schema_version
            ));
        }
        if self.window < 8 || self.window > 1024 {
            return bad(format!(
                "window = {} must be between 8 and 1024 pixels",
                self.window
            ));
        }
        if !(self.dpi.is_finite() && (50.0..=1200.0).contains(&self.dpi)) {
            return bad(format!("dpi = {} must be between 50 and 1200", self.dpi));
        }
        if !(0.0..1.0).contains(&self.validation_fraction) {
            return bad(format!(
                "validation_fraction = {} must be in [0, 1)",
                self.validation_fraction
            ));
        }
        if self.max_sheet_pixels == 0 {
            return bad("max_sheet_pixels must be positive".to_string());
        }
        if self.classes.is_empty() {
            return bad("no [[classes]]: add at least one symbol class".to_string());
        }
        let mut seen = std::collections::HashSet::new();
        for c in &self.classes {
            if !valid_name(&c.name) {
                return bad(format!(
                    "class name {:?} must be 1-64 letters, digits, '_' or '-'",
                    c.name
                ));
            }
            if c.name == crate::crops::BACKGROUND {
                return bad(format!("class name {:?} is reserved for negatives", c.name));
            }
            if !seen.insert(c.name.as_str()) {
                return bad(format!("class {:?} is listed twice", c.name));
            }
            if !(c.nominal_mm.is_finite() && c.nominal_mm > 0.0) {
                return bad(format!(
                    "class {:?}: nominal_mm = {} must be a positive number",
                    c.name, c.nominal_mm
                ));
            }
        }
        let mut held = std::collections::HashSet::new();
        for h in &self.held_out {
            if !valid_name(h) {
                return bad(format!("held_out entry {h:?} is not a valid sheet id"));
            }
            if !held.insert(h.as_str()) {
                return bad(format!("held_out lists {h:?} twice"));
            }
        }
        let m = &self.model;
        if m.conv_channels.is_empty() || m.conv_channels.len() != m.conv_kernels.len() {
            return bad(format!(
                "[model] conv_channels ({}) and conv_kernels ({}) must be non-empty and of equal length",
                m.conv_channels.len(),
                m.conv_kernels.len()
            ));
        }
        if m.conv_channels.contains(&0) || m.conv_kernels.iter().any(|k| *k == 0 || k % 2 == 0) {
            return bad(
                "[model] channels must be positive and kernels odd and positive".to_string(),
            );
        }
        if m.hidden == 0 || !(0.0..1.0).contains(&m.dropout) {
            return bad("[model] hidden must be positive and dropout in [0, 1)".to_string());
        }
        let t = &self.train;
        if t.epochs == 0 || t.batch_size == 0 {
            return bad("[train] epochs and batch_size must be positive".to_string());
        }
        let rate_ok = t.learning_rate.is_finite() && t.learning_rate > 0.0;
        let decay_ok = t.weight_decay.is_finite() && t.weight_decay >= 0.0;
        if !(rate_ok && decay_ok) {
            return bad(
                "[train] learning_rate must be positive and weight_decay non-negative".to_string(),
            );
        }
        if !(0.0..=1.0).contains(&self.crops.min_negative_ink) {
            return bad("[crops] min_negative_ink must be in [0, 1]".to_string());
        }
        Ok(())
    }

    /// The class with this name, if any.
    pub fn class(&self, name: &str) -> Option<&ClassSpec> {
        self.classes.iter().find(|c| c.name == name)
    }

    /// Class names in site order.
    pub fn class_names(&self) -> Vec<String> {
        self.classes.iter().map(|c| c.name.clone()).collect()
    }

    /// Nominal size of a class in pixels at the canonical resolution.
    pub fn nominal_pixels(&self, class: &ClassSpec) -> f64 {
        class.nominal_mm / 25.4 * self.dpi
    }
}

/// True for ids and names made of 1-64 ASCII letters, digits, `_`, `-` and `.`,
/// not starting with `.` (safe as a file name on every system).
pub fn valid_name(s: &str) -> bool {
    !s.is_empty()
        && s.len() <= 64
        && !s.starts_with('.')
        && s.bytes()
            .all(|b| b.is_ascii_alphanumeric() || b == b'_' || b == b'-' || b == b'.')
}

/// An opened site folder.
#[derive(Debug, Clone)]
pub struct Site {
    /// The site's root folder.
    pub root: PathBuf,
    /// Its parsed, validated `site.toml`.
    pub config: SiteConfig,
}

impl Site {
    /// Opens the site at `root`, or says clearly that it is not one.
    pub fn open(root: &Path) -> Result<Self> {
        let path = root.join(SITE_FILE);
        if !path.is_file() {
            return Err(LabelError::NotASite {
                path: root.to_path_buf(),
            });
        }
        let text = std::fs::read_to_string(&path).map_err(|e| LabelError::io(&path, e))?;
        let config = parse_config(&text, &path)?;
        Ok(Self {
            root: root.to_path_buf(),
            config,
        })
    }

    /// Creates a new site at `root` (made if missing) with this configuration.
    /// Refuses a folder that already holds a `site.toml`.
    pub fn create(root: &Path, config: SiteConfig) -> Result<Self> {
        let path = root.join(SITE_FILE);
        config.validate(&path)?;
        if path.exists() {
            return Err(LabelError::Config {
                path,
                message: "a site already exists here; edit it or choose another folder".to_string(),
            });
        }
        std::fs::create_dir_all(root).map_err(|e| LabelError::io(root, e))?;
        for sub in ["sheets", "labels"] {
            let d = root.join(sub);
            std::fs::create_dir_all(&d).map_err(|e| LabelError::io(&d, e))?;
        }
        let text = render_config(&config);
        crate::atomic::write_atomic(&path, text.as_bytes())?;
        Ok(Self {
            root: root.to_path_buf(),
            config,
        })
    }

    /// Rewrites `site.toml` atomically with a new configuration.
    pub fn save_config(&mut self, config: SiteConfig) -> Result<()> {
        let path = self.root.join(SITE_FILE);
        config.validate(&path)?;
        crate::atomic::write_atomic(&path, render_config(&config).as_bytes())?;
        self.config = config;
        Ok(())
    }

    /// `sheets/`.
    pub fn sheets_dir(&self) -> PathBuf {
        self.root.join("sheets")
    }

    /// `labels/`.
    pub fn labels_dir(&self) -> PathBuf {
        self.root.join("labels")
    }

    /// `crops/`.
    pub fn crops_dir(&self) -> PathBuf {
        self.root.join("crops")
    }

    /// `models/`.
    pub fn models_dir(&self) -> PathBuf {
        self.root.join("models")
    }

    /// `reports/`.
    pub fn reports_dir(&self) -> PathBuf {
        self.root.join("reports")
    }

    /// The label document path of a sheet id.
    pub fn label_path(&self, sheet_id: &str) -> PathBuf {
        self.labels_dir().join(format!("{sheet_id}.json"))
    }

    /// True when the sheet id is frozen for evaluation.
    pub fn is_held_out(&self, sheet_id: &str) -> bool {
        self.config.held_out.iter().any(|h| h == sheet_id)
    }
}

/// Parses and validates the text of a `site.toml`.
pub fn parse_config(text: &str, path: &Path) -> Result<SiteConfig> {
    let config: SiteConfig = toml::from_str(text).map_err(|e| {
        let line = e
            .span()
            .map(|s| text[..s.start.min(text.len())].matches('\n').count() + 1);
        LabelError::Config {
            path: path.to_path_buf(),
            message: match line {
                Some(l) => format!("line {l}: {}", e.message()),
                None => e.message().to_string(),
            },
        }
    })?;
    config.validate(path)?;
    Ok(config)
}

/// Renders a configuration as commented TOML.
pub fn render_config(config: &SiteConfig) -> String {
    let body = toml::to_string_pretty(config).expect("site config always serialises");
    format!(
        "# symtrust site configuration. Sizes are pixels at the canonical resolution `dpi`\n\
         # unless a name says otherwise; `held_out` sheets are frozen for evaluation.\n{body}"
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> SiteConfig {
        SiteConfig::new(
            "test",
            vec![ClassSpec {
                name: "bubble".into(),
                description: "instrument bubble".into(),
                nominal_mm: 11.0,
                rotatable: false,
            }],
        )
    }

    #[test]
    fn config_round_trips_through_toml() {
        let c = sample();
        let text = render_config(&c);
        let back = parse_config(&text, Path::new("site.toml")).unwrap();
        assert_eq!(c, back);
    }

    #[test]
    fn defaults_fill_missing_settings() {
        let text = "schema_version = 1\nname = \"x\"\n[[classes]]\nname = \"a\"\ndescription = \"d\"\nnominal_mm = 5.0\n";
        let c = parse_config(text, Path::new("site.toml")).unwrap();
        assert_eq!((c.window, c.dpi, c.negatives_per_sheet), (100, 200.0, 100));
    }

    #[test]
    fn bad_toml_names_the_line() {
        let text = "schema_version = 1\nname = \"x\"\nwindow = \"big\"\n";
        let err = parse_config(text, Path::new("s/site.toml")).unwrap_err();
        let msg = err.to_string();
        assert!(
            msg.contains("s/site.toml") && msg.contains("line 3"),
            "{msg}"
        );
    }

    #[test]
    fn rejects_duplicate_class_and_even_kernel() {
        let mut c = sample();
        c.classes.push(c.classes[0].clone());
        assert!(c.validate(Path::new("site.toml")).is_err());
        let mut c = sample();
        c.model.conv_kernels = vec![4, 5, 3];
        assert!(c.validate(Path::new("site.toml")).is_err());
    }

    #[test]
    fn nominal_pixels_at_200_dpi() {
        // 11 mm at 200 dpi = 11 / 25.4 * 200 = 86.61 px (unit conversion, 25.4 mm per inch).
        let c = sample();
        assert!((c.nominal_pixels(&c.classes[0]) - 86.614).abs() < 1e-3);
    }

    #[test]
    fn names_reject_path_tricks() {
        for bad in ["", "../x", "a/b", ".hidden", "a\\b", "a b", "a\0b"] {
            assert!(!valid_name(bad), "{bad:?}");
        }
        assert!(valid_name("fp-a-0003"));
    }
}
