//! `symtrust compare`: is a challenger worse than the champion on the same
//! frozen held-out sheets?
//!
//! Each side is a model folder (evaluated here, with `eval`'s defaults) or an
//! evaluation folder written by `symtrust eval`. The comparison folder holds
//! `comparison.json` and, for model folders, both evaluations. Exit code 0
//! when the challenger is better or not worse, [`exit::REJECTED`] when it is
//! worse beyond the margin on any class.

use crate::cmd::eval::{evaluate_model, run_stamp};
use crate::context::{Ctx, UsageError, usage};
use crate::exit;
use anyhow::Context as _;
use clap::{Args, ValueEnum};
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::time::Instant;
use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::compare::{
    ApKind, ClassJudgement, McNemarResult, VerdictRule, mcnemar, paired_bootstrap_ap, verdict,
};
use symtrust_eval::record::{
    COMPARISON_FILE, COMPARISON_SCHEMA_VERSION, ComparisonOutcome, ComparisonRecord,
    EvaluationRecord, METRICS_FILE, RunStamp,
};
use symtrust_eval::sheet_eval::{prepare_sheets, sheet_outcomes};
use symtrust_labels::atomic::write_atomic;
use symtrust_labels::clock::now_rfc3339;
use symtrust_labels::site::Site;

/// How a class's AP-difference interval is judged.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum RuleArg {
    /// Pass a class only when the data show it loses at most the margin
    /// (lower end of the interval >= -margin). The safe default for promotion.
    NonInferiority,
    /// Fail a class only when the data show it loses more than the margin
    /// (upper end < -margin).
    NoSignificantLoss,
}

impl From<RuleArg> for VerdictRule {
    fn from(r: RuleArg) -> Self {
        match r {
            RuleArg::NonInferiority => VerdictRule::NonInferiority,
            RuleArg::NoSignificantLoss => VerdictRule::NoSignificantLoss,
        }
    }
}

/// Which AP definition is compared.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ApArg {
    /// All-point interpolated AP.
    AllPoint,
    /// 101-point AP.
    Points101,
}

/// Arguments of `symtrust compare`.
#[derive(Debug, Args)]
pub struct CompareArgs {
    /// The model in service: a model folder or an evaluation folder.
    #[arg(long, value_name = "DIR")]
    pub champion: PathBuf,
    /// The candidate: a model folder or an evaluation folder.
    #[arg(long, value_name = "DIR")]
    pub challenger: PathBuf,
    /// Comparison folder to write (comparison.json, and evaluations of model folders).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// AP a class may lose before the challenger counts as worse.
    #[arg(long, default_value_t = 0.02)]
    pub margin: f64,
    /// How the margin is applied to each class's interval.
    #[arg(long, value_enum, default_value_t = RuleArg::NonInferiority)]
    pub rule: RuleArg,
    /// AP definition compared.
    #[arg(long, value_enum, default_value_t = ApArg::AllPoint)]
    pub ap: ApArg,
    /// Paired bootstrap resamples over sheets.
    #[arg(long, default_value_t = 1000)]
    pub resamples: usize,
    /// Confidence level of the intervals.
    #[arg(long, default_value_t = 0.95)]
    pub level: f64,
    /// Seed of the bootstrap (default: the site's seed).
    #[arg(long)]
    pub seed: Option<u64>,
}

/// Loads an evaluation folder, or evaluates a model folder into `out/<side>`.
fn side(
    ctx: &Ctx,
    site: &Site,
    dir: &Path,
    out: &Path,
    name: &str,
) -> anyhow::Result<EvaluationRecord> {
    let metrics = dir.join(METRICS_FILE);
    if metrics.is_file() {
        let text = std::fs::read_to_string(&metrics)
            .with_context(|| format!("reading {}", metrics.display()))?;
        return serde_json::from_str(&text).map_err(|e| {
            UsageError(format!(
                "{}: not an evaluation record: {e}",
                metrics.display()
            ))
            .into()
        });
    }
    if !dir.join(symtrust_trainer::card::CARD_FILE).is_file() {
        return usage(format!(
            "--{name} {}: neither a model folder (card.json) nor an evaluation folder ({METRICS_FILE})",
            dir.display()
        ));
    }
    ctx.say(format!("evaluating the {name} {}", dir.display()));
    evaluate_model(ctx, site, dir, &out.join(name), &[])
}

