//! One module per command: clap arguments plus a `run` that wires library calls.

pub mod init;
