//! The error type of the review crate.

/// Everything that can stop the review server from starting or serving.
#[derive(Debug, thiserror::Error)]
pub enum ReviewError {
    /// A label store or site operation failed.
    #[error(transparent)]
    Labels(#[from] symtrust_labels::LabelError),
    /// The listening socket could not be opened.
    #[error("cannot listen on {addr}: {message}")]
    Listen {
        /// The address asked for.
        addr: String,
        /// What the operating system said.
        message: String,
    },
    /// The server settings are unsafe or inconsistent.
    #[error("{0}")]
    Settings(String),
    /// No random token could be made.
    #[error("cannot read random bytes for the session token from {path}: {source}")]
    Random {
        /// The random source.
        path: String,
        /// The underlying error.
        #[source]
        source: std::io::Error,
    },
}

impl ReviewError {
    /// True when the error is the user's to fix (a flag, the site), not a failure.
    pub fn is_bad_input(&self) -> bool {
        match self {
            ReviewError::Labels(_) | ReviewError::Settings(_) => true,
            ReviewError::Listen { .. } | ReviewError::Random { .. } => false,
        }
    }
}

/// Result with [`ReviewError`].
pub type Result<T> = std::result::Result<T, ReviewError>;
