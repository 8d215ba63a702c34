//! `symtrust eval`: how far a detector can be trusted on the held-out sheets.
//!
//! The detections come from sweeping a model (`--model`) or from a file made by
//! any system (`--detections`: our CSV/JSON, or COCO-format results with
//! `--coco-index`). Ground truth is each held-out sheet's accepted labels. The
//! figures come from `symtrust-eval`; this module loads, sweeps and writes the
//! evaluation folder: `metrics.json` (the whole record), `detections.csv` and
//! `matches.csv`.

use crate::context::{Ctx, UsageError, usage};
use crate::exit;
use crate::sweep::{check_model, check_settings, sweep_sheet, truths_on_blank};
use anyhow::Context as _;
use clap::Args;
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::time::Instant;
use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::calibration::fit_and_judge;
use symtrust_eval::crop_eval::{argmax, evaluate_crops};
use symtrust_eval::match_log::match_log;
use symtrust_eval::matching::MatchCriterion;
use symtrust_eval::record::{
    CropDecision, CropLevel, DetectSettings, DetectorInfo, EvaluationRecord, METRICS_FILE,
    METRICS_SCHEMA_VERSION, RunStamp, Shard, SheetStamp, merge_inputs, shard_sheets,
};
use symtrust_eval::sheet_eval::{
    OperatingRule, SheetEvalConfig, SheetInput, TruthSymbol, evaluate_sheets, prepare_sheets,
    sheet_outcomes,
};
use symtrust_eval::statement::{CAUTION, trust_statement};
use symtrust_labels::atomic::write_atomic;
use symtrust_labels::clock::{current_user, now_rfc3339};
use symtrust_labels::coco_results::read_coco_results;
use symtrust_labels::crops::{cut_window, plan_crops, site_crop_settings};
use symtrust_labels::detections::{
    DETECTIONS_SCHEMA_VERSION, Detection, DetectionSet, read_detections, write_detections,
};
use symtrust_labels::document::{LabelDocument, ReviewState};
use symtrust_labels::hash::sha256_file;
use symtrust_labels::sheets::load_sheet;
use symtrust_labels::site::Site;
use symtrust_labels::split::split_sheets;
use symtrust_labels::store::LabelStore;
use symtrust_trainer::Classifier;
use symtrust_trainer::card::{CARD_FILE, WEIGHTS_FILE};

/// Arguments of `symtrust eval`.
#[derive(Debug, Args)]
pub struct EvalArgs {
    /// Model folder to sweep over the held-out sheets.
    #[arg(long, value_name = "DIR", required_unless_present_any = ["detections", "merge"], conflicts_with_all = ["detections", "merge"])]
    pub model: Option<PathBuf>,
    /// Detections from any system: our CSV/JSON, or COCO-format results JSON (with --coco-index).
    #[arg(long, value_name = "FILE", conflicts_with = "merge")]
    pub detections: Option<PathBuf>,
    /// COCO-format dataset JSON whose `images` and `categories` give the ids of a
    /// COCO results file (e.g. the file `labels export --format coco` wrote).
    #[arg(long, value_name = "FILE", requires = "detections")]
    pub coco_index: Option<PathBuf>,
    /// Combine the evaluation folders of a sharded run (all shards 1..N) into one.
    #[arg(long, value_name = "DIR", num_args = 1..)]
    pub merge: Vec<PathBuf>,
    /// Evaluation folder to write (replaced if it already holds an evaluation).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// A detection finds a symbol when their boxes overlap with at least this IoU.
    #[arg(long, default_value_t = 0.5)]
    pub iou: f64,
    /// Match by centre distance (pixels) instead of IoU.
    #[arg(long, value_name = "PX", conflicts_with = "iou")]
    pub centre_distance: Option<f64>,
    /// Operating point: the highest recall with at least this precision.
    #[arg(long, value_name = "P", conflicts_with_all = ["target_recall", "threshold"])]
    pub target_precision: Option<f64>,
    /// Operating point: the highest precision with at least this recall.
    #[arg(long, value_name = "R", conflicts_with = "threshold")]
    pub target_recall: Option<f64>,
    /// Operating point: a fixed score threshold (default: the best F1).
    #[arg(long, value_name = "T")]
    pub threshold: Option<f64>,
    /// Smallest score a swept detection may have (low, so the PR curve is complete).
    #[arg(long, default_value_t = 0.05)]
    pub min_score: f64,
    /// Overlapping swept detections with IoU above this are suppressed.
    #[arg(long, default_value_t = 0.3)]
    pub nms_iou: f64,
    /// Suppress overlaps across classes too.
    #[arg(long)]
    pub nms_across_classes: bool,
    /// Keep at most this many swept detections per sheet (default: no cap).
    #[arg(long, value_name = "N")]
    pub max_per_sheet: Option<usize>,
    /// Bootstrap resamples over sheets (0: no intervals).
    #[arg(long, default_value_t = 1000)]
    pub resamples: usize,
    /// Confidence level of the intervals.
    #[arg(long, default_value_t = 0.95)]
    pub level: f64,
    /// Seed of the bootstrap (default: the site's seed).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Fit score calibration on the validation sheets (model only) and report
    /// the held-out calibration before and after it.
    #[arg(long)]
    pub calibrate: bool,
    /// Evaluate only these held-out sheets (default: every sheet on the held-out list).
    #[arg(long, value_name = "SHEET", num_args = 1.., conflicts_with = "merge")]
    pub sheets: Vec<String>,
    /// Also render the report (`symtrust report`) into `<site>/reports/<out folder name>`.
    #[arg(long)]
    pub report: bool,
    /// Evaluate only shard K of N of the held-out sheets (merge the shards with --merge).
    #[arg(long, value_name = "K/N", conflicts_with = "merge")]
    pub shard: Option<String>,
}

