//! `symtrust nightly`: retrain on newly reviewed labels and promote the
//! challenger only when it is not worse than the champion.
//!
//! One run, in order (each step's files under `nightly/runs/<run>/`):
//! 1. take the run lock (a run that died holding it is reported and its
//!    unfinished bookkeeping completed);
//! 2. compare accepted labels with the last finished run; stop with exit code
//!    4 when nothing changed (unless `--force`, or there is no champion yet);
//! 3. mine hard negatives: the champion's detections on the training sheets
//!    (the crop builder keeps those away from labelled symbols, capped per sheet);
//! 4. build the crop library and train the challenger;
//! 5. evaluate champion and challenger on the same frozen held-out sheets and
//!    compare them (paired bootstrap, McNemar, verdict under the margin);
//! 6. write the decision, switch `champion.json` atomically when promoted,
//!    append to `history.csv`, remember the labels seen, mark the run done.
//!
//! A run killed before step 6 changes nothing that matters: the champion and
//! the history are untouched, and the next run starts over. A run killed
//! during step 6 is finished by the next run from its decision file. No model
//! folder is ever deleted.

use crate::cmd::compare::{RuleArg, compare_records, write_comparison};
use crate::cmd::eval::{evaluate_model, render_report, run_stamp};
use crate::cmd::train::{args_from as train_args, train_model};
use crate::context::{Ctx, usage};
use crate::exit;
use crate::sweep::sweep_sheet;
use anyhow::Context as _;
use clap::Args;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use std::time::Instant;
use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::compare::{ApKind, VerdictRule};
use symtrust_eval::record::{DetectSettings, EvaluationRecord};
use symtrust_labels::atomic::write_atomic;
use symtrust_labels::clock::now_rfc3339;
use symtrust_labels::crops::{CropRequest, build_library};
use symtrust_labels::detections::{DETECTIONS_SCHEMA_VERSION, DetectionSet, write_detections};
use symtrust_labels::nightly::champion::{Champion, read_champion, write_champion};
use symtrust_labels::nightly::changes::{LabelsSeen, compare, fingerprint, read_seen, write_seen};
use symtrust_labels::nightly::history::{
    ApCell, HISTORY_FILE, HistoryRow, append_history, read_history,
};
use symtrust_labels::nightly::lock::{Acquired, acquire, note_now};
use symtrust_labels::nightly::{nightly_dir, runs_dir};
use symtrust_labels::sheets::load_sheet;
use symtrust_labels::site::Site;
use symtrust_labels::split::split_sheets;
use symtrust_labels::store::LabelStore;
use symtrust_reports::trend::{trend_figure, write_trend};
use symtrust_trainer::Classifier;

/// Arguments of `symtrust nightly`.
#[derive(Debug, Args)]
pub struct NightlyArgs {
    /// Run even when no accepted label changed since the last run.
    #[arg(long)]
    pub force: bool,
    /// Epochs for the challenger (default: `[train] epochs` in site.toml).
    #[arg(long, value_name = "N")]
    pub epochs: Option<usize>,
    /// AP a class may lose before the challenger counts as worse.
    #[arg(long, default_value_t = 0.02)]
    pub margin: f64,
    /// How the margin is applied to each class's interval.
    #[arg(long, value_enum, default_value_t = RuleArg::NonInferiority)]
    pub rule: RuleArg,
    /// Paired bootstrap resamples over the held-out sheets.
    #[arg(long, default_value_t = 1000)]
    pub resamples: usize,
    /// Do not mine the champion's false alarms as hard negatives.
    #[arg(long)]
    pub no_hard_negatives: bool,
    /// Append every message to this file (for cron), even with --quiet.
    #[arg(long, value_name = "FILE")]
    pub log: Option<PathBuf>,
}

/// What a run decided, written before anything is switched, so a killed run
/// can be finished by the next one.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct Decision {
    run: String,
    started: String,
    seconds: f64,
    trigger: String,
    sheets_changed: usize,
    accepted_labels: usize,
    crop_library: String,
    champion_before: Option<String>,
    challenger: String,
    promote: bool,
    reason: String,
    map_champion: Option<f64>,
    map_challenger: Option<f64>,
    per_class: Vec<(ApPair, ApPair)>,
    labels_seen: LabelsSeen,
}

#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize)]
struct ApPair {
    ap: Option<f64>,
    lo: Option<f64>,
    hi: Option<f64>,
}

const DECISION_FILE: &str = "decision.json";
const DONE_FILE: &str = "done";

/// Test hook: abort (as a kill would) at a named point of the run.
fn checkpoint(point: &str) {
    if std::env::var("SYMTRUST_NIGHTLY_ABORT_AT").is_ok_and(|p| p == point) {
        std::process::abort();
    }
}

