//! symtrust-eval: from score maps to detections, from detections to matches, and
//! from matches to every figure an auditor needs (PR curves, AP, operating points,
//! confusion tables, calibration, bootstrap intervals, model comparison).
//!
//! Everything here is a pure function over plain data: no file I/O, no Candle.
//! Score maps arrive as plain `f32` grids ([`peaks::ScoreGrid`]); detections and
//! boxes use the types of `symtrust-labels`. Every result type is
//! `Serialize + Deserialize` so the binary can write it into `metrics.json`.
//!
//! Conventions used throughout:
//! - a detection is kept at threshold `t` when its score is `>= t`;
//! - tied scores form one threshold: a PR curve has one point per distinct score,
//!   so a metric never depends on the order in which tied detections were listed;
//! - a ratio whose denominator is zero is `None`, never a silent 0 or NaN.
#![deny(missing_docs)]

pub mod ap;
pub mod bootstrap;
pub mod calibration;
pub mod compare;
pub mod confusion;
pub mod crop_eval;
pub mod error;
pub mod match_log;
pub mod matching;
pub mod nms;
pub mod operating;
mod overlaps;
pub mod peaks;
pub mod pr;
mod ranking;
pub mod record;
pub mod roc;
pub mod sheet_eval;
pub mod sheets;
pub mod special;
pub mod statement;
mod truth_grid;

pub use error::{EvalError, Result};
