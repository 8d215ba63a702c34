//! `symtrust demo`: the whole job on the built-in synthetic plant, then the
//! same detector meeting a new drafting standard.
//!
//! 1. draw the fictional plant's style-a sheets (the last two held out) and
//!    three held-out sheets of style b;
//! 2. build the crop library (held-out sheets never give a crop) and train;
//! 3. evaluate on the held-out style-a sheets, and on the style-b ones;
//! 4. add two labelled style-b sheets for training, retrain and evaluate on
//!    the style-b sheets again;
//! 5. write one report with the three evaluations side by side, and print the
//!    trust statement and the report's path.

use crate::cmd::eval::{evaluate_model, render_report};
use crate::cmd::train::{args_from as train_args, train_model};
use crate::context::{Ctx, usage};
use crate::exit;
use clap::Args;
use std::path::{Path, PathBuf};
use std::time::Instant;
use symtrust_eval::record::EvaluationRecord;
use symtrust_labels::crops::{CropRequest, build_library};
use symtrust_labels::plant::{PlantRequest, add_style_sheets, write_plant};
use symtrust_labels::site::Site;
use symtrust_labels::synth::DraftingStyle;

/// Style-a sheets drawn (the last two are held out).
const STYLE_A_SHEETS: usize = 10;
/// Held-out style-a sheets (a fifth of the plant's).
const STYLE_A_HELD: usize = 2;
/// Held-out style-b sheets (generator indices 2, 3, 4).
const STYLE_B_HELD: std::ops::Range<usize> = 2..5;
/// Style-b sheets labelled for retraining (generator indices 0, 1).
const STYLE_B_TRAIN: std::ops::Range<usize> = 0..2;

/// Arguments of `symtrust demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Folder for the demo site (must not hold a site yet).
    #[arg(long, value_name = "DIR", default_value = "symtrust-demo")]
    pub out: PathBuf,
    /// Training epochs of each model.
    #[arg(long, default_value_t = 4)]
    pub epochs: usize,
    /// Seed of the generator, the crops and the training.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
}

fn step(ctx: &Ctx, n: usize, text: &str) {
    ctx.say(format!("[{n}/7] {text}"));
}

fn evaluate(
    ctx: &Ctx,
    site: &Site,
    model: &Path,
    sheets: &[String],
    out: &Path,
) -> anyhow::Result<EvaluationRecord> {
    let mut extra = vec!["--sheets"];
    extra.extend(sheets.iter().map(String::as_str));
    evaluate_model(ctx, site, model, out, &extra)
}

fn crops(ctx: &Ctx, site: &Site, seed: u64) -> anyhow::Result<String> {
    let bar = ctx.progress(0, "cropping");
    let built = build_library(
        site,
        &CropRequest {
            seed: Some(seed),
            hard_negatives: None,
        },
        &|id| bar.set_message(id.to_string()),
    )?;
    bar.finish_and_clear();
    let m = &built.library.manifest;
    ctx.say(format!(
        "      crop library {}: {} positives, {} negatives",
        m.id, m.counts.positive, m.counts.negative
    ));
    Ok(m.id.clone())
}

fn train(ctx: &Ctx, site: &Site, library: &str, args: &DemoArgs) -> anyhow::Result<PathBuf> {
    let epochs = args.epochs.to_string();
    let seed = args.seed.to_string();
    let (card, dir) = train_model(
        ctx,
        site,
        &train_args(&["--crops", library, "--epochs", &epochs, "--seed", &seed])?,
    )?;
    ctx.say(format!(
        "      model {} (validation accuracy {:.3}, {:.0} s)",
        card.id, card.validation.accuracy, card.training.seconds
    ));
    Ok(dir)
}

