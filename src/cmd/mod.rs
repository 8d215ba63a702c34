//! One module per command: clap arguments plus a `run` that wires library calls.

pub mod compare;
pub mod crops;
pub mod demo;
pub mod detect;
pub mod eval;
pub mod init;
pub mod labels;
pub mod nightly;
pub mod report;
pub mod review;
pub mod sheets;
pub mod synth;
pub mod train;
