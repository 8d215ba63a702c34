//! The test modules and their shared helpers.

pub mod library;

mod bad_input;
mod digits;
mod gradients;
mod kernels;
mod score_map;
mod training;