fn run_id() -> String {
    let now = now_rfc3339();
    let stamp: String = now.chars().filter(|c| c.is_ascii_alphanumeric()).collect();
    format!(
        "{}-{:05}",
        stamp.trim_end_matches('Z'),
        std::process::id() % 100_000
    )
}

fn class_aps(r: &EvaluationRecord) -> Vec<ApPair> {
    let iv = r.sheet_level.intervals.as_ref();
    r.sheet_level
        .per_class
        .iter()
        .enumerate()
        .map(|(k, c)| {
            let i = iv.and_then(|iv| iv.class_ap_all_point.get(k));
            ApPair {
                ap: c.figures.ap.all_point,
                lo: i.and_then(|i| i.lower),
                hi: i.and_then(|i| i.upper),
            }
        })
        .collect()
}

/// Finishes the bookkeeping of a decided run: promotion, history, labels seen.
/// `own` is false when finishing an earlier, interrupted run (the abort hook
/// then stays quiet, so a test kills only the run it means to).
fn finish(ctx: &Ctx, site: &Site, dir: &Path, d: &Decision, own: bool) -> anyhow::Result<()> {
    if d.promote {
        let current = read_champion(site)?.map(|c| c.model);
        if current.as_deref() != Some(d.challenger.as_str()) {
            if current != d.champion_before {
                ctx.say(format!(
                    "run {}: the champion changed to {:?} since the run decided; not promoting {}",
                    d.run, current, d.challenger
                ));
            } else {
                write_champion(
                    site,
                    &Champion {
                        model: d.challenger.clone(),
                        promoted_at: now_rfc3339(),
                        promoted_by: format!("nightly run {}", d.run),
                        previous: d.champion_before.clone(),
                    },
                )?;
            }
        }
    }
    if own {
        checkpoint("promoted");
    }
    let classes = site.config.class_names();
    let cell = |p: &ApPair| ApCell {
        ap: p.ap,
        lo: p.lo,
        hi: p.hi,
    };
    append_history(
        &site.root.join(HISTORY_FILE),
        &classes,
        &HistoryRow {
            run: d.run.clone(),
            started: d.started.clone(),
            seconds: d.seconds,
            trigger: d.trigger.clone(),
            sheets_changed: d.sheets_changed,
            accepted_labels: d.accepted_labels,
            crop_library: d.crop_library.clone(),
            champion: d.champion_before.clone().unwrap_or_default(),
            challenger: d.challenger.clone(),
            outcome: if d.promote { "promoted" } else { "rejected" }.into(),
            reason: d.reason.clone(),
            map_champion: d.map_champion,
            map_challenger: d.map_challenger,
            per_class: d
                .per_class
                .iter()
                .map(|(a, b)| (cell(a), cell(b)))
                .collect(),
        },
    )?;
    if own {
        checkpoint("recorded");
    }
    write_seen(&nightly_dir(site).join("labels-seen.json"), &d.labels_seen)?;
    write_atomic(&dir.join(DONE_FILE), now_rfc3339().as_bytes())?;
    Ok(())
}

/// Completes decided but unfinished runs; marks undecided ones abandoned.
fn recover(ctx: &Ctx, site: &Site) -> anyhow::Result<()> {
    let runs = runs_dir(site);
    let Ok(entries) = std::fs::read_dir(&runs) else {
        return Ok(());
    };
    let mut dirs: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_dir())
        .collect();
    dirs.sort();
    for dir in dirs {
        if dir.join(DONE_FILE).exists() || dir.join("abandoned").exists() {
            continue;
        }
        let decision = dir.join(DECISION_FILE);
        if decision.is_file() {
            let text = std::fs::read_to_string(&decision)
                .with_context(|| format!("reading {}", decision.display()))?;
            let d: Decision = serde_json::from_str(&text)
                .with_context(|| format!("{} is damaged", decision.display()))?;
            ctx.say(format!(
                "finishing run {}, which decided ({}) but was interrupted",
                d.run,
                if d.promote { "promote" } else { "reject" }
            ));
            finish(ctx, site, &dir, &d, false)?;
        } else {
            ctx.say(format!(
                "run {} was interrupted before it decided; its files stay under {} and nothing was switched",
                dir.file_name().unwrap_or_default().to_string_lossy(),
                dir.display()
            ));
            write_atomic(&dir.join("abandoned"), now_rfc3339().as_bytes())?;
        }
    }
    Ok(())
}

