//! `symtrust detect`: sweep a model over whole sheets and write the detections.
//!
//! Each sheet is loaded at the canonical resolution, swept fully convolutionally
//! (trainer), and its per-class score planes turned into detections (eval: peaks
//! at or above `--min-score`, boxes of the class's nominal size, ignore regions
//! dropped, non-maximum suppression). The file is the one `crops build
//! --hard-negatives` reads.

use crate::context::{Ctx, usage};
use crate::exit;
use crate::sweep::{check_model, check_settings, sweep_sheet};
use clap::Args;
use std::path::PathBuf;
use symtrust_eval::record::DetectSettings;
use symtrust_labels::detections::{DETECTIONS_SCHEMA_VERSION, DetectionSet, write_detections};
use symtrust_labels::sheets::load_sheet;
use symtrust_labels::store::LabelStore;
use symtrust_trainer::Classifier;

/// Arguments of `symtrust detect`.
#[derive(Debug, Args)]
pub struct DetectArgs {
    /// Model folder (`models/<id>`).
    #[arg(long, value_name = "DIR")]
    pub model: PathBuf,
    /// Output file; `.csv` or `.json` decides the format.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Smallest score a detection may have, in [0, 1].
    #[arg(long, default_value_t = 0.5)]
    pub min_score: f64,
    /// Overlapping detections with IoU above this are suppressed.
    #[arg(long, default_value_t = 0.3)]
    pub nms_iou: f64,
    /// Suppress overlaps across classes too (one symbol, one label).
    #[arg(long)]
    pub nms_across_classes: bool,
    /// Keep at most this many detections per sheet, highest scores first
    /// (default: no cap; a P&ID sheet can carry hundreds of symbols).
    #[arg(long, value_name = "N")]
    pub max_per_sheet: Option<usize>,
    /// Registered sheet ids to sweep.
    #[arg(required = true, value_name = "SHEET")]
    pub sheets: Vec<String>,
}

/// Runs the sweep.
pub fn run(ctx: &Ctx, args: &DetectArgs) -> anyhow::Result<u8> {
    let settings = DetectSettings {
        min_score: args.min_score,
        nms_iou: args.nms_iou,
        nms_across_classes: args.nms_across_classes,
        max_per_sheet: args.max_per_sheet,
    };
    check_settings(&settings)?;
    let site = ctx.open_site()?;
    let classifier = Classifier::load(&args.model)?;
    check_model(&site, &classifier, &args.model)?;
    let model_id = classifier.card.as_ref().map(|c| c.id.clone());
    let store = LabelStore::new(&site);
    let bar = ctx.progress(args.sheets.len() as u64, "sweeping");
    let mut all = Vec::new();
    for id in &args.sheets {
        bar.set_message(id.clone());
        if !store.exists(id) {
            return usage(format!(
                "sheet {id:?} is not registered in {}; add it with `symtrust sheets add`",
                site.root.display()
            ));
        }
        let doc = store.load(id)?;
        let img = load_sheet(&site, &doc.sheet)?;
        let sweep = sweep_sheet(&site, &classifier, &doc, &img, &settings)?;
        let capped = if sweep.capped > 0 {
            format!(" ({} more dropped by --max-per-sheet)", sweep.capped)
        } else {
            String::new()
        };
        bar.suspend(|| {
            ctx.say(format!(
                "{id}: {} detections{capped}",
                sweep.detections.len()
            ))
        });
        all.extend(sweep.detections);
        bar.inc(1);
    }
    bar.finish_and_clear();
    let set = DetectionSet {
        schema_version: DETECTIONS_SCHEMA_VERSION,
        model: model_id,
        detections: all,
    };
    write_detections(&args.out, &set)?;
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "out": args.out,
            "model": set.model,
            "detections": set.detections.len(),
            "sheets": args.sheets,
        }))?;
    } else {
        ctx.say(format!(
            "wrote {} detections to {}",
            set.detections.len(),
            args.out.display()
        ));
    }
    Ok(exit::OK)
}