/// Refuses two evaluations of different sheets, labels or matching rules.
fn check_same_ground(a: &EvaluationRecord, b: &EvaluationRecord) -> anyhow::Result<()> {
    let ids = |r: &EvaluationRecord| r.sheets.iter().map(|s| s.sheet.clone()).collect::<Vec<_>>();
    if ids(a) != ids(b) {
        return usage(format!(
            "champion and challenger were evaluated on different sheets ({} vs {}); evaluate both on the same frozen held-out list",
            ids(a).join(", "),
            ids(b).join(", ")
        ));
    }
    for (x, y) in a.sheets.iter().zip(&b.sheets) {
        if x.sheet_sha256 != y.sheet_sha256 {
            return usage(format!(
                "sheet {}: the sheet file differs between the two evaluations",
                x.sheet
            ));
        }
        if x.labels_sha256 != y.labels_sha256 {
            return usage(format!(
                "sheet {}: the labels differ between the two evaluations (revision {} vs {}); evaluate both against the same labels",
                x.sheet, x.labels_revision, y.labels_revision
            ));
        }
    }
    if a.classes != b.classes {
        return usage("champion and challenger have different classes");
    }
    if a.sheet_level.config.criterion != b.sheet_level.config.criterion {
        return usage(
            "champion and challenger were matched with different --iou / --centre-distance",
        );
    }
    Ok(())
}

/// McNemar on crops both models decided, paired by sheet, position and truth.
fn crop_test(a: &EvaluationRecord, b: &EvaluationRecord) -> anyhow::Result<Option<McNemarResult>> {
    let (Some(ca), Some(cb)) = (&a.crop_level, &b.crop_level) else {
        return Ok(None);
    };
    let key =
        |c: &symtrust_eval::record::CropDecision| (c.sheet.clone(), c.x, c.y, c.truth.clone());
    let right_b: HashMap<_, bool> = cb
        .crops
        .iter()
        .map(|c| (key(c), c.predicted == c.truth))
        .collect();
    let mut left = Vec::new();
    let mut right = Vec::new();
    for c in &ca.crops {
        if let Some(&r) = right_b.get(&key(c)) {
            left.push(c.predicted == c.truth);
            right.push(r);
        }
    }
    if left.is_empty() {
        return Ok(None);
    }
    Ok(Some(mcnemar(&left, &right, 25)?))
}

fn signed(v: Option<f64>) -> String {
    v.map_or("n/a".into(), |v| format!("{v:+.3}"))
}

fn plain(v: Option<f64>) -> String {
    v.map_or("n/a".into(), |v| format!("{v:.3}"))
}

fn summary(r: &ComparisonRecord) -> String {
    let m = &r.ap.map;
    let sheets = match r.sheets.len() {
        1 => "1 held-out sheet".to_string(),
        n => format!("{n} held-out sheets"),
    };
    let mut s = format!(
        "On {sheets} the challenger ({}) is {} than the champion ({}): mAP {} -> {} (difference {}, {:.0}% paired interval {} to {}).",
        r.challenger.label(),
        match r.outcome {
            ComparisonOutcome::Better => "better",
            ComparisonOutcome::NotWorse => "not worse",
            ComparisonOutcome::Worse => "worse",
        },
        r.champion.label(),
        plain(m.champion),
        plain(m.challenger),
        signed(m.difference.estimate),
        100.0 * r.ap.config.level,
        signed(m.difference.lower),
        signed(m.difference.upper),
    );
    if r.sheets.len() < 2 {
        s.push_str(" With one sheet the interval is a single point and the verdict rests on that sheet alone; hold out more sheets.");
    }
    let worse: Vec<String> = r
        .verdict
        .lines
        .iter()
        .filter(|l| l.judgement == ClassJudgement::Worse)
        .map(|l| format!("{} ({} to {})", l.class, signed(l.lower), signed(l.upper)))
        .collect();
    if worse.is_empty() {
        s.push_str(&format!(
            " No class is shown to lose more than {} AP.",
            r.verdict.margin
        ));
    } else {
        s.push_str(&format!(
            " Rejected: the AP difference of {} is not shown to stay above -{} ({}).",
            worse.join(", "),
            r.verdict.margin,
            match r.verdict.rule {
                VerdictRule::NonInferiority =>
                    "non-inferiority rule: the lower end must be >= -margin",
                VerdictRule::NoSignificantLoss =>
                    "no-significant-loss rule: the upper end is below -margin",
            }
        ));
    }
    if let Some(t) = &r.mcnemar {
        s.push_str(&format!(
            " On {} paired crops, {} are right only for the champion and {} only for the challenger (McNemar p = {:.3}).",
            t.both_right + t.both_wrong + t.champion_only + t.challenger_only,
            t.champion_only,
            t.challenger_only,
            t.p_value
        ));
    }
    s
}