/// Runs the demo.
pub fn run(ctx: &Ctx, args: &DemoArgs) -> anyhow::Result<u8> {
    if args.epochs == 0 {
        return usage("--epochs must be at least 1");
    }
    let started = Instant::now();
    step(
        ctx,
        1,
        &format!(
            "drawing {STYLE_A_SHEETS} style-a sheets and {} held-out style-b sheets of the fictional plant into {}",
            STYLE_B_HELD.len(),
            args.out.display()
        ),
    );
    let bar = ctx.progress((STYLE_A_SHEETS + STYLE_B_HELD.len()) as u64, "drawing");
    let tick = |id: &str| {
        bar.set_message(id.to_string());
        bar.inc(1);
    };
    let mut site = write_plant(
        &args.out,
        &PlantRequest {
            sheets: STYLE_A_SHEETS,
            style: DraftingStyle::A,
            seed: args.seed,
        },
        &tick,
    )?;
    // The plant holds out its last fifth: the last two style-a sheets.
    let held_a = site.config.held_out.clone();
    debug_assert_eq!(held_a.len(), STYLE_A_HELD);
    let held_b = add_style_sheets(
        &mut site,
        DraftingStyle::B,
        args.seed,
        STYLE_B_HELD,
        true,
        &tick,
    )?;
    bar.finish_and_clear();

    step(
        ctx,
        2,
        "building the crop library from the style-a training sheets",
    );
    let library = crops(ctx, &site, args.seed)?;
    step(
        ctx,
        3,
        &format!("training a classifier ({} epochs)", args.epochs),
    );
    let model_a = train(ctx, &site, &library, args)?;

    step(
        ctx,
        4,
        "evaluating it on the held-out style-a sheets and on the style-b sheets",
    );
    let evals = site.root.join("evals");
    let e_aa = evals.join("style-a-model-on-style-a");
    let e_ab = evals.join("style-a-model-on-style-b");
    let r_aa = evaluate(ctx, &site, &model_a, &held_a, &e_aa)?;
    let r_ab = evaluate(ctx, &site, &model_a, &held_b, &e_ab)?;

    step(
        ctx,
        5,
        &format!(
            "adding {} labelled style-b sheets for training and rebuilding the crops",
            STYLE_B_TRAIN.len()
        ),
    );
    let bar = ctx.progress(STYLE_B_TRAIN.len() as u64, "drawing");
    add_style_sheets(
        &mut site,
        DraftingStyle::B,
        args.seed,
        STYLE_B_TRAIN,
        false,
        &|id| {
            bar.set_message(id.to_string());
            bar.inc(1);
        },
    )?;
    bar.finish_and_clear();
    let library_b = crops(ctx, &site, args.seed)?;
    step(
        ctx,
        6,
        "retraining with the style-b sheets added, and evaluating on style b again",
    );
    let model_ab = train(ctx, &site, &library_b, args)?;
    let e_bb = evals.join("retrained-on-style-b");
    let r_bb = evaluate(ctx, &site, &model_ab, &held_b, &e_bb)?;

    step(ctx, 7, "writing the report");
    let out = site.root.join("reports").join("demo");
    let rendered = render_report(
        ctx,
        &site,
        &e_aa,
        &[
            (e_ab.clone(), Some("style-a model on style-b sheets".into())),
            (
                e_bb.clone(),
                Some(format!(
                    "retrained with {} style-b sheets, on style-b sheets",
                    STYLE_B_TRAIN.len()
                )),
            ),
        ],
        Some((out, Some("style-a model on style-a sheets".into()))),
    )?;
    let map = |r: &EvaluationRecord| {
        r.sheet_level
            .map_all_point
            .map_or("n/a".to_string(), |v| format!("{v:.3}"))
    };
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "site": site.root,
            "report": rendered.index_html,
            "trust_statement": r_aa.trust_statement,
            "map": {
                "style_a_model_on_style_a": r_aa.sheet_level.map_all_point,
                "style_a_model_on_style_b": r_ab.sheet_level.map_all_point,
                "retrained_on_style_b": r_bb.sheet_level.map_all_point,
            },
            "seconds": started.elapsed().as_secs_f64(),
        }))?;
    } else {
        ctx.say(format!("\n{}\n", r_aa.trust_statement));
        ctx.say(format!(
            "A new drafting standard: mAP {} on style a, {} on style b before retraining, {} after adding {} labelled style-b sheets.",
            map(&r_aa),
            map(&r_ab),
            map(&r_bb),
            STYLE_B_TRAIN.len()
        ));
        ctx.say(format!("\n{}\n", r_aa.caution));
        ctx.say(format!(
            "done in {:.0} s. Open the report: {}",
            started.elapsed().as_secs_f64(),
            rendered.index_html.display()
        ));
        if ctx.quiet {
            println!("{}", rendered.index_html.display());
        }
    }
    Ok(exit::OK)
}
