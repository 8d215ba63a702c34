//! `symtrust demo`: the whole job on the built-in synthetic plant.
//!
//! For now: generate a synthetic site, check its labels and build its crop
//! library. Training, detection and the report join as their commands land.

use crate::context::Ctx;
use crate::exit;
use clap::Args;
use std::path::PathBuf;
use symtrust_labels::crops::{CropRequest, build_library};
use symtrust_labels::plant::{PlantRequest, write_plant};
use symtrust_labels::synth::DraftingStyle;

/// Arguments of `symtrust demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Folder for the demo site (must not hold a site yet).
    #[arg(long, value_name = "DIR", default_value = "symtrust-demo")]
    pub out: PathBuf,
    /// Number of synthetic sheets.
    #[arg(long, default_value_t = 8)]
    pub sheets: usize,
}

/// Runs the demo.
pub fn run(ctx: &Ctx, args: &DemoArgs) -> anyhow::Result<u8> {
    ctx.say(format!(
        "1/2 drawing {} sheets of the fictional plant into {}",
        args.sheets,
        args.out.display()
    ));
    let bar = ctx.progress(args.sheets as u64, "drawing");
    let site = write_plant(
        &args.out,
        &PlantRequest {
            sheets: args.sheets,
            style: DraftingStyle::A,
            seed: 1,
        },
        &|id| {
            bar.set_message(id.to_string());
            bar.inc(1);
        },
    )?;
    bar.finish_and_clear();
    ctx.say("2/2 building the crop library from the training sheets");
    let bar = ctx.progress(args.sheets as u64, "cropping");
    let outcome = build_library(&site, &CropRequest::default(), &|id| {
        bar.set_message(id.to_string());
        bar.inc(1);
    })?;
    bar.finish_and_clear();
    let m = &outcome.library.manifest;
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "site": site.root,
            "crop_library": m.id,
            "counts": m.counts,
            "held_out": m.held_out,
        }))?;
    } else {
        ctx.say(format!(
            "done: site {site}, crop library {id} ({pos} positives, {neg} negatives); held out for evaluation: {held}.\n\
             Next: look at {dir}/images, run `symtrust labels check --site {site}`, then\n\
             `symtrust train --site {site} --epochs 3` (about 80 s per epoch on two cores with the current kernels).",
            site = site.root.display(),
            id = m.id,
            pos = m.counts.positive,
            neg = m.counts.negative,
            held = m.held_out.join(", "),
            dir = outcome.library.dir.display(),
        ));
    }
    Ok(exit::OK)
}
