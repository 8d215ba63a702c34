//! The symtrust classifier: a small LeNet-style network in Candle, its data
//! loading and augmentation, a reproducible training loop with checkpoints,
//! checked model folders, batch classification and fully-convolutional score
//! maps over whole sheets.
//!
//! Everything runs on the CPU. Inference results are plain structs
//! ([`scoremap::ScoreMap`], `Vec<f32>` probabilities) so the evaluation crate
//! never depends on Candle.
#![deny(missing_docs)]

pub mod arch;
pub mod augment;
pub mod blank;
pub mod card;
pub mod checkpoint;
pub mod data;
pub mod error;
pub mod infer;
pub mod kernels;
pub mod metrics;
pub mod model;
pub mod ops;
pub mod optim;
pub mod scoremap;
pub mod train;

pub use arch::Architecture;
pub use card::{ModelCard, load_model, write_model};
pub use data::{Dataset, Sample};
pub use error::{Result, TrainerError};
pub use infer::Classifier;
pub use scoremap::{ScoreMap, ScoreMapOptions};
pub use train::{TrainObserver, TrainOptions, TrainOutcome, train};

/// Threads the CPU kernels and the score map use (rayon's pool; set
/// `RAYON_NUM_THREADS` to change it).
pub fn threads() -> usize {
    rayon::current_num_threads()
}
