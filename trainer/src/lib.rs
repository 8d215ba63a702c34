//! symtrust-trainer.
#![deny(missing_docs)]
