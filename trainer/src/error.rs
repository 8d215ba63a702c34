//! The error type of the trainer crate: every variant names the file or the
//! setting that is wrong, and [`TrainerError::is_bad_input`] tells the binary
//! whether the user must fix something (exit code 2) or the run failed (1).

use std::path::PathBuf;
use symtrust_labels::LabelError;

/// Everything that can go wrong while training, saving, loading or running a model.
#[derive(Debug, thiserror::Error)]
pub enum TrainerError {
    /// A site or crop-library error from the labels crate (bad manifest, bad hash, ...).
    #[error(transparent)]
    Labels(#[from] LabelError),
    /// An operating-system error on a named file.
    #[error("{path}: {source}")]
    Io {
        /// The file or folder involved.
        path: PathBuf,
        /// The underlying error.
        #[source]
        source: std::io::Error,
    },
    /// A tensor operation failed (a bug or an exhausted resource, not bad input).
    #[error("tensor operation failed while {context}: {source}")]
    Tensor {
        /// What the trainer was doing.
        context: String,
        /// Candle's error.
        #[source]
        source: candle_core::Error,
    },
    /// An architecture or training setting that cannot work.
    #[error("invalid setting: {message}")]
    Settings {
        /// What is wrong and how to fix it.
        message: String,
    },
    /// A crop library that cannot be trained on as it is.
    #[error("{path}: {message}")]
    CropLibrary {
        /// The library folder or file.
        path: PathBuf,
        /// What is wrong and how to fix it.
        message: String,
    },
    /// Window pixels whose size does not match the model.
    #[error("{what}: window is {found} but the model expects {expected}")]
    WindowMismatch {
        /// Which input (file, library or argument).
        what: String,
        /// The size the model was trained on, e.g. `100 x 100`.
        expected: String,
        /// The size that was given.
        found: String,
    },
    /// A model folder that is incomplete, unreadable or inconsistent.
    #[error("{path}: {message}")]
    ModelFolder {
        /// The file in the model folder.
        path: PathBuf,
        /// What is wrong and how to fix it.
        message: String,
    },
    /// Weights whose SHA-256 differs from the one in the model card.
    #[error(
        "{path}: SHA-256 {found} does not match the model card's {expected}; the weights were changed or damaged, retrain or restore the folder"
    )]
    WeightsTampered {
        /// The weights file.
        path: PathBuf,
        /// SHA-256 recorded in the card.
        expected: String,
        /// SHA-256 of the file as found.
        found: String,
    },
    /// `--resume` was asked for but no checkpoint of this run exists.
    #[error(
        "{path}: no checkpoint to resume for these settings; run without --resume to start afresh"
    )]
    NothingToResume {
        /// The checkpoint file that was looked for.
        path: PathBuf,
    },
    /// Training was stopped before it finished; no model folder was written.
    #[error(
        "training interrupted after {epochs_done} finished epoch(s); no model was written; continue with --resume (checkpoint {checkpoint})"
    )]
    Interrupted {
        /// Epochs completed and saved in the checkpoint.
        epochs_done: usize,
        /// The checkpoint file.
        checkpoint: PathBuf,
    },
}

/// Result with [`TrainerError`].
pub type Result<T> = std::result::Result<T, TrainerError>;

impl TrainerError {
    /// An I/O error on `path`.
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Self::Io {
            path: path.into(),
            source,
        }
    }

    /// True when the user must fix an input (a file, a flag, a setting): exit code 2.
    pub fn is_bad_input(&self) -> bool {
        match self {
            Self::Labels(LabelError::Io { source, .. }) => {
                source.kind() == std::io::ErrorKind::NotFound
            }
            Self::Labels(_) => true,
            Self::Io { source, .. } => source.kind() == std::io::ErrorKind::NotFound,
            Self::Tensor { .. } | Self::Interrupted { .. } => false,
            Self::Settings { .. }
            | Self::CropLibrary { .. }
            | Self::WindowMismatch { .. }
            | Self::ModelFolder { .. }
            | Self::WeightsTampered { .. }
            | Self::NothingToResume { .. } => true,
        }
    }
}

/// Adds what the trainer was doing to a Candle error.
pub(crate) trait TensorContext<T> {
    /// Maps a Candle error to [`TrainerError::Tensor`] with `context`.
    fn during(self, context: &str) -> Result<T>;
}

impl<T> TensorContext<T> for std::result::Result<T, candle_core::Error> {
    fn during(self, context: &str) -> Result<T> {
        self.map_err(|source| TrainerError::Tensor {
            context: context.to_string(),
            source,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tampered_weights_are_bad_input_and_interruption_is_failure() {
        let tampered = TrainerError::WeightsTampered {
            path: "m/weights.safetensors".into(),
            expected: "aa".into(),
            found: "bb".into(),
        };
        assert!(tampered.is_bad_input());
        assert!(tampered.to_string().contains("weights.safetensors"));
        let stopped = TrainerError::Interrupted {
            epochs_done: 2,
            checkpoint: "c".into(),
        };
        assert!(!stopped.is_bad_input());
    }
}
