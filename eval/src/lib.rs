//! symtrust-eval.
#![deny(missing_docs)]
