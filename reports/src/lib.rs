//! symtrust-reports.
#![deny(missing_docs)]
