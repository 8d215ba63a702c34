//! The one error type of the eval crate. Every variant names the input that is
//! wrong (the argument, the sheet, the row or the class) and the bad value, so the
//! binary can tell the user which file to fix.

/// Everything that can be wrong with the data handed to an eval function.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum EvalError {
    /// Two inputs that must have the same length do not.
    #[error("{what}: expected {expected} entries, got {got}")]
    LengthMismatch {
        /// Which input, e.g. "probability row 3".
        what: String,
        /// The length it must have.
        expected: usize,
        /// The length it has.
        got: usize,
    },
    /// A number is NaN or infinite.
    #[error("{what}: value {value} is not a finite number")]
    NonFinite {
        /// Which value, e.g. "sheet s01, detection #4, score".
        what: String,
        /// The value found.
        value: f64,
    },
    /// A number lies outside the range it must lie in.
    #[error("{what}: value {value} is outside [{lo}, {hi}]")]
    OutOfRange {
        /// Which value.
        what: String,
        /// The value found.
        value: f64,
        /// Smallest allowed value.
        lo: f64,
        /// Largest allowed value.
        hi: f64,
    },
    /// A setting is unusable (zero stride, zero bins, no resamples, ...).
    #[error("invalid setting {name}: {message}")]
    InvalidSetting {
        /// The setting's name.
        name: String,
        /// What is wrong and what is allowed.
        message: String,
    },
    /// A class name is not in the class list.
    #[error("{what}: class {class:?} is not one of the site's classes {known:?}")]
    UnknownClass {
        /// Where it was found.
        what: String,
        /// The unknown name.
        class: String,
        /// The known class names.
        known: Vec<String>,
    },
    /// A class index is not below the number of classes.
    #[error("{what}: class index {index} is not below the number of classes {n_classes}")]
    ClassIndexOutOfRange {
        /// Where it was found.
        what: String,
        /// The bad index.
        index: usize,
        /// How many classes there are.
        n_classes: usize,
    },
    /// A detection names a different sheet than the one it was handed in with.
    #[error("sheet {sheet:?}: detection #{index} belongs to sheet {found:?}")]
    WrongSheet {
        /// The sheet being evaluated.
        sheet: String,
        /// Index of the detection in its list.
        index: usize,
        /// The sheet the detection names.
        found: String,
    },
    /// Two models were not evaluated on the same sheets in the same order.
    #[error(
        "paired comparison needs the same sheets in the same order: position {position} holds {left:?} and {right:?}"
    )]
    SheetsDiffer {
        /// Position in the sheet lists.
        position: usize,
        /// Sheet id on the champion side (`<none>` when the list is shorter).
        left: String,
        /// Sheet id on the challenger side.
        right: String,
    },
    /// The same sheet id appears twice in one evaluation.
    #[error("sheet {sheet:?} is listed twice; each held-out sheet must be evaluated once")]
    DuplicateSheet {
        /// The repeated id.
        sheet: String,
    },
    /// Shard records that are not the shards of one run.
    #[error("shard records do not fit together: {what}")]
    ShardMismatch {
        /// What differs or is missing.
        what: String,
    },
    /// An input that must not be empty is empty.
    #[error("{what} is empty")]
    Empty {
        /// Which input.
        what: String,
    },
}

/// Result alias of the eval crate.
pub type Result<T> = std::result::Result<T, EvalError>;

/// Checks that `value` is finite.
pub(crate) fn finite(what: impl FnOnce() -> String, value: f64) -> Result<()> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(EvalError::NonFinite {
            what: what(),
            value,
        })
    }
}

/// Checks that `value` is finite and lies in `[lo, hi]`.
pub(crate) fn in_range(what: impl Fn() -> String, value: f64, lo: f64, hi: f64) -> Result<()> {
    finite(&what, value)?;
    if value < lo || value > hi {
        return Err(EvalError::OutOfRange {
            what: what(),
            value,
            lo,
            hi,
        });
    }
    Ok(())
}

/// An [`EvalError::InvalidSetting`].
pub(crate) fn setting(name: &str, message: impl Into<String>) -> EvalError {
    EvalError::InvalidSetting {
        name: name.to_string(),
        message: message.into(),
    }
}
