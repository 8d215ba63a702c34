//! `symtrust sheets add FILE...`: register raster sheets.

use crate::context::Ctx;
use crate::exit;
use clap::{Args, Subcommand};
use std::path::PathBuf;
use symtrust_labels::document::DpiSource;
use symtrust_labels::sheets::register_sheet;

/// Arguments of `symtrust sheets`.
#[derive(Debug, Args)]
pub struct SheetsArgs {
    /// What to do.
    #[command(subcommand)]
    pub action: SheetsAction,
}

/// `sheets` subcommands.
#[derive(Debug, Subcommand)]
pub enum SheetsAction {
    /// Register raster sheets (PNG, TIFF incl. 1-bit scans, JPEG) with the site.
    #[command(after_help = "Example:\n  symtrust sheets add --site ./north-unit scans/*.tif")]
    Add {
        /// Image files; the file name without extension becomes the sheet id.
        #[arg(required = true)]
        files: Vec<PathBuf>,
    },
}

/// Runs a `sheets` subcommand.
pub fn run(ctx: &Ctx, args: &SheetsArgs) -> anyhow::Result<u8> {
    let SheetsAction::Add { files } = &args.action;
    let site = ctx.open_site()?;
    let bar = ctx.progress(files.len() as u64, "registering");
    let mut results = Vec::new();
    let mut failed = 0;
    for file in files {
        match register_sheet(&site, file) {
            Ok(r) => {
                let s = &r.sheet;
                let how = match s.dpi_source {
                    DpiSource::FileMetadata => "from the file",
                    DpiSource::SiteDefault => "not in the file; site default assumed",
                };
                let resampled = if (s.source_dpi - s.dpi).abs() > 1e-6 {
                    format!(", resampled to {}x{} at {} dpi", s.width, s.height, s.dpi)
                } else {
                    String::new()
                };
                bar.suspend(|| {
                    ctx.say(if r.added {
                        format!(
                            "added {}: {}x{} px, {:.0} dpi ({how}){resampled}",
                            s.id, s.source_width, s.source_height, s.source_dpi
                        )
                    } else {
                        format!("{} is already registered with the same content", s.id)
                    })
                });
                results.push(serde_json::json!({"sheet": s, "added": r.added}));
            }
            Err(e) => {
                failed += 1;
                bar.suspend(|| eprintln!("error: {e}"));
                results.push(serde_json::json!({"file": file, "error": e.to_string()}));
            }
        }
        bar.inc(1);
    }
    bar.finish_and_clear();
    if ctx.json {
        ctx.print_json(&serde_json::json!({ "results": results, "failed": failed }))?;
    }
    if failed > 0 {
        eprintln!("{failed} of {} files were not registered", files.len());
        Ok(exit::BAD_INPUT)
    } else {
        Ok(exit::OK)
    }
}
