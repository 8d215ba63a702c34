//! Exit codes of every command, and how an error maps to one.

use crate::context;
use symtrust_labels::LabelError;

/// Success.
pub const OK: u8 = 0;
/// The command ran and failed (I/O, a failed check with `--strict` aside).
pub const FAILURE: u8 = 1;
/// Bad usage or bad input: a flag, a file or a document the user must fix.
pub const BAD_INPUT: u8 = 2;
/// `compare` and `nightly`: the challenger is worse than the champion and was not promoted.
pub const REJECTED: u8 = 3;
/// `nightly`: no accepted label changed since the last run, so nothing was trained.
pub const NOTHING_TO_DO: u8 = 4;

/// The exit code for an error that ended a command.
pub fn code_for(err: &anyhow::Error) -> u8 {
    for cause in err.chain() {
        if let Some(e) = cause.downcast_ref::<LabelError>() {
            return match e {
                LabelError::Io { source, .. } if source.kind() != std::io::ErrorKind::NotFound => {
                    FAILURE
                }
                _ => BAD_INPUT,
            };
        }
        if let Some(e) = cause.downcast_ref::<symtrust_trainer::TrainerError>() {
            return if e.is_bad_input() { BAD_INPUT } else { FAILURE };
        }
        if cause.downcast_ref::<symtrust_eval::EvalError>().is_some() {
            return BAD_INPUT;
        }
        if cause.downcast_ref::<context::UsageError>().is_some() {
            return BAD_INPUT;
        }
    }
    FAILURE
}
