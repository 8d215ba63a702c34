//! symtrust-reports: turns evaluation folders (`metrics.json`) into a report
//! folder people can read and file:
//!
//! - `index.html`: one self-contained page (figures inline as SVG, sheet
//!   overviews and gallery crops inline as PNG), readable offline and printed;
//! - `summary.md` with the PNG copies of the figures under `figures/`;
//! - `tables/*.csv`: per class, per sheet, both confusion tables, every
//!   detection and every labelled symbol with its fate, the IoU sweep;
//! - `sheets/`: per held-out sheet an overlay (downscaled and full size);
//! - `gallery/`: the error crops;
//! - `figures.json`: the numbers every figure was drawn from;
//! - `audit.json`: the audit stamp, which [`verify`] re-checks.
//!
//! The folder is built under a temporary name beside its target and renamed
//! into place, so a failed run leaves nothing half-written.
#![deny(missing_docs)]

pub mod audit;
pub mod base64;
pub mod comparison;
pub mod error;
pub mod figures;
pub mod html;
pub mod load;
pub mod markdown;
pub mod palette;
pub mod picture;
pub mod plot;
pub mod sheets;
pub mod side_by_side;
pub mod tables;
pub mod text;
pub mod trend;

pub use audit::{Verification, verify};
pub use error::{ReportError, Result};
pub use load::{EvaluationInput, LoadedEvaluation, find_site_root};

use audit::{AUDIT_FILE, AUDIT_SCHEMA_VERSION, AuditStamp, ReportFile};
use plot::Figure;
use sheets::{GalleryItem, SheetPicture};
use std::path::{Path, PathBuf};
use symtrust_labels::hash::sha256_hex;
use tables::Table;

/// Most crops in each error gallery unless asked otherwise.
pub const DEFAULT_GALLERY_CAP: usize = 24;

/// File names inside a report folder.
pub const INDEX_FILE: &str = "index.html";
/// The Markdown summary.
pub const SUMMARY_FILE: &str = "summary.md";
/// The numbers behind every figure.
pub const FIGURE_DATA_FILE: &str = "figures.json";

/// What to report on and where to write it.
#[derive(Debug, Clone)]
pub struct ReportRequest {
    /// The main evaluation: every section is about it.
    pub evaluation: EvaluationInput,
    /// Further evaluations shown beside it (comparison table and PR overlay),
    /// e.g. the same model before and after retraining.
    pub beside: Vec<EvaluationInput>,
    /// The report folder to write (replaced if it is a report already).
    pub out: PathBuf,
    /// The command line that asked for the report, for the audit stamp.
    pub command_line: Vec<String>,
    /// Most crops per error gallery.
    pub gallery_cap: usize,
    /// A `symtrust compare` result (its folder or `comparison.json`) to show
    /// as a section of its own.
    pub comparison: Option<PathBuf>,
}

impl ReportRequest {
    /// A report of one evaluation into `out`, with the default gallery size.
    pub fn new(evaluation: EvaluationInput, out: PathBuf) -> Self {
        Self {
            evaluation,
            beside: Vec::new(),
            out,
            command_line: std::env::args().collect(),
            gallery_cap: DEFAULT_GALLERY_CAP,
            comparison: None,
        }
    }
}

/// The default report folder: `<site>/reports/<evaluation folder name>`.
pub fn default_out(site_root: &Path, eval_dir: &Path) -> PathBuf {
    let name = std::path::absolute(eval_dir)
        .ok()
        .and_then(|p| p.file_name().map(|n| n.to_os_string()))
        .unwrap_or_else(|| "evaluation".into());
    site_root.join("reports").join(name)
}

