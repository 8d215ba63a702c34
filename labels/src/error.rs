//! The error type of the labels crate: every variant names the file and the bad value.

use std::path::PathBuf;

/// Everything that can go wrong while reading or writing a site folder.
#[derive(Debug, thiserror::Error)]
pub enum LabelError {
    /// An operating-system error on a named file.
    #[error("{path}: {source}")]
    Io {
        /// The file or folder involved.
        path: PathBuf,
        /// The underlying error.
        #[source]
        source: std::io::Error,
    },
    /// A folder is not a site (no `site.toml`).
    #[error(
        "{path} is not a symtrust site (no site.toml); run `symtrust init {path}` or pass --site DIR"
    )]
    NotASite {
        /// The folder that was given.
        path: PathBuf,
    },
    /// `site.toml` could not be parsed or holds an invalid setting.
    #[error("{path}: {message}")]
    Config {
        /// The config file.
        path: PathBuf,
        /// What is wrong and how to fix it.
        message: String,
    },
    /// A JSON document could not be parsed.
    #[error("{path}:{line}:{column}: {message}")]
    Json {
        /// The file.
        path: PathBuf,
        /// 1-based line of the error.
        line: usize,
        /// 1-based column of the error.
        column: usize,
        /// What the parser said.
        message: String,
    },
    /// A CSV file could not be parsed.
    #[error("{path}:{line}: {message}")]
    Csv {
        /// The file.
        path: PathBuf,
        /// 1-based line of the error (0 when unknown).
        line: u64,
        /// What is wrong.
        message: String,
    },
    /// A document parsed but breaks a rule of its format.
    #[error("{path}: {message}")]
    Invalid {
        /// The file.
        path: PathBuf,
        /// What is wrong and how to fix it.
        message: String,
    },
    /// An image could not be read, or was refused.
    #[error("{path}: {message}")]
    Image {
        /// The image file.
        path: PathBuf,
        /// Why it was refused.
        message: String,
    },
    /// A write was refused because the document changed since it was read.
    #[error(
        "{path}: stale revision: you read revision {expected} but the sheet is now at revision {found} (last changed by {changed_by} at {changed_at}); reload the sheet and apply your change again"
    )]
    StaleRevision {
        /// The label document.
        path: PathBuf,
        /// The revision the writer had read.
        expected: u64,
        /// The revision found on disk.
        found: u64,
        /// Who made the newer revision.
        changed_by: String,
        /// When the newer revision was made.
        changed_at: String,
    },
    /// A crop library's files no longer match its manifest.
    #[error("{path}: {message}; rebuild it with `symtrust crops build`")]
    CropLibrary {
        /// The file that does not match.
        path: PathBuf,
        /// What does not match.
        message: String,
    },
    /// Settings of the synthetic sheet generator are out of range.
    #[error("synthetic sheet settings: {message}")]
    SynthSettings {
        /// Which setting is wrong and its allowed range.
        message: String,
    },
}

/// Result with [`LabelError`].
pub type Result<T> = std::result::Result<T, LabelError>;

impl LabelError {
    /// Wraps an I/O error with the path it concerns.
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        LabelError::Io {
            path: path.into(),
            source,
        }
    }

    /// A JSON parse error with its position.
    pub fn json(path: impl Into<PathBuf>, err: &serde_json::Error) -> Self {
        LabelError::Json {
            path: path.into(),
            line: err.line(),
            column: err.column(),
            message: err.to_string(),
        }
    }

    /// A rule broken by a document.
    pub fn invalid(path: impl Into<PathBuf>, message: impl Into<String>) -> Self {
        LabelError::Invalid {
            path: path.into(),
            message: message.into(),
        }
    }
}
