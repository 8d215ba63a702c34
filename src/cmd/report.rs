//! `symtrust report`: render evaluation folders into a report folder
//! (`index.html`, `summary.md`, CSV tables, sheet overlays, audit stamp), or
//! re-check a report against its inputs with `--verify`.
//!
//! Exit codes: 0 rendered, or verified with every file matching; 1 failure;
//! 2 bad usage or bad input; [`REPORT_OUTDATED`] when `--verify` finds an input
//! or a report file that changed or is missing (each is listed).

use crate::context::{Ctx, UsageError, usage};
use crate::exit;
use clap::Args;
use std::path::{Path, PathBuf};
use symtrust_reports::{EvaluationInput, ReportError, ReportRequest, find_site_root};

/// Exit code of `--verify` when the report no longer describes its inputs.
pub const REPORT_OUTDATED: u8 = 3;

/// Arguments of `symtrust report`.
#[derive(Debug, Args)]
pub struct ReportArgs {
    /// Evaluation folder written by `symtrust eval --out DIR`.
    #[arg(value_name = "EVAL_DIR", required_unless_present = "verify")]
    pub eval_dir: Option<PathBuf>,
    /// Report folder to write (default: `<site>/reports/<evaluation folder name>`);
    /// an existing report there is replaced.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Another evaluation folder to show side by side with EVAL_DIR
    /// (comparison table and PR curves overlaid); repeat for more.
    #[arg(long, value_name = "EVAL_DIR")]
    pub beside: Vec<PathBuf>,
    /// Title of an evaluation in tables and legends: the first names EVAL_DIR,
    /// the next ones each `--beside` in order (default: the folder name).
    #[arg(long, value_name = "TEXT")]
    pub title: Vec<String>,
    /// A `symtrust compare` result (its folder or comparison.json) to add as
    /// a section: per-class AP differences with their intervals and the verdict.
    #[arg(long, value_name = "DIR")]
    pub comparison: Option<PathBuf>,
    /// Most crops in each error gallery.
    #[arg(long, value_name = "N", default_value_t = symtrust_reports::DEFAULT_GALLERY_CAP)]
    pub gallery: usize,
    /// Re-hash the inputs of the report folder DIR (and its own files) and say
    /// whether it still describes them; the site is `--site` when given, else
    /// the one recorded in the report.
    #[arg(long, value_name = "DIR", conflicts_with_all = ["eval_dir", "out", "beside", "title", "comparison"])]
    pub verify: Option<PathBuf>,
}

/// Maps a report error to our exit codes (bad input is 2).
fn mapped(e: ReportError) -> anyhow::Error {
    if e.is_bad_input() {
        UsageError(e.to_string()).into()
    } else {
        e.into()
    }
}

/// `--site` when it was given (anything but the default `.`).
fn given_site(ctx: &Ctx) -> Option<&Path> {
    (ctx.site_dir != Path::new(".")).then_some(ctx.site_dir.as_path())
}

/// The site an evaluation folder belongs to: `--site`, else the nearest folder
/// above it holding `site.toml`, else the current folder if it is a site.
fn site_of(ctx: &Ctx, eval_dir: &Path) -> anyhow::Result<PathBuf> {
    if let Some(s) = given_site(ctx) {
        return Ok(s.to_path_buf());
    }
    if let Some(s) = find_site_root(eval_dir) {
        return Ok(s);
    }
    if Path::new(symtrust_labels::site::SITE_FILE).is_file() {
        return Ok(PathBuf::from("."));
    }
    usage(format!(
        "{}: cannot tell which site folder its sheets are in (no site.toml above it or here); pass --site DIR",
        eval_dir.display()
    ))
}

/// Runs the command.
pub fn run(ctx: &Ctx, args: &ReportArgs) -> anyhow::Result<u8> {
    if let Some(dir) = &args.verify {
        return verify(ctx, dir);
    }
    let Some(eval_dir) = &args.eval_dir else {
        return usage("give an evaluation folder, or --verify DIR");
    };
    let site = site_of(ctx, eval_dir)?;
    let mut titles = args.title.iter().cloned();
    let evaluation = EvaluationInput {
        dir: eval_dir.clone(),
        site_root: site.clone(),
        title: titles.next(),
    };
    let mut beside = Vec::new();
    for b in &args.beside {
        let site_b = given_site(ctx)
            .map(Path::to_path_buf)
            .or_else(|| find_site_root(b))
            .unwrap_or_else(|| site.clone());
        beside.push(EvaluationInput {
            dir: b.clone(),
            site_root: site_b,
            title: titles.next(),
        });
    }
    if titles.next().is_some() {
        return usage("more --title than evaluations: one for EVAL_DIR, then one per --beside");
    }
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| symtrust_reports::default_out(&site, eval_dir));
    let mut req = ReportRequest::new(evaluation, out);
    req.beside = beside;
    req.gallery_cap = args.gallery;
    req.comparison = args.comparison.clone();
    let quiet = ctx.quiet || ctx.json;
    let rendered = symtrust_reports::render(&req, &|step| {
        if !quiet {
            eprintln!("  {step}");
        }
    })
    .map_err(mapped)?;
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "report": rendered.dir,
            "index_html": rendered.index_html,
            "summary_md": rendered.summary_md,
            "figures": rendered.figures,
            "trust_statement": rendered.trust_statement,
        }))?;
    } else {
        ctx.say(&rendered.trust_statement);
        println!("{}", rendered.index_html.display());
    }
    Ok(exit::OK)
}

fn verify(ctx: &Ctx, dir: &Path) -> anyhow::Result<u8> {
    let v = symtrust_reports::verify(dir, given_site(ctx)).map_err(mapped)?;
    if ctx.json {
        ctx.print_json(&serde_json::json!({
            "all_match": v.all_match(),
            "checked": v.checked,
            "mismatches": v.mismatches,
            "unchecked": v.unchecked,
        }))?;
    } else {
        for m in &v.mismatches {
            match &m.found {
                Some(f) => println!(
                    "changed  {} ({}): SHA-256 {f}, report says {}",
                    m.path, m.role, m.expected
                ),
                None => println!("missing  {} ({})", m.path, m.role),
            }
        }
        for u in &v.unchecked {
            println!("unchecked  {u} (not found now nor when the report was written)");
        }
        if v.all_match() {
            println!(
                "ok: all {} files match; the report still describes its inputs",
                v.checked
            );
        } else {
            println!(
                "outdated: {} of {} files differ from what the report describes",
                v.mismatches.len(),
                v.checked + v.mismatches.iter().filter(|m| m.found.is_none()).count()
            );
        }
    }
    Ok(if v.all_match() {
        exit::OK
    } else {
        REPORT_OUTDATED
    })
}
