//! `symtrust crops build`: cut a crop library from accepted labels.

use crate::context::Ctx;
use crate::exit;
use clap::{Args, Subcommand};
use std::path::PathBuf;
use symtrust_labels::crops::{CropRequest, build_library};

/// Arguments of `symtrust crops`.
#[derive(Debug, Args)]
pub struct CropsArgs {
    /// What to do.
    #[command(subcommand)]
    pub action: CropsAction,
}

/// `crops` subcommands.
#[derive(Debug, Subcommand)]
pub enum CropsAction {
    /// Build a crop library from accepted labels on training and validation sheets.
    #[command(
        after_help = "Examples:\n  symtrust crops build --site ./north-unit\n  symtrust crops build --site ./north-unit --hard-negatives found.csv --seed 7"
    )]
    Build {
        /// Detections file (CSV or JSON as written by `symtrust detect`) whose false
        /// alarms become hard negatives.
        #[arg(long, value_name = "FILE")]
        hard_negatives: Option<PathBuf>,
        /// Seed (default: the site's seed).
        #[arg(long)]
        seed: Option<u64>,
    },
}

/// Runs a `crops` subcommand.
pub fn run(ctx: &Ctx, args: &CropsArgs) -> anyhow::Result<u8> {
    let CropsAction::Build {
        hard_negatives,
        seed,
    } = &args.action;
    let site = ctx.open_site()?;
    symtrust_labels::crops::builder::remove_stale_builds(&site)?;
    let n = symtrust_labels::store::LabelStore::new(&site)
        .sheet_ids()?
        .len();
    let bar = ctx.progress(
        n.saturating_sub(site.config.held_out.len()) as u64,
        "cropping",
    );
    let outcome = build_library(
        &site,
        &CropRequest {
            seed: *seed,
            hard_negatives: hard_negatives.clone(),
        },
        &|id| {
            bar.set_message(id.to_string());
            bar.inc(1);
        },
    )?;
    bar.finish_and_clear();
    let m = &outcome.library.manifest;
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "id": m.id,
            "dir": outcome.library.dir,
            "reused": outcome.reused,
            "counts": m.counts,
            "sheets": m.sheets.len(),
            "held_out": m.held_out,
            "dropped_held_out_detections": outcome.dropped_held_out_detections,
            "negatives_short": outcome.negatives_short,
        }))?;
    } else {
        let verb = if outcome.reused {
            "reused existing"
        } else {
            "built"
        };
        ctx.say(format!(
            "{verb} crop library {} in {}: {} positives, {} negatives, {} hard negatives from {} sheets ({} held out, none used)",
            m.id,
            outcome.library.dir.display(),
            m.counts.positive,
            m.counts.negative,
            m.counts.hard_negative,
            m.sheets.len(),
            m.held_out.len()
        ));
        if outcome.dropped_held_out_detections > 0 {
            ctx.say(format!(
                "ignored {} detections on held-out sheets",
                outcome.dropped_held_out_detections
            ));
        }
        if outcome.negatives_short > 0 {
            ctx.say(format!(
                "note: {} random negatives could not be placed (sheets crowded with symbols or blank)",
                outcome.negatives_short
            ));
        }
    }
    Ok(exit::OK)
}