/// A report in memory, before it is written as HTML and Markdown.
#[derive(Debug, Clone)]
pub struct Report {
    /// The evaluations, the main one first.
    pub evaluations: Vec<LoadedEvaluation>,
    /// Figures of the main evaluation, in report order.
    pub figures: Vec<Figure>,
    /// The comparison table and PR overlay, when evaluations are side by side.
    pub side_by_side: Option<(Table, Figure)>,
    /// A champion-challenger comparison: the record, its table and plot.
    pub comparison: Option<(comparison::LoadedComparison, Table, Figure)>,
    /// Per-class table for people.
    pub per_class: Table,
    /// Per-sheet table for people.
    pub per_sheet: Table,
    /// Tables written as CSV.
    pub csv: Vec<Table>,
    /// Sheet overlays.
    pub sheets: Vec<SheetPicture>,
    /// False-alarm gallery, worst first.
    pub false_alarms: Vec<GalleryItem>,
    /// Miss gallery, worst first.
    pub misses: Vec<GalleryItem>,
    /// Total false alarms and misses at the operating threshold (the
    /// galleries show at most the cap).
    pub error_totals: (usize, usize),
    /// The audit stamp (its report files are filled in when written).
    pub audit: AuditStamp,
}

impl Report {
    /// The main evaluation.
    pub fn main(&self) -> &LoadedEvaluation {
        &self.evaluations[0]
    }

    /// Every figure: the main evaluation's, then the side-by-side and
    /// comparison figures.
    pub fn all_figures(&self) -> impl Iterator<Item = &Figure> {
        self.figures
            .iter()
            .chain(self.side_by_side.as_ref().map(|s| &s.1))
            .chain(self.comparison.as_ref().map(|c| &c.2))
    }

    /// A figure by id.
    pub fn figure(&self, id: &str) -> Option<&Figure> {
        self.all_figures().find(|f| f.id == id)
    }
}

/// What [`render`] wrote.
#[derive(Debug, Clone)]
pub struct RenderedReport {
    /// The report folder.
    pub dir: PathBuf,
    /// Its `index.html`.
    pub index_html: PathBuf,
    /// Its `summary.md`.
    pub summary_md: PathBuf,
    /// The main evaluation's trust statement.
    pub trust_statement: String,
    /// Ids of the figures drawn.
    pub figures: Vec<String>,
}