/// The run's report (challenger beside champion) and the trend of the history.
fn render_run(ctx: &Ctx, site: &Site, dir: &Path, with_champion: bool) -> anyhow::Result<()> {
    let beside = if with_champion {
        vec![(dir.join("eval-champion"), Some("champion".to_string()))]
    } else {
        Vec::new()
    };
    let rendered = render_report(
        ctx,
        site,
        &dir.join("eval-challenger"),
        &beside,
        Some((dir.join("report"), Some("challenger".to_string()))),
    )?;
    let rows = read_history(&site.root.join(HISTORY_FILE), &site.config.class_names())?;
    let figure = trend_figure(&site.config.class_names(), &rows)?;
    let (svg, _) = write_trend(&site.root, &figure)?;
    ctx.say(format!(
        "report of the run: {}; trend over {} runs: {}",
        rendered.index_html.display(),
        rows.len(),
        svg.display()
    ));
    Ok(())
}

/// The champion's detections on the training sheets, as a detections file.
fn mine_hard_negatives(
    ctx: &Ctx,
    site: &Site,
    champion: &Path,
    out: &Path,
) -> anyhow::Result<usize> {
    let classifier = Classifier::load(champion)?;
    crate::sweep::check_model(site, &classifier, champion)?;
    let store = LabelStore::new(site);
    let split = split_sheets(&site.config, &store.sheet_ids()?);
    let settings = DetectSettings {
        min_score: 0.5,
        nms_iou: 0.3,
        nms_across_classes: true,
        max_per_sheet: None,
    };
    let bar = ctx.progress(split.train.len() as u64, "mining");
    let mut all = Vec::new();
    for id in &split.train {
        let doc = store.load(id)?;
        let img = load_sheet(site, &doc.sheet)?;
        all.extend(sweep_sheet(site, &classifier, &doc, &img, &settings)?.detections);
        bar.inc(1);
    }
    bar.finish_and_clear();
    let n = all.len();
    write_detections(
        out,
        &DetectionSet {
            schema_version: DETECTIONS_SCHEMA_VERSION,
            model: classifier.card.as_ref().map(|c| c.id.clone()),
            detections: all,
        },
    )?;
    Ok(n)
}

