//! The local review page of symtrust (`symtrust review`): a small web server on
//! the engineer's own machine that serves one self-contained page for labelling
//! sheets and accepting or rejecting model proposals, saving every action at once
//! through the label store.
#![deny(missing_docs)]

pub mod edits;
pub mod error;
pub mod pyramid;
pub mod security;
pub mod server;
pub mod sheet_tiles;
pub mod summary;
pub mod tile_cache;

pub use error::{Result, ReviewError};
pub use server::{ReviewServer, ReviewSettings, Timeouts};