/// Builds the report of `req` into the (existing, empty) folder `staging`:
/// sheet overlays and crops are written there as they are drawn.
pub fn build(req: &ReportRequest, staging: &Path, on_step: &dyn Fn(&str)) -> Result<Report> {
    on_step("reading the evaluations");
    let mut evaluations = vec![load::load(&req.evaluation)?];
    for b in &req.beside {
        evaluations.push(load::load(b)?);
    }
    let comparison = match &req.comparison {
        Some(p) => {
            let c = comparison::load(p)?;
            let table = comparison::table(&c.record);
            let fig = comparison::figure(&c.record)?;
            Some((c, table, fig))
        }
        None => None,
    };
    on_step("checking the sheets and label documents against their recorded hashes");
    let (sites, mut inputs) = audit::collect_inputs(&evaluations)?;
    if let Some((c, _, _)) = &comparison {
        inputs.push(audit::AuditedFile {
            role: audit::Role::Comparison,
            site: None,
            path: std::path::absolute(&c.path)
                .unwrap_or_else(|_| c.path.clone())
                .to_string_lossy()
                .into_owned(),
            sha256: c.sha256.clone(),
            checked_at_render: true,
        });
    }
    let main = &evaluations[0];
    let r = &main.record;
    on_step("drawing the figures");
    let mut figures = vec![figures::pr_curves(r)?];
    figures.extend(figures::detection_confusion(r)?);
    figures.extend(figures::crop_confusion(r)?);
    figures.extend(figures::reliability(r)?);
    figures.push(figures::iou_sweep(r)?);
    figures.extend(figures::sheet_errors(r)?);
    figures.extend(figures::training(main)?);
    let side_by_side = if evaluations.len() > 1 {
        let refs: Vec<&LoadedEvaluation> = evaluations.iter().collect();
        Some((side_by_side::table(&refs), figures::side_by_side_pr(&refs)?))
    } else {
        None
    };
    let (mut false_alarms, mut misses, n_fa, n_miss, pictures) =
        match r.sheet_level.operating_threshold {
            Some(t) => {
                let (mut fa, mut miss, n_fa, n_miss) =
                    sheets::gallery_candidates(r, t, req.gallery_cap);
                let pictures = {
                    let mut all: Vec<&mut GalleryItem> =
                        fa.iter_mut().chain(miss.iter_mut()).collect();
                    sheets::draw_sheets(main, t, &mut all, staging, &|s| {
                        on_step(&format!("drawing sheet {s}"))
                    })?
                };
                (
                    std::mem::take(&mut fa),
                    std::mem::take(&mut miss),
                    n_fa,
                    n_miss,
                    pictures,
                )
            }
            None => (Vec::new(), Vec::new(), 0, 0, Vec::new()),
        };
    false_alarms.retain(|g| !g.png.is_empty());
    misses.retain(|g| !g.png.is_empty());
    let mut csv = vec![
        tables::per_class_csv(r),
        tables::per_sheet_csv(r),
        tables::iou_sweep_csv(r),
        tables::detections_csv(r),
        tables::symbols_csv(r),
    ];
    if let Some(c) = &r.sheet_level.detection_confusion {
        csv.push(tables::confusion_csv("detection_confusion", c));
    }
    if let Some(c) = &r.crop_level {
        csv.push(tables::confusion_csv(
            "crop_confusion",
            &c.evaluation.confusion,
        ));
    }
    if let Some((t, _)) = &side_by_side {
        let mut t = t.clone();
        t.id = "side_by_side".into();
        csv.push(t);
    }
    if let Some((_, t, _)) = &comparison {
        csv.push(t.clone());
    }
    let audit = AuditStamp {
        schema_version: AUDIT_SCHEMA_VERSION,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        created: symtrust_labels::clock::now_rfc3339(),
        command_line: req.command_line.clone(),
        host: audit::host_name(),
        user: symtrust_labels::clock::current_user(),
        sites,
        evaluations: evaluations.iter().map(audit::audited_evaluation).collect(),
        inputs,
        report_files: Vec::new(),
    };
    Ok(Report {
        per_class: tables::per_class_display(r),
        per_sheet: tables::per_sheet_display(r),
        evaluations,
        figures,
        side_by_side,
        comparison,
        csv,
        sheets: pictures,
        false_alarms,
        misses,
        error_totals: (n_fa, n_miss),
        audit,
    })
}

fn write_file(dir: &Path, rel: &str, bytes: &[u8]) -> Result<()> {
    let path = dir.join(rel);
    if let Some(parent) = path.parent() {
        std::fs::create_dir_all(parent).map_err(|e| ReportError::io(parent, e))?;
    }
    std::fs::write(&path, bytes).map_err(|e| ReportError::io(&path, e))
}

/// Every file under `dir` (relative paths, `/`-separated, sorted).
fn files_under(dir: &Path) -> Result<Vec<String>> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for entry in std::fs::read_dir(&d).map_err(|e| ReportError::io(&d, e))? {
            let entry = entry.map_err(|e| ReportError::io(&d, e))?;
            let p = entry.path();
            if p.is_dir() {
                stack.push(p);
            } else if let Ok(rel) = p.strip_prefix(dir) {
                out.push(rel.to_string_lossy().replace('\\', "/"));
            }
        }
    }
    out.sort();
    Ok(out)
}

