//! `symtrust detect`: sweep a model over whole sheets and write the detections.
//!
//! Each sheet is loaded at the canonical resolution, swept fully convolutionally
//! (trainer), and its per-class score planes turned into detections (eval: peaks
//! at or above `--min-score`, boxes of the class's nominal size, ignore regions
//! dropped, non-maximum suppression). The file is the one `crops build
//! --hard-negatives` reads.

use crate::context::{Ctx, usage};
use crate::exit;
use anyhow::Context as _;
use clap::Args;
use std::path::PathBuf;
use symtrust_eval::nms::NmsScope;
use symtrust_eval::peaks::{BoxSize, DetectConfig, ScoreGrid, detect};
use symtrust_labels::crops::BACKGROUND;
use symtrust_labels::detections::{DETECTIONS_SCHEMA_VERSION, DetectionSet, write_detections};
use symtrust_labels::sheets::load_sheet;
use symtrust_labels::store::LabelStore;
use symtrust_trainer::{Classifier, ScoreMapOptions};

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
    /// Registered sheet ids to sweep.
    #[arg(required = true, value_name = "SHEET")]
    pub sheets: Vec<String>,
}

/// Runs the sweep.
pub fn run(ctx: &Ctx, args: &DetectArgs) -> anyhow::Result<u8> {
    if !(0.0..=1.0).contains(&args.min_score) || !(0.0..=1.0).contains(&args.nms_iou) {
        return usage("--min-score and --nms-iou must lie in [0, 1]");
    }
    let site = ctx.open_site()?;
    let classifier = Classifier::load(&args.model)?;
    let model_id = classifier.card.as_ref().map(|c| c.id.clone());
    let site_classes = site.config.class_names();
    let mut expected = site_classes.clone();
    expected.push(BACKGROUND.to_string());
    if classifier.classes != expected {
        return usage(format!(
            "{}: the model's classes ({}) are not the site's ({}); train a model for this site",
            args.model.display(),
            classifier.classes.join(", "),
            expected.join(", ")
        ));
    }
    if classifier.window() != site.config.window as usize {
        return usage(format!(
            "{}: the model's window is {} px but the site's is {}",
            args.model.display(),
            classifier.window(),
            site.config.window
        ));
    }
    let store = LabelStore::new(&site);
    let nominal: Vec<(f64, f64)> = site
        .config
        .classes
        .iter()
        .map(|c| {
            let px = site.config.nominal_pixels(c);
            (px, px)
        })
        .collect();
    let opts = ScoreMapOptions::native(&classifier);
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
        let map = classifier
            .score_map_image(&img, &opts)
            .with_context(|| format!("sweeping sheet {id}"))?;
        let k = map.classes.len();
        let planes: Vec<Vec<f32>> = (0..site_classes.len())
            .map(|c| map.scores.iter().skip(c).step_by(k).copied().collect())
            .collect();
        let grid = ScoreGrid {
            rows: map.rows,
            cols: map.cols,
            stride: map.stride as u32,
            window: map.window as u32,
            planes,
        };
        let config = DetectConfig {
            min_score: args.min_score,
            nms_iou: args.nms_iou,
            nms_scope: if args.nms_across_classes {
                NmsScope::AcrossClasses
            } else {
                NmsScope::PerClass
            },
            box_size: BoxSize::Nominal(nominal.clone()),
            ignore: doc.ignore.iter().map(|r| r.bbox).collect(),
        };
        let found = detect(id, &grid, &site_classes, &config)?;
        bar.suspend(|| ctx.say(format!("{id}: {} detections", found.len())));
        all.extend(found);
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