/// Parses `K/N`.
fn parse_shard(s: &str) -> anyhow::Result<Shard> {
    let bad = || {
        UsageError(format!(
            "--shard {s:?}: expected K/N with 1 <= K <= N, e.g. 2/8"
        ))
    };
    let (k, n) = s.split_once('/').ok_or_else(bad)?;
    let index: u32 = k.trim().parse().map_err(|_| bad())?;
    let count: u32 = n.trim().parse().map_err(|_| bad())?;
    if index == 0 || count == 0 || index > count {
        return Err(bad().into());
    }
    Ok(Shard { index, count })
}

/// The evaluation settings the flags ask for.
fn eval_config(args: &EvalArgs, site: &Site) -> anyhow::Result<SheetEvalConfig> {
    let criterion = match args.centre_distance {
        Some(d) => MatchCriterion::CentreDistance { max_distance: d },
        None => MatchCriterion::Iou { min_iou: args.iou },
    };
    criterion
        .validate()
        .map_err(|e| UsageError(format!("--iou / --centre-distance: {e}")))?;
    let unit = |name: &str, v: f64| -> anyhow::Result<f64> {
        if (0.0..=1.0).contains(&v) {
            Ok(v)
        } else {
            Err(UsageError(format!("{name} must lie in [0, 1], got {v}")).into())
        }
    };
    let operating = match (args.target_precision, args.target_recall, args.threshold) {
        (Some(p), _, _) => OperatingRule::TargetPrecision {
            precision: unit("--target-precision", p)?,
        },
        (_, Some(r), _) => OperatingRule::TargetRecall {
            recall: unit("--target-recall", r)?,
        },
        (_, _, Some(t)) => OperatingRule::Fixed {
            threshold: unit("--threshold", t)?,
        },
        _ => OperatingRule::F1Max,
    };
    if !(args.level > 0.0 && args.level < 1.0) {
        return usage(format!("--level must lie in (0, 1), got {}", args.level));
    }
    Ok(SheetEvalConfig {
        criterion,
        operating,
        bootstrap: (args.resamples > 0).then(|| BootstrapConfig {
            resamples: args.resamples,
            seed: args.seed.unwrap_or(site.config.seed),
            level: args.level,
        }),
        ..SheetEvalConfig::default()
    })
}

/// A held-out sheet read for evaluation: its document, truths and stamp.
struct HeldOutSheet {
    doc: LabelDocument,
    stamp: SheetStamp,
    truths: Vec<TruthSymbol>,
}