/// Writes the files of a built report into `staging`.
pub fn write_report(report: &mut Report, staging: &Path) -> Result<()> {
    for f in report.all_figures() {
        write_file(staging, &format!("figures/{}.png", f.id), &f.png)?;
    }
    for t in &report.csv {
        write_file(staging, &format!("tables/{}.csv", t.id), &t.to_csv()?)?;
    }
    let data: Vec<serde_json::Value> = report
        .all_figures()
        .map(|f| {
            serde_json::json!({
                "id": f.id,
                "title": f.title,
                "caption": f.caption,
                "drawn": f.drawn,
            })
        })
        .collect();
    let json =
        serde_json::to_vec_pretty(&data).map_err(|e| ReportError::input(staging, e.to_string()))?;
    write_file(staging, FIGURE_DATA_FILE, &json)?;
    write_file(staging, INDEX_FILE, html::page(report).as_bytes())?;
    write_file(staging, SUMMARY_FILE, markdown::summary(report).as_bytes())?;
    let mut files = Vec::new();
    for rel in files_under(staging)? {
        let bytes = std::fs::read(staging.join(&rel))
            .map_err(|e| ReportError::io(&staging.join(&rel), e))?;
        files.push(ReportFile {
            path: rel,
            sha256: sha256_hex(&bytes),
        });
    }
    report.audit.report_files = files;
    let json = serde_json::to_vec_pretty(&report.audit)
        .map_err(|e| ReportError::input(staging, e.to_string()))?;
    write_file(staging, AUDIT_FILE, &json)
}

/// Renders the report of `req` into `req.out`: built under a temporary name
/// in the same parent folder, synced, then renamed into place (an existing
/// report folder there is replaced; any other existing folder is refused).
/// `on_step` hears what is being done, for progress display.
pub fn render(req: &ReportRequest, on_step: &dyn Fn(&str)) -> Result<RenderedReport> {
    let out = std::path::absolute(&req.out).map_err(|e| ReportError::io(&req.out, e))?;
    if out.exists() && !out.join(AUDIT_FILE).is_file() {
        return Err(ReportError::input(
            &out,
            "exists and is not a report folder; choose another --out or remove it",
        ));
    }
    let parent = out
        .parent()
        .ok_or_else(|| ReportError::input(&out, "has no parent folder"))?
        .to_path_buf();
    symtrust_labels::atomic::create_dir_durable(&parent)?;
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let staging = parent.join(format!(".writing-{name}-{}", std::process::id()));
    if staging.exists() {
        std::fs::remove_dir_all(&staging).map_err(|e| ReportError::io(&staging, e))?;
    }
    std::fs::create_dir(&staging).map_err(|e| ReportError::io(&staging, e))?;
    let result = (|| -> Result<Report> {
        let mut report = build(req, &staging, on_step)?;
        on_step("writing the report");
        write_report(&mut report, &staging)?;
        sync_tree(&staging)?;
        Ok(report)
    })();
    let report = match result {
        Ok(r) => r,
        Err(e) => {
            let _ = std::fs::remove_dir_all(&staging);
            return Err(e);
        }
    };
    let old = parent.join(format!(".replaced-{name}-{}", std::process::id()));
    if out.exists() {
        std::fs::rename(&out, &old).map_err(|e| ReportError::io(&out, e))?;
    }
    std::fs::rename(&staging, &out).map_err(|e| ReportError::io(&out, e))?;
    std::fs::File::open(&parent)
        .and_then(|f| f.sync_all())
        .map_err(|e| ReportError::io(&parent, e))?;
    if old.exists() {
        std::fs::remove_dir_all(&old).map_err(|e| ReportError::io(&old, e))?;
    }
    Ok(RenderedReport {
        index_html: out.join(INDEX_FILE),
        summary_md: out.join(SUMMARY_FILE),
        dir: out,
        trust_statement: report.main().record.trust_statement.clone(),
        figures: report.all_figures().map(|f| f.id.clone()).collect(),
    })
}

/// Syncs every file and folder under `dir` to disk.
fn sync_tree(dir: &Path) -> Result<()> {
    for rel in files_under(dir)? {
        let p = dir.join(rel);
        std::fs::File::open(&p)
            .and_then(|f| f.sync_all())
            .map_err(|e| ReportError::io(&p, e))?;
    }
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        std::fs::File::open(&d)
            .and_then(|f| f.sync_all())
            .map_err(|e| ReportError::io(&d, e))?;
        for entry in std::fs::read_dir(&d).map_err(|e| ReportError::io(&d, e))? {
            let p = entry.map_err(|e| ReportError::io(&d, e))?.path();
            if p.is_dir() {
                stack.push(p);
            }
        }
    }
    Ok(())
}
