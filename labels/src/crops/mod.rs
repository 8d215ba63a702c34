//! Crop libraries: fixed windows cut from training sheets for the classifier.

pub mod builder;
pub mod library;

pub use builder::{BuildOutcome, CropRequest, build_library, cut_window, ink_fraction};
pub use library::{
    BACKGROUND, CROP_SCHEMA_VERSION, CropCounts, CropKind, CropLibrary, CropManifest, CropRecord,
    CropSettings, CropSplit, ManifestSheet,
};