/// Runs one nightly job.
pub fn run(ctx: &Ctx, args: &NightlyArgs) -> anyhow::Result<u8> {
    let ctx = match &args.log {
        Some(p) => ctx.with_log(p)?,
        None => ctx.clone(),
    };
    let ctx = &ctx;
    if !(0.0..=1.0).contains(&args.margin) || args.resamples == 0 {
        return usage("--margin must lie in [0, 1] and --resamples be at least 1");
    }
    let started = (now_rfc3339(), Instant::now());
    let site = ctx.open_site()?;
    let run = run_id();
    let host = crate::cmd::eval::host_name();
    // A held lock is a failure to run (exit 1), not bad input.
    let acquired = acquire(&nightly_dir(&site).join("lock"), &note_now(&run, &host))
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let lock = match acquired {
        Acquired::Clean(l) => l,
        Acquired::AfterCrash(l, note) => {
            ctx.say(format!(
                "the previous run {} (pid {} on {}, started {}) ended without finishing; recovering",
                note.run, note.pid, note.host, note.started
            ));
            l
        }
    };
    recover(ctx, &site)?;

    let store = LabelStore::new(&site);
    let ids = store.sheet_ids()?;
    let mut seen = LabelsSeen::new();
    let split = split_sheets(&site.config, &ids);
    let mut accepted_labels = 0;
    for id in &ids {
        let doc = store.load(id)?;
        let f = fingerprint(&doc);
        if !split.held_out.contains(id) {
            accepted_labels += f.accepted;
        }
        seen.insert(id.clone(), f);
    }
    let before = read_seen(&nightly_dir(&site).join("labels-seen.json"))?;
    let changes = compare(&before, &seen);
    let champion = read_champion(&site)?;
    let trigger = if champion.is_none() {
        "first run"
    } else if changes.any() {
        "labels changed"
    } else if args.force {
        "forced"
    } else {
        ctx.say(format!(
            "nothing to do: no accepted label changed since the last run ({} sheets checked{}); champion {} stays",
            ids.len(),
            if changes.revised_only.is_empty() {
                String::new()
            } else {
                format!(", {} saved with only drafts changed", changes.revised_only.len())
            },
            champion.as_ref().map_or("none", |c| c.model.as_str())
        ));
        lock.release()?;
        if ctx.json {
            ctx.print_json(&serde_json::json!({"outcome": "nothing_to_do"}))?;
        }
        return Ok(exit::NOTHING_TO_DO);
    };
    let sheets_changed = changes.added.len() + changes.changed.len() + changes.removed.len();
    let dir = runs_dir(&site).join(&run);
    std::fs::create_dir_all(&dir).with_context(|| format!("creating {}", dir.display()))?;
    ctx.say(format!(
        "nightly run {run} ({trigger}: {sheets_changed} sheets with changed accepted labels)"
    ));

    let champion_dir = champion.as_ref().map(|c| site.models_dir().join(&c.model));
    let hard = match &champion_dir {
        Some(m) if !args.no_hard_negatives => {
            let path = dir.join("hard-negatives.csv");
            let n = mine_hard_negatives(ctx, &site, m, &path)?;
            ctx.say(format!(
                "mined {n} detections of the champion on the training sheets"
            ));
            Some(path)
        }
        _ => None,
    };
    let built = build_library(
        &site,
        &CropRequest {
            seed: None,
            hard_negatives: hard,
        },
        &|_| {},
    )?;
    let library = built.library.manifest.id.clone();
    ctx.say(format!(
        "crop library {library} ({})",
        if built.reused { "reused" } else { "built" }
    ));
    checkpoint("crops");

    let epochs = args.epochs.map(|e| e.to_string());
    let mut targs = vec!["--crops", library.as_str()];
    if let Some(e) = &epochs {
        targs.extend(["--epochs", e.as_str()]);
    }
    let (card, challenger_dir) = train_model(ctx, &site, &train_args(&targs)?)?;
    ctx.say(format!("trained challenger {}", card.id));
    checkpoint("trained");

    let resamples = args.resamples.to_string();
    let challenger_eval = evaluate_model(
        ctx,
        &site,
        &challenger_dir,
        &dir.join("eval-challenger"),
        &["--resamples", &resamples],
    )?;
    let (promote, reason, champion_eval) = match &champion_dir {
        None => (
            true,
            "first model of the site: nothing to compare with".to_string(),
            None,
        ),
        Some(m) => {
            let champion_eval = evaluate_model(
                ctx,
                &site,
                m,
                &dir.join("eval-champion"),
                &["--resamples", &resamples],
            )?;
            let boot = BootstrapConfig {
                resamples: args.resamples,
                seed: site.config.seed,
                level: 0.95,
            };
            let rule = VerdictRule::from(args.rule);
            let cmp = compare_records(
                &champion_eval,
                &challenger_eval,
                &boot,
                ApKind::AllPoint,
                args.margin,
                rule,
                run_stamp(started.clone()),
            )?;
            write_comparison(&dir, &cmp)?;
            (
                cmp.verdict.promote,
                cmp.summary.clone(),
                Some(champion_eval),
            )
        }
    };
    checkpoint("evaluated");

    let n = site.config.classes.len();
    let decision = Decision {
        run: run.clone(),
        started: started.0.clone(),
        seconds: started.1.elapsed().as_secs_f64(),
        trigger: trigger.to_string(),
        sheets_changed,
        accepted_labels,
        crop_library: library,
        champion_before: champion.as_ref().map(|c| c.model.clone()),
        challenger: card.id.clone(),
        promote,
        reason: reason.clone(),
        map_champion: champion_eval
            .as_ref()
            .and_then(|e| e.sheet_level.map_all_point),
        map_challenger: challenger_eval.sheet_level.map_all_point,
        per_class: (0..n)
            .map(|k| {
                (
                    champion_eval
                        .as_ref()
                        .map(|e| class_aps(e)[k])
                        .unwrap_or_default(),
                    class_aps(&challenger_eval)[k],
                )
            })
            .collect(),
        labels_seen: seen,
    };
    let mut bytes = serde_json::to_vec_pretty(&decision)?;
    bytes.push(b'\n');
    write_atomic(&dir.join(DECISION_FILE), &bytes)?;
    checkpoint("decided");
    finish(ctx, &site, &dir, &decision, true)?;
    // The run's report and the trend are for people; a failure here is
    // reported but does not undo the decision.
    if let Err(e) = render_run(ctx, &site, &dir, champion_eval.is_some()) {
        ctx.say(format!(
            "warning: the run's report or trend plot could not be written: {e:#}"
        ));
    }
    lock.release()?;

    let line = if promote {
        format!("promoted {}: {reason}", card.id)
    } else {
        format!(
            "kept champion {}: challenger {} rejected. {reason}",
            champion.as_ref().map_or("none", |c| c.model.as_str()),
            card.id
        )
    };
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "outcome": if promote { "promoted" } else { "rejected" },
            "run": run,
            "challenger": card.id,
            "champion_before": decision.champion_before,
            "reason": reason,
        }))?;
    } else if ctx.quiet {
        println!("{line}");
    }
    ctx.say(line);
    Ok(if promote { exit::OK } else { exit::REJECTED })
}
