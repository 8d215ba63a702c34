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
use symtrust_labels::LabelError;
use symtrust_labels::clock::{current_user, now_rfc3339};
use symtrust_labels::detections::{
    DETECTIONS_SCHEMA_VERSION, Detection, DetectionSet, write_detections,
};
use symtrust_labels::proposals::{MergeOptions, MergeSummary, merge_proposals};
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
    /// Also write the detections into each sheet's label document as draft
    /// proposals for review (never overwriting accepted, rejected or corrected labels).
    #[arg(long)]
    pub propose: bool,
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
    let mut proposed = Vec::new();
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
        if args.propose {
            let model = model_id.as_deref().ok_or_else(|| {
                crate::context::UsageError(format!(
                    "{}: --propose needs a model card (the proposals name the model)",
                    args.model.display()
                ))
            })?;
            let summary = propose(&store, id, model, &sweep.detections)?;
            let held = if site.is_held_out(id) {
                " (a held-out sheet: review its proposals with care, the evaluation takes accepted labels as truth)"
            } else {
                ""
            };
            bar.suspend(|| {
                ctx.say(format!(
                    "{id}: {} proposals added, {} older undecided proposals replaced, {} labels kept, {} duplicates and {} in ignore regions dropped{held}",
                    summary.added, summary.replaced, summary.kept, summary.duplicates, summary.in_ignore
                ))
            });
            proposed.push((id.clone(), summary));
        }
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
            "proposed": proposed
                .iter()
                .map(|(id, s)| serde_json::json!({"sheet": id, "merge": s}))
                .collect::<Vec<_>>(),
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

/// Merges one sheet's detections into its label document as proposals and
/// saves it; when a person saved the sheet meanwhile, merges again into their
/// revision (a few times at most) rather than overwrite it.
fn propose(
    store: &LabelStore,
    sheet: &str,
    model: &str,
    detections: &[Detection],
) -> anyhow::Result<MergeSummary> {
    let who = current_user();
    let mut last = None;
    for _ in 0..5 {
        let doc = store.load(sheet)?;
        let (merged, summary) = merge_proposals(
            &doc,
            model,
            detections,
            &MergeOptions::default(),
            &who,
            &now_rfc3339(),
        )?;
        if summary.added == 0 && summary.replaced == 0 {
            return Ok(summary);
        }
        match store.save(&merged, &who) {
            Ok(_) => return Ok(summary),
            Err(e @ LabelError::StaleRevision { .. }) => last = Some(e),
            Err(e) => return Err(e.into()),
        }
    }
    Err(last.expect("the loop ran").into())
}