/// Reads the held-out sheets, refusing any without accepted labels.
fn read_held_out(site: &Site, ids: &[String]) -> anyhow::Result<Vec<HeldOutSheet>> {
    let store = LabelStore::new(site);
    let classes = site.config.class_names();
    let mut out = Vec::with_capacity(ids.len());
    for id in ids {
        if !store.exists(id) {
            return usage(format!(
                "held-out sheet {id:?} (site.toml) is not registered in {}; add it with `symtrust sheets add` or fix the held-out list",
                site.root.display()
            ));
        }
        let path = store.path(id);
        let doc = store.load(id)?;
        doc.check_against(&path, &classes)?;
        let truths: Vec<TruthSymbol> = doc
            .accepted()
            .map(|s| TruthSymbol {
                class: s.class.clone(),
                bbox: s.bbox,
            })
            .collect();
        if truths.is_empty() {
            let drafts = doc
                .symbols
                .iter()
                .filter(|s| s.state == ReviewState::Draft)
                .count();
            return usage(format!(
                "{}: held-out sheet {id:?} has no accepted labels ({drafts} drafts); review it before evaluating on it, or take it off the held-out list",
                path.display()
            ));
        }
        let stamp = SheetStamp {
            sheet: id.clone(),
            file: doc.sheet.file.clone(),
            sheet_sha256: doc.sheet.sha256.clone(),
            labels_file: relative(site, &path),
            labels_sha256: sha256_file(&path)?,
            labels_revision: doc.revision,
            width: doc.sheet.width,
            height: doc.sheet.height,
            windows: None,
            windows_skipped: None,
            truths_on_blank: None,
        };
        out.push(HeldOutSheet { doc, stamp, truths });
    }
    Ok(out)
}

fn relative(site: &Site, path: &Path) -> String {
    path.strip_prefix(&site.root)
        .unwrap_or(path)
        .to_string_lossy()
        .into_owned()
}

/// Refuses detections whose box centre lies outside their sheet.
fn check_inside(d: &Detection, sheet: &HeldOutSheet, source: &Path) -> anyhow::Result<()> {
    let (cx, cy) = d.bbox().center();
    let (w, h) = (
        f64::from(sheet.doc.sheet.width),
        f64::from(sheet.doc.sheet.height),
    );
    if !(0.0..=w).contains(&cx) || !(0.0..=h).contains(&cy) {
        return usage(format!(
            "{}: a {} detection on sheet {:?} is centred at ({cx:.1}, {cy:.1}), outside the {w} x {h} px sheet; are the boxes in the site's canonical pixels ({} dpi)?",
            source.display(),
            d.class,
            d.sheet,
            sheet.doc.sheet.dpi
        ));
    }
    Ok(())
}

/// What a model sweep produced.
struct ModelRun {
    info: DetectorInfo,
    settings: DetectSettings,
    detections: Vec<Vec<Detection>>,
    crops: CropLevel,
    calibration_items: Option<Vec<(f64, bool)>>,
}

/// `dir` relative to the site root when it lies inside the site (so the
/// record stays valid when the site folder moves), else absolute.
fn site_relative(site: &Site, dir: &Path) -> String {
    let abs = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
    let root = std::path::absolute(&site.root).unwrap_or_else(|_| site.root.clone());
    let (abs, root) = (
        abs.canonicalize().unwrap_or(abs),
        root.canonicalize().unwrap_or(root),
    );
    abs.strip_prefix(&root)
        .map(Path::to_path_buf)
        .unwrap_or(abs)
        .to_string_lossy()
        .into_owned()
}

fn model_info(site: &Site, dir: &Path, classifier: &Classifier) -> anyhow::Result<DetectorInfo> {
    let card = classifier.card.as_ref().ok_or_else(|| {
        UsageError(format!(
            "{}: no model card; evaluate a model folder written by `symtrust train`",
            dir.display()
        ))
    })?;
    Ok(DetectorInfo::Model {
        id: card.id.clone(),
        dir: site_relative(site, dir),
        weights_sha256: sha256_file(&dir.join(WEIGHTS_FILE))?,
        card_sha256: sha256_file(&dir.join(CARD_FILE))?,
        crop_library: card.data.crop_library.clone(),
        crop_manifest_sha256: card.data.manifest_sha256.clone(),
    })
}

