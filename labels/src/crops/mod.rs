//! Crop libraries: fixed windows cut from training sheets for the classifier.

pub mod builder;
pub mod library;

pub use builder::{
    BuildOutcome, CropRequest, PlannedCrop, build_library, cut_window, ink_fraction, plan_crops,
    site_crop_settings,
};
pub use library::{
    BACKGROUND, CROP_SCHEMA_VERSION, CropCounts, CropKind, CropLibrary, CropManifest, CropRecord,
    CropSettings, CropSplit, ManifestSheet,
};