/// Compares two evaluations of the same sheets (pure: no I/O).
pub fn compare_records(
    champion: &EvaluationRecord,
    challenger: &EvaluationRecord,
    boot: &BootstrapConfig,
    ap_kind: ApKind,
    margin: f64,
    rule: VerdictRule,
    stamp: RunStamp,
) -> anyhow::Result<ComparisonRecord> {
    check_same_ground(champion, challenger)?;
    let classes = &champion.classes;
    let criterion = champion.sheet_level.config.criterion;
    let outcomes = |r: &EvaluationRecord| -> anyhow::Result<Vec<_>> {
        Ok(prepare_sheets(&r.inputs, classes)?
            .iter()
            .map(|p| sheet_outcomes(p, classes.len(), &criterion))
            .collect())
    };
    let ap = paired_bootstrap_ap(
        &outcomes(champion)?,
        &outcomes(challenger)?,
        classes,
        ap_kind,
        boot,
    )?;
    let v = verdict(&ap, margin, rule)?;
    let mut record = ComparisonRecord {
        schema_version: COMPARISON_SCHEMA_VERSION,
        summary: String::new(),
        stamp,
        champion: champion.detector.clone(),
        challenger: challenger.detector.clone(),
        sheets: champion.sheets.clone(),
        mcnemar: crop_test(champion, challenger)?,
        outcome: ComparisonOutcome::of(&v, &ap),
        ap,
        verdict: v,
    };
    record.summary = summary(&record);
    Ok(record)
}

/// Writes `comparison.json` into `out` atomically.
pub fn write_comparison(out: &Path, record: &ComparisonRecord) -> anyhow::Result<()> {
    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    let mut json = serde_json::to_vec_pretty(record)?;
    json.push(b'\n');
    write_atomic(&out.join(COMPARISON_FILE), &json)?;
    Ok(())
}

/// Runs the comparison.
pub fn run(ctx: &Ctx, args: &CompareArgs) -> anyhow::Result<u8> {
    let started = (now_rfc3339(), Instant::now());
    if !(0.0..=1.0).contains(&args.margin) {
        return usage(format!("--margin must lie in [0, 1], got {}", args.margin));
    }
    if !(args.level > 0.0 && args.level < 1.0) || args.resamples == 0 {
        return usage("--level must lie in (0, 1) and --resamples be at least 1");
    }
    let site = ctx.open_site()?;
    let champion = side(ctx, &site, &args.champion, &args.out, "champion")?;
    let challenger = side(ctx, &site, &args.challenger, &args.out, "challenger")?;
    let boot = BootstrapConfig {
        resamples: args.resamples,
        seed: args.seed.unwrap_or(site.config.seed),
        level: args.level,
    };
    let rule = VerdictRule::from(args.rule);
    let ap_kind = match args.ap {
        ApArg::AllPoint => ApKind::AllPoint,
        ApArg::Points101 => ApKind::Points101,
    };
    let record = compare_records(
        &champion,
        &challenger,
        &boot,
        ap_kind,
        args.margin,
        rule,
        run_stamp(started),
    )?;
    write_comparison(&args.out, &record)?;
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "out": args.out,
            "outcome": record.outcome,
            "promote": record.verdict.promote,
            "map_difference": record.ap.map.difference,
            "summary": record.summary,
        }))?;
    } else {
        ctx.say(&record.summary);
        ctx.say(format!(
            "\nwrote {}",
            args.out.join(COMPARISON_FILE).display()
        ));
    }
    Ok(if record.verdict.promote {
        exit::OK
    } else {
        exit::REJECTED
    })
}