/// Crop-level decisions on one held-out sheet: centred positives and random
/// negatives by the crop library's rules (no jitter copies, no hard negatives).
fn sheet_crops(
    site: &Site,
    classifier: &Classifier,
    doc: &LabelDocument,
    img: &image::GrayImage,
) -> anyhow::Result<Vec<CropDecision>> {
    let settings = symtrust_labels::crops::CropSettings {
        jitter_copies: 0,
        ..site_crop_settings(site)
    };
    let (planned, _) = plan_crops(doc, img, &settings, site.config.seed, &[]);
    let crops: Vec<image::GrayImage> = planned.iter().map(|p| cut_window(img, p.window)).collect();
    let mut out = Vec::with_capacity(planned.len());
    for (chunk_plan, chunk_img) in planned.chunks(256).zip(crops.chunks(256)) {
        let pixels: Vec<&[u8]> = chunk_img.iter().map(|c| c.as_raw().as_slice()).collect();
        let probs = classifier
            .classify(&pixels)
            .with_context(|| format!("classifying crops of sheet {}", doc.sheet.id))?;
        for (p, row) in chunk_plan.iter().zip(probs) {
            let scores: Vec<f64> = row.iter().map(|&v| f64::from(v).clamp(0.0, 1.0)).collect();
            out.push(CropDecision {
                sheet: doc.sheet.id.clone(),
                x: p.window.left,
                y: p.window.top,
                truth: p.class.clone(),
                predicted: classifier.classes[argmax(&scores)].clone(),
                scores,
            });
        }
    }
    Ok(out)
}

fn run_model(
    ctx: &Ctx,
    site: &Site,
    dir: &Path,
    args: &EvalArgs,
    sheets: &mut [HeldOutSheet],
    config: &SheetEvalConfig,
) -> anyhow::Result<ModelRun> {
    let settings = DetectSettings {
        min_score: args.min_score,
        nms_iou: args.nms_iou,
        nms_across_classes: args.nms_across_classes,
        max_per_sheet: args.max_per_sheet,
    };
    check_settings(&settings)?;
    let classifier = Classifier::load(dir)?;
    check_model(site, &classifier, dir)?;
    let info = model_info(site, dir, &classifier)?;
    let bar = ctx.progress(sheets.len() as u64, "sweeping held-out sheets");
    type SheetResult = (Vec<Detection>, [Option<u64>; 3], Vec<CropDecision>);
    let results: Vec<anyhow::Result<SheetResult>> = sheets
        .par_iter()
        .map(|s| {
            let img = load_sheet(site, &s.doc.sheet)?;
            let sweep = sweep_sheet(site, &classifier, &s.doc, &img, &settings)?;
            let on_blank = sweep.skip_below_ink.map(|t| {
                let boxes: Vec<_> = s.truths.iter().map(|t| t.bbox).collect();
                truths_on_blank(&img, &boxes, site.config.window, t)
            });
            let crops = sheet_crops(site, &classifier, &s.doc, &img)?;
            bar.inc(1);
            Ok((
                sweep.detections,
                [Some(sweep.windows), Some(sweep.skipped), on_blank],
                crops,
            ))
        })
        .collect();
    bar.finish_and_clear();
    let mut detections = Vec::new();
    let mut decisions = Vec::new();
    for (s, r) in sheets.iter_mut().zip(results) {
        let (d, [w, skipped, on_blank], c) = r?;
        s.stamp.windows = w;
        s.stamp.windows_skipped = skipped;
        s.stamp.truths_on_blank = on_blank;
        detections.push(d);
        decisions.extend(c);
    }
    let crops = crop_level(&classifier.classes, decisions)?;

    let calibration_items = if args.calibrate {
        Some(validation_items(ctx, site, &classifier, &settings, config)?)
    } else {
        None
    };
    Ok(ModelRun {
        info,
        settings,
        detections,
        crops,
        calibration_items,
    })
}

fn crop_level(classes: &[String], crops: Vec<CropDecision>) -> anyhow::Result<CropLevel> {
    let truth: Vec<usize> = crops
        .iter()
        .map(|c| {
            classes
                .iter()
                .position(|k| *k == c.truth)
                .expect("crop classes come from the site, which the model was checked against")
        })
        .collect();
    let scores: Vec<Vec<f64>> = crops.iter().map(|c| c.scores.clone()).collect();
    let evaluation = evaluate_crops(&truth, &scores, classes)?;
    Ok(CropLevel {
        classes: classes.to_vec(),
        evaluation,
        crops,
    })
}

