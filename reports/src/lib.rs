//! symtrust-reports: plots, the HTML and Markdown report, CSV tables, sheet
//! overlays and the audit stamp. Nothing is rendered yet; the report issue fills
//! this crate, on top of the metric types of `symtrust-eval`.
#![deny(missing_docs)]
