//! Crop libraries: fixed windows cut from training sheets for the classifier.

pub mod library;

pub use library::{
    BACKGROUND, CROP_SCHEMA_VERSION, CropCounts, CropKind, CropLibrary, CropManifest, CropRecord,
    CropSettings, CropSplit, ManifestSheet,
};