/// Scores and hit flags of the model's detections on the validation sheets.
fn validation_items(
    ctx: &Ctx,
    site: &Site,
    classifier: &Classifier,
    settings: &DetectSettings,
    config: &SheetEvalConfig,
) -> anyhow::Result<Vec<(f64, bool)>> {
    let store = LabelStore::new(site);
    let split = split_sheets(&site.config, &store.sheet_ids()?);
    if split.validation.is_empty() {
        return usage(
            "--calibrate needs validation sheets, and this site has none (raise validation_fraction in site.toml)",
        );
    }
    let classes = site.config.class_names();
    let bar = ctx.progress(split.validation.len() as u64, "sweeping validation sheets");
    let inputs: Vec<anyhow::Result<SheetInput>> = split
        .validation
        .par_iter()
        .map(|id| {
            let doc = store.load(id)?;
            let img = load_sheet(site, &doc.sheet)?;
            let sweep = sweep_sheet(site, classifier, &doc, &img, settings)?;
            bar.inc(1);
            Ok(SheetInput {
                sheet: id.clone(),
                truths: doc
                    .accepted()
                    .map(|s| TruthSymbol {
                        class: s.class.clone(),
                        bbox: s.bbox,
                    })
                    .collect(),
                detections: sweep.detections,
                ignore: doc.ignore.iter().map(|r| r.bbox).collect(),
            })
        })
        .collect();
    bar.finish_and_clear();
    let inputs: Vec<SheetInput> = inputs.into_iter().collect::<anyhow::Result<_>>()?;
    let prepared = prepare_sheets(&inputs, &classes)?;
    Ok(prepared
        .iter()
        .flat_map(|p| {
            sheet_outcomes(p, classes.len(), &config.criterion)
                .outcomes
                .into_iter()
                .map(|o| (o.score, o.true_positive))
        })
        .collect())
}

/// Detections of a file, grouped by held-out sheet; detections on other
/// registered sheets are left out and counted.
fn file_detections(
    site: &Site,
    path: &Path,
    coco_index: Option<&Path>,
    sheets: &[HeldOutSheet],
) -> anyhow::Result<(DetectorInfo, Vec<Vec<Detection>>, usize)> {
    let classes = site.config.class_names();
    let store = LabelStore::new(site);
    let all_ids = store.sheet_ids()?;
    let (set, format) = match coco_index {
        Some(index) => {
            let records: Vec<_> = all_ids
                .iter()
                .map(|id| store.load(id).map(|d| d.sheet))
                .collect::<Result<_, _>>()?;
            (read_coco_results(path, index, &records, &classes)?, "coco")
        }
        None => {
            let set = read_detections(path)?;
            let format = if path.extension().is_some_and(|e| e == "csv") {
                "csv"
            } else {
                "json"
            };
            (set, format)
        }
    };
    let position: BTreeMap<&str, usize> = sheets
        .iter()
        .enumerate()
        .map(|(i, s)| (s.stamp.sheet.as_str(), i))
        .collect();
    let mut grouped = vec![Vec::new(); sheets.len()];
    let mut elsewhere = 0;
    for d in set.detections {
        match position.get(d.sheet.as_str()) {
            Some(&i) => {
                check_inside(&d, &sheets[i], path)?;
                grouped[i].push(d);
            }
            None if all_ids.contains(&d.sheet) => elsewhere += 1,
            None => {
                return usage(format!(
                    "{}: detection on sheet {:?}, which this site does not have; was the file made for another site?",
                    path.display(),
                    d.sheet
                ));
            }
        }
    }
    let info = DetectorInfo::File {
        path: path.to_string_lossy().into_owned(),
        sha256: sha256_file(path)?,
        format: format.to_string(),
        model: set.model,
    };
    Ok((info, grouped, elsewhere))
}

