//! The one error type of the reports crate.

use std::path::{Path, PathBuf};

/// Everything that can stop a report from being written or verified.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// Reading or writing a file failed.
    #[error("{path}: {source}")]
    Io {
        /// The file or folder.
        path: PathBuf,
        /// What the system said.
        source: std::io::Error,
    },
    /// An input file exists but cannot be used as it is.
    #[error("{path}: {message}")]
    Input {
        /// The file or folder.
        path: PathBuf,
        /// What is wrong and what to do.
        message: String,
    },
    /// The sheets or label documents changed since the evaluation read them.
    #[error(
        "{path}: its SHA-256 is {found}, but the evaluation read {expected}; the file changed since the evaluation, so the report would not describe it: restore the file or run the evaluation again"
    )]
    Changed {
        /// The file.
        path: PathBuf,
        /// Hash recorded by the evaluation.
        expected: String,
        /// Hash now.
        found: String,
    },
    /// A figure could not be drawn.
    #[error("figure {figure}: {message}")]
    Plot {
        /// Which figure.
        figure: String,
        /// What the plotting library said.
        message: String,
    },
    /// An error of the label crate (site, label documents, rasters).
    #[error(transparent)]
    Labels(#[from] symtrust_labels::LabelError),
}

impl ReportError {
    /// An I/O error on `path`.
    pub fn io(path: &Path, source: std::io::Error) -> Self {
        Self::Io {
            path: path.to_path_buf(),
            source,
        }
    }

    /// A bad-input error on `path`.
    pub fn input(path: &Path, message: impl Into<String>) -> Self {
        Self::Input {
            path: path.to_path_buf(),
            message: message.into(),
        }
    }

    /// True when the user must fix an input (exit code 2), false for a
    /// failure of the machine (exit code 1).
    pub fn is_bad_input(&self) -> bool {
        match self {
            Self::Io { source, .. } => source.kind() == std::io::ErrorKind::NotFound,
            Self::Input { .. } | Self::Changed { .. } | Self::Labels(_) => true,
            Self::Plot { .. } => false,
        }
    }
}

/// Result of the reports crate.
pub type Result<T> = std::result::Result<T, ReportError>;
