//! `symtrust labels check | import | export`: label QA over the site, and moving
//! labels in and out as CSV or COCO-format JSON.

use crate::context::Ctx;
use crate::exit;
use clap::{Args, Subcommand, ValueEnum};
use std::path::PathBuf;
use symtrust_labels::interchange::{self, Format};
use symtrust_labels::qa;

/// Arguments of `symtrust labels`.
#[derive(Debug, Args)]
pub struct LabelsArgs {
    /// What to do.
    #[command(subcommand)]
    pub action: LabelsAction,
}

/// An interchange format on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum FormatArg {
    /// CSV, one row per symbol: sheet,id,class,x,y,w,h,state.
    Csv,
    /// COCO-format detection JSON.
    Coco,
}

impl From<FormatArg> for Format {
    fn from(f: FormatArg) -> Self {
        match f {
            FormatArg::Csv => Format::Csv,
            FormatArg::Coco => Format::Coco,
        }
    }
}

/// `labels` subcommands.
#[derive(Debug, Subcommand)]
pub enum LabelsAction {
    /// Check every label document: boxes, classes, overlaps, sizes, sheet hashes.
    #[command(
        after_help = "Errors exit with 2; warnings exit with 0 unless --strict.\n\n\
Example:\n  symtrust labels check --site ./north-unit --strict"
    )]
    Check {
        /// Treat warnings as errors (exit code 2 when there is any).
        #[arg(long)]
        strict: bool,
    },
    /// Import labels from a CSV or COCO-format file; accepted labels are never overwritten.
    #[command(
        after_help = "Example:\n  symtrust labels import --site ./north-unit --format csv reviewed.csv"
    )]
    Import {
        /// Format of the file.
        #[arg(long, value_enum)]
        format: FormatArg,
        /// The file to import.
        file: PathBuf,
    },
    /// Export every symbol (all review states) to a CSV or COCO-format file.
    #[command(
        after_help = "Example:\n  symtrust labels export --site ./north-unit --format coco --out labels-coco.json"
    )]
    Export {
        /// Format of the file.
        #[arg(long, value_enum)]
        format: FormatArg,
        /// The file to write (replaced atomically).
        #[arg(long, value_name = "FILE")]
        out: PathBuf,
    },
}

/// Runs a `labels` subcommand.
pub fn run(ctx: &Ctx, args: &LabelsArgs) -> anyhow::Result<u8> {
    let site = ctx.open_site()?;
    match &args.action {
        LabelsAction::Check { strict } => {
            let report = qa::check_site(&site)?;
            if ctx.json {
                ctx.print_json(&report)?;
            } else {
                for f in &report.findings {
                    println!("{}", f.line());
                }
                let verdict = if report.errors > 0 {
                    "fix the errors before building crops or evaluating"
                } else if report.warnings > 0 && *strict {
                    "warnings fail with --strict"
                } else {
                    "labels are usable"
                };
                ctx.say(format!(
                    "{} error(s), {} warning(s): {verdict}",
                    report.errors, report.warnings
                ));
            }
            Ok(if report.errors > 0 || (*strict && report.warnings > 0) {
                exit::BAD_INPUT
            } else {
                exit::OK
            })
        }
        LabelsAction::Import { format, file } => {
            let report = interchange::import_file(&site, (*format).into(), file)?;
            if ctx.json {
                ctx.print_json(&report)?;
            } else {
                ctx.say(format!(
                    "{}: {} added, {} updated, {} unchanged, {} skipped; sheets saved: {}",
                    file.display(),
                    report.added,
                    report.updated,
                    report.unchanged,
                    report.skipped.len(),
                    if report.sheets_changed.is_empty() {
                        "none".to_string()
                    } else {
                        report.sheets_changed.join(", ")
                    }
                ));
                for s in &report.skipped {
                    ctx.say(format!(
                        "skipped {} of sheet {} ({}): {}",
                        s.id, s.sheet, s.location, s.reason
                    ));
                }
            }
            Ok(exit::OK)
        }
        LabelsAction::Export { format, out } => {
            let summary = interchange::export(&site, (*format).into(), out)?;
            if ctx.json {
                ctx.print_json(&summary)?;
            } else {
                ctx.say(format!(
                    "wrote {} symbols of {} sheets to {}",
                    summary.symbols, summary.sheets, summary.file
                ));
            }
            Ok(exit::OK)
        }
    }
}