/// Writes the evaluation folder: built beside `out` and renamed into place.
pub fn write_folder(out: &Path, record: &EvaluationRecord) -> anyhow::Result<()> {
    if out.exists() && !out.join(METRICS_FILE).is_file() {
        let empty = std::fs::read_dir(out)
            .map(|mut d| d.next().is_none())
            .unwrap_or(false);
        if !empty {
            return usage(format!(
                "{}: exists and is not an evaluation folder; choose another --out",
                out.display()
            ));
        }
    }
    let parent = match out.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    std::fs::create_dir_all(&parent).with_context(|| format!("creating {}", parent.display()))?;
    let name = out
        .file_name()
        .ok_or_else(|| UsageError(format!("--out {}: not a folder name", out.display())))?
        .to_string_lossy()
        .into_owned();
    let tmp = parent.join(format!(".{name}.partial-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&tmp);
    std::fs::create_dir_all(&tmp).with_context(|| format!("creating {}", tmp.display()))?;
    let mut json = serde_json::to_vec_pretty(record)?;
    json.push(b'\n');
    write_atomic(&tmp.join(METRICS_FILE), &json)?;
    let set = DetectionSet {
        schema_version: DETECTIONS_SCHEMA_VERSION,
        model: match &record.detector {
            DetectorInfo::Model { id, .. } => Some(id.clone()),
            DetectorInfo::File { model, .. } => model.clone(),
        },
        detections: record
            .inputs
            .iter()
            .flat_map(|s| s.detections.clone())
            .collect(),
    };
    write_detections(&tmp.join("detections.csv"), &set)?;
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record([
        "sheet",
        "class",
        "score",
        "x",
        "y",
        "w",
        "h",
        "outcome",
        "truth_class",
    ])?;
    for m in &record.matches.detections {
        w.write_record([
            m.sheet.clone(),
            m.class.clone(),
            m.score.to_string(),
            m.bbox.x.to_string(),
            m.bbox.y.to_string(),
            m.bbox.w.to_string(),
            m.bbox.h.to_string(),
            m.kind.as_str().to_string(),
            m.truth_class.clone().unwrap_or_default(),
        ])?;
    }
    write_atomic(&tmp.join("matches.csv"), &w.into_inner()?)?;
    if out.exists() {
        let old = parent.join(format!(".{name}.replaced-{}", std::process::id()));
        std::fs::rename(out, &old).with_context(|| format!("moving aside {}", out.display()))?;
        std::fs::rename(&tmp, out).with_context(|| format!("writing {}", out.display()))?;
        let _ = std::fs::remove_dir_all(&old);
    } else {
        std::fs::rename(&tmp, out).with_context(|| format!("writing {}", out.display()))?;
    }
    Ok(())
}

/// The run stamp of a command that started at `started` (RFC 3339, clock).
pub fn run_stamp(started: (String, Instant)) -> RunStamp {
    RunStamp {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        created: started.0,
        command_line: std::env::args().collect(),
        host: host_name(),
        user: current_user(),
        threads: rayon::current_num_threads(),
        seconds: started.1.elapsed().as_secs_f64(),
    }
}

/// Evaluates model folder `model` with `eval`'s defaults plus `extra` flags
/// and writes the evaluation folder `out`.
pub fn evaluate_model(
    ctx: &Ctx,
    site: &Site,
    model: &Path,
    out: &Path,
    extra: &[&str],
) -> anyhow::Result<EvaluationRecord> {
    let model_s = model.to_string_lossy();
    let out_s = out.to_string_lossy();
    let mut a: Vec<&str> = vec!["--model", &model_s, "--out", &out_s];
    a.extend_from_slice(extra);
    let record = build_record(ctx, site, &args_from(&a)?)?;
    write_folder(out, &record)?;
    Ok(record)
}

/// Host name of this machine, for run stamps.
pub fn host_name() -> String {
    std::fs::read_to_string("/etc/hostname")
        .map(|s| s.trim().to_string())
        .ok()
        .filter(|s| !s.is_empty())
        .or_else(|| std::env::var("HOSTNAME").ok())
        .unwrap_or_else(|| "unknown".into())
}

/// Builds the record from evaluated inputs.
#[allow(clippy::too_many_arguments)]
fn assemble(
    site: &Site,
    info: DetectorInfo,
    settings: Option<DetectSettings>,
    stamps: Vec<SheetStamp>,
    inputs: Vec<SheetInput>,
    crop_level: Option<CropLevel>,
    calibration_items: Option<Vec<(f64, bool)>>,
    config: &SheetEvalConfig,
    shard: Option<Shard>,
    started: (String, Instant),
) -> anyhow::Result<EvaluationRecord> {
    let classes = site.config.class_names();
    let sheet_level = evaluate_sheets(&inputs, &classes, config)?;
    let prepared = prepare_sheets(&inputs, &classes)?;
    let matches = match_log(&prepared, &classes, &config.criterion);
    let calibration_fit = match calibration_items {
        Some(val) => {
            let held: Vec<(f64, bool)> = prepared
                .iter()
                .flat_map(|p| {
                    sheet_outcomes(p, classes.len(), &config.criterion)
                        .outcomes
                        .into_iter()
                        .map(|o| (o.score, o.true_positive))
                })
                .collect();
            if val.is_empty() || held.is_empty() {
                None
            } else {
                Some(fit_and_judge(&val, &held, config.calibration_bins)?)
            }
        }
        None => None,
    };
    let statement = trust_statement(&sheet_level, &info.label());
    Ok(EvaluationRecord {
        schema_version: METRICS_SCHEMA_VERSION,
        trust_statement: statement,
        caution: CAUTION.to_string(),
        stamp: run_stamp(started),
        detector: info,
        classes,
        held_out: site.config.held_out.clone(),
        sheets: stamps,
        detect_settings: settings,
        sheet_level,
        crop_level,
        calibration_fit,
        matches,
        inputs,
        shard,
    })
}

/// Runs the evaluation.
pub fn run(ctx: &Ctx, args: &EvalArgs) -> anyhow::Result<u8> {
    let site = ctx.open_site()?;
    let record = build_record(ctx, &site, args)?;
    write_folder(&args.out, &record)?;
    let code = report_result(ctx, args, &record)?;
    if args.report {
        let rendered = render_report(ctx, &site, &args.out, &[], None)?;
        ctx.say(format!("report: {}", rendered.index_html.display()));
    }
    Ok(code)
}

/// Renders the report of evaluation folder `eval_dir` (with `beside` shown
/// next to it, each with an optional title) into `out` or the default
/// `<site>/reports/<folder name>`.
pub fn render_report(
    ctx: &Ctx,
    site: &Site,
    eval_dir: &Path,
    beside: &[(PathBuf, Option<String>)],
    out: Option<(PathBuf, Option<String>)>,
) -> anyhow::Result<symtrust_reports::RenderedReport> {
    let (out_dir, title) = match out {
        Some((d, t)) => (d, t),
        None => (symtrust_reports::default_out(&site.root, eval_dir), None),
    };
    let mut req = symtrust_reports::ReportRequest::new(
        symtrust_reports::EvaluationInput {
            dir: eval_dir.to_path_buf(),
            site_root: site.root.clone(),
            title,
        },
        out_dir,
    );
    req.beside = beside
        .iter()
        .map(|(d, t)| symtrust_reports::EvaluationInput {
            dir: d.clone(),
            site_root: site.root.clone(),
            title: t.clone(),
        })
        .collect();
    let bar = ctx.progress(0, "report");
    let rendered = symtrust_reports::render(&req, &|step| bar.set_message(step.to_string()))?;
    bar.finish_and_clear();
    Ok(rendered)
}

/// Evaluation arguments with every default, as if `symtrust eval` had been
/// given only `extra` (e.g. `["--model", DIR, "--out", DIR]`).
pub fn args_from(extra: &[&str]) -> anyhow::Result<EvalArgs> {
    #[derive(clap::Parser)]
    struct Wrapper {
        #[command(flatten)]
        args: EvalArgs,
    }
    let argv = std::iter::once("eval").chain(extra.iter().copied());
    Ok(<Wrapper as clap::Parser>::try_parse_from(argv)
        .map_err(|e| UsageError(e.to_string()))?
        .args)
}

/// Evaluates as `args` ask and returns the record (nothing is written).
pub fn build_record(ctx: &Ctx, site: &Site, args: &EvalArgs) -> anyhow::Result<EvaluationRecord> {
    let started = (now_rfc3339(), Instant::now());
    let config = eval_config(args, site)?;
    if site.config.held_out.is_empty() {
        return usage(format!(
            "{}: no held-out sheets are listed in site.toml; name the sheets to evaluate on under held_out",
            site.root.join("site.toml").display()
        ));
    }
    if !args.merge.is_empty() {
        return merged(site, args, &config, started);
    }
    let shard = args.shard.as_deref().map(parse_shard).transpose()?;
    let chosen = if args.sheets.is_empty() {
        site.config.held_out.clone()
    } else {
        for id in &args.sheets {
            if !site.config.held_out.contains(id) {
                return usage(format!(
                    "--sheets {id}: not on the held-out list of site.toml; only held-out sheets are evaluated (a model's figures on its training sheets overstate it)"
                ));
            }
        }
        args.sheets.clone()
    };
    let ids = match shard {
        Some(s) => shard_sheets(&chosen, s)?,
        None => chosen,
    };
    let mut sheets = read_held_out(site, &ids)?;
    let (info, settings, detections, crop_level, calibration_items) = if let Some(dir) = &args.model
    {
        let run = run_model(ctx, site, dir, args, &mut sheets, &config)?;
        (
            run.info,
            Some(run.settings),
            run.detections,
            Some(run.crops),
            run.calibration_items,
        )
    } else {
        if args.calibrate {
            return usage("--calibrate needs --model (it sweeps the validation sheets)");
        }
        let path = args
            .detections
            .as_ref()
            .expect("clap requires --model, --detections or --merge");
        let (info, grouped, elsewhere) =
            file_detections(site, path, args.coco_index.as_deref(), &sheets)?;
        if elsewhere > 0 {
            ctx.say(format!(
                "{elsewhere} detections on sheets that are not held out were left out"
            ));
        }
        (info, None, grouped, None, None)
    };
    let mut stamps = Vec::with_capacity(sheets.len());
    let mut inputs = Vec::with_capacity(sheets.len());
    for (s, d) in sheets.into_iter().zip(detections) {
        inputs.push(SheetInput {
            sheet: s.stamp.sheet.clone(),
            truths: s.truths,
            detections: d,
            ignore: s.doc.ignore.iter().map(|r| r.bbox).collect(),
        });
        stamps.push(s.stamp);
    }
    assemble(
        site,
        info,
        settings,
        stamps,
        inputs,
        crop_level,
        calibration_items,
        &config,
        shard,
        started,
    )
}

/// `--merge`: combines shard folders, evaluating their pooled inputs again.
fn merged(
    site: &Site,
    args: &EvalArgs,
    config: &SheetEvalConfig,
    started: (String, Instant),
) -> anyhow::Result<EvaluationRecord> {
    let mut records = Vec::with_capacity(args.merge.len());
    for dir in &args.merge {
        let path = dir.join(METRICS_FILE);
        let text = std::fs::read_to_string(&path)
            .with_context(|| format!("reading {}", path.display()))?;
        let r: EvaluationRecord = serde_json::from_str(&text).map_err(|e| {
            UsageError(format!("{}: not an evaluation record: {e}", path.display()))
        })?;
        records.push(r);
    }
    let first = &records[0];
    if first.sheet_level.config != *config {
        return usage(
            "the shards were evaluated with other settings than these flags; pass the same --iou, --target-*, --resamples and --seed to --merge",
        );
    }
    let merged = merge_inputs(&records)?;
    let crop_level = match merged.crops {
        Some(c) => Some(crop_level(
            &first
                .crop_level
                .as_ref()
                .expect("merge_inputs checked crop levels")
                .classes,
            c,
        )?),
        None => None,
    };
    assemble(
        site,
        first.detector.clone(),
        first.detect_settings.clone(),
        merged.sheets,
        merged.inputs,
        crop_level,
        None,
        config,
        None,
        started,
    )
}

fn report_result(ctx: &Ctx, args: &EvalArgs, record: &EvaluationRecord) -> anyhow::Result<u8> {
    if ctx.json {
        let e = &record.sheet_level;
        ctx.print_json(&serde_json::json!({
            "out": args.out,
            "sheets": record.sheets.len(),
            "symbols": e.micro.n_truths,
            "detections": e.micro.n_detections,
            "map_all_point": e.map_all_point,
            "map_101": e.map_101,
            "operating_threshold": e.operating_threshold,
            "operating": e.operating,
            "trust_statement": record.trust_statement,
        }))?;
    } else {
        let windows: u64 = record.sheets.iter().filter_map(|s| s.windows).sum();
        let skipped: u64 = record.sheets.iter().filter_map(|s| s.windows_skipped).sum();
        if skipped > 0 {
            let on_blank: u64 = record.sheets.iter().filter_map(|s| s.truths_on_blank).sum();
            ctx.say(format!(
                "blank paper: {skipped} of {windows} windows ({:.0}%) skipped without running the network; {on_blank} of the {} labelled symbols lie where their window would have been skipped{}",
                100.0 * skipped as f64 / windows.max(1) as f64,
                record.sheet_level.micro.n_truths,
                if on_blank > 0 {
                    " (WARNING: skipping could lose them; retrain so the threshold is set from crops like these)"
                } else {
                    ""
                }
            ));
        }
        ctx.say(&record.trust_statement);
        ctx.say(format!("\n{}", record.caution));
        ctx.say(format!("\nwrote {}", args.out.join(METRICS_FILE).display()));
    }
    Ok(exit::OK)
}
