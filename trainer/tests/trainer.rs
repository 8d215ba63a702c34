//! Integration tests of the trainer crate, in one binary (one link, shared helpers).

mod suite;
