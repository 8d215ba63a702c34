//! `symtrust synth`: write a complete, labelled site of the fictional plant.

use crate::context::{Ctx, usage};
use crate::exit;
use clap::{Args, ValueEnum};
use std::path::PathBuf;
use symtrust_labels::plant::{PlantRequest, write_plant};
use symtrust_labels::synth::DraftingStyle;

/// Drafting style of the synthetic plant.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum StyleArg {
    /// Style a: larger bubbles, square corners, upright lettering.
    A,
    /// Style b: smaller bubbles, rounded corners, lighter lines, other lettering.
    B,
}

/// Arguments of `symtrust synth`.
#[derive(Debug, Args)]
pub struct SynthArgs {
    /// Folder of the new site (must not hold a site yet).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Number of sheets (mostly ISO A3, every fourth A1).
    #[arg(long, default_value_t = 12)]
    pub sheets: usize,
    /// Drafting style.
    #[arg(long, value_enum, default_value = "a")]
    pub style: StyleArg,
    /// Seed of the generator; the same seed gives the same sheets.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
}

/// Generates the site.
pub fn run(ctx: &Ctx, args: &SynthArgs) -> anyhow::Result<u8> {
    if args.sheets == 0 || args.sheets > 500 {
        return usage("--sheets must be between 1 and 500");
    }
    let req = PlantRequest {
        sheets: args.sheets,
        style: match args.style {
            StyleArg::A => DraftingStyle::A,
            StyleArg::B => DraftingStyle::B,
        },
        seed: args.seed,
    };
    let bar = ctx.progress(args.sheets as u64, "drawing");
    let site = write_plant(&args.out, &req, &|id| {
        bar.set_message(id.to_string());
        bar.inc(1);
    })?;
    bar.finish_and_clear();
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "site": site.root,
            "sheets": args.sheets,
            "held_out": site.config.held_out,
            "classes": site.config.class_names(),
        }))?;
    } else {
        ctx.say(format!(
            "wrote {} sheets of the synthetic plant to {} (held out: {})",
            args.sheets,
            site.root.display(),
            site.config.held_out.join(", ")
        ));
    }
    Ok(exit::OK)
}
