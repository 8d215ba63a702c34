//! Label QA over a whole site (`symtrust labels check`): every problem found in
//! the label documents, each with the file, the sheet, the symbol id when there is
//! one, what is wrong and what to do about it.
//!
//! One broken document is a finding, not the end of the run: the check goes on
//! with the others and the severity counts decide the exit code.
//!
//! Severity (our choice):
//!
//! * errors, which make the labels unfit to train or evaluate on: a document that
//!   cannot be read, parsed or that breaks its format; a document under the wrong
//!   name; a sheet file that is missing, outside the site, unreadable, of another
//!   pixel size than registered, or whose SHA-256 changed since it was labelled; a
//!   box with a non-finite number, a non-positive size, or partly outside the
//!   sheet; a class `site.toml` does not define; two boxes of one class with IoU
//!   above [`DUPLICATE_IOU`]; two boxes of different classes on the same spot
//!   (IoU above [`DUPLICATE_IOU`]).
//! * warnings, which deserve a look but may be right: a symbol whose larger side
//!   exceeds the crop window; a size outlier, whose larger side lies outside
//!   [`SIZE_BAND`] times the class's nominal size at the sheet's resolution; a
//!   sheet with no labels (a document with no draft or accepted symbol, or an
//!   image in `sheets/` without a document); a class with fewer accepted examples
//!   on training sheets than `min_examples`; a held-out sheet id without a
//!   document.
//!
//! Which symbols each check sees: rejected symbols are skipped by the geometric
//! checks (box, size, overlap) but their class must still exist; overlaps look at
//! draft and accepted symbols; example counts use accepted symbols on sheets that
//! are not held out.

use crate::document::{LabelDocument, ReviewState, read_document};
use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use crate::hash::sha256_file;
use crate::raster::read_header;
use crate::site::{Site, SiteConfig};
use crate::store::LabelStore;
use rayon::prelude::*;
use serde::Serialize;
use std::collections::{BTreeMap, HashSet};
use std::path::{Component, Path};

/// Two boxes overlapping with IoU strictly above this mark the same spot.
pub const DUPLICATE_IOU: f64 = 0.9;

/// Band of the larger box side, as multiples of the class's nominal size, outside
/// which a symbol is a size outlier (inclusive at both ends).
pub const SIZE_BAND: (f64, f64) = (0.5, 1.5);

/// How serious a finding is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    /// The labels cannot be trusted until it is fixed (exit code 2).
    Error,
    /// Worth a look; exit code 2 only with `--strict`.
    Warning,
}

/// What a finding is about; the kebab-case name is stable for scripts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Code {
    /// The document could not be read from disk.
    DocumentUnreadable,
    /// The document is not valid JSON or does not have the document's fields.
    DocumentUnparsable,
    /// The document parsed but breaks a rule of its format (schema, ids).
    DocumentInvalid,
    /// The document describes another sheet than its file name says.
    DocumentMisnamed,
    /// The sheet path is absolute or leaves the site folder.
    SheetPathInvalid,
    /// The sheet file does not exist.
    SheetMissing,
    /// The sheet file's SHA-256 differs from the registered one.
    SheetChanged,
    /// The sheet file's image header cannot be read.
    SheetUnreadable,
    /// The sheet file's pixel size differs from the registered one.
    SheetSizeMismatch,
    /// A box coordinate is NaN or infinite.
    BoxNotFinite,
    /// A box has zero or negative width or height.
    BoxEmpty,
    /// A box lies partly or wholly outside the sheet.
    BoxOutsideSheet,
    /// A symbol's class is not defined in `site.toml`.
    ClassUnknown,
    /// Two boxes of one class mark the same spot.
    DuplicateBox,
    /// Two boxes of different classes mark the same spot.
    ClassConflict,
    /// A symbol is larger than the crop window.
    LargerThanWindow,
    /// A symbol's size is far from its class's nominal size.
    SizeOutlier,
    /// A document has no draft or accepted symbol.
    SheetUnlabelled,
    /// An image in `sheets/` has no label document.
    SheetUnregistered,
    /// A class has too few accepted examples on training sheets.
    TooFewExamples,
    /// A held-out sheet id has no label document.
    HeldOutMissing,
}

impl Code {
    /// The severity this kind of finding always has.
    pub fn severity(self) -> Severity {
        match self {
            Code::LargerThanWindow
            | Code::SizeOutlier
            | Code::SheetUnlabelled
            | Code::SheetUnregistered
            | Code::TooFewExamples
            | Code::HeldOutMissing => Severity::Warning,
            _ => Severity::Error,
        }
    }
}

/// One problem found by the check.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Finding {
    /// Error or warning (follows from the code).
    pub severity: Severity,
    /// What kind of problem.
    pub code: Code,
    /// The file concerned, relative to the site root (`labels/x.json`, `site.toml`).
    pub file: String,
    /// The sheet id, when the finding concerns one sheet.
    pub sheet: Option<String>,
    /// The symbol id, when the finding concerns one symbol.
    pub symbol: Option<String>,
    /// What is wrong.
    pub message: String,
    /// What to do about it.
    pub suggestion: String,
}

impl Finding {
    /// A finding of this code; the severity follows from it.
    pub fn new(
        code: Code,
        file: &str,
        sheet: Option<&str>,
        symbol: Option<&str>,
        message: String,
        suggestion: &str,
    ) -> Self {
        Self {
            severity: code.severity(),
            code,
            file: file.to_string(),
            sheet: sheet.map(str::to_string),
            symbol: symbol.map(str::to_string),
            message,
            suggestion: suggestion.to_string(),
        }
    }

    /// The line printed for people: `file: symbol: message (suggestion)`.
    pub fn line(&self) -> String {
        let level = match self.severity {
            Severity::Error => "error",
            Severity::Warning => "warning",
        };
        match &self.symbol {
            Some(s) => format!(
                "{}: {s}: {level}: {} ({})",
                self.file, self.message, self.suggestion
            ),
            None => format!(
                "{}: {level}: {} ({})",
                self.file, self.message, self.suggestion
            ),
        }
    }

    fn sort_key(&self) -> (&str, &Option<String>, &Option<String>, Severity, Code, &str) {
        (
            &self.file,
            &self.sheet,
            &self.symbol,
            self.severity,
            self.code,
            &self.message,
        )
    }
}

/// The result of a check: findings sorted by file, sheet, symbol, severity, code.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct QaReport {
    /// Every finding.
    pub findings: Vec<Finding>,
    /// Number of error findings.
    pub errors: usize,
    /// Number of warning findings.
    pub warnings: usize,
}

impl QaReport {
    /// Sorts the findings deterministically and counts them.
    pub fn from_findings(mut findings: Vec<Finding>) -> Self {
        findings.sort_by(|a, b| a.sort_key().cmp(&b.sort_key()));
        findings.dedup();
        let errors = findings
            .iter()
            .filter(|f| f.severity == Severity::Error)
            .count();
        let warnings = findings.len() - errors;
        Self {
            findings,
            errors,
            warnings,
        }
    }
}

/// Checks every label document of the site, its sheet files and its classes.
/// Fails only when the `labels/` folder itself cannot be listed; everything about
/// single documents is a finding.
pub fn check_site(site: &Site) -> Result<QaReport> {
    let store = LabelStore::new(site);
    let ids = store.sheet_ids()?;
    let per_doc: Vec<(Vec<Finding>, Option<LabelDocument>)> = ids
        .par_iter()
        .map(|id| {
            let rel = format!("labels/{id}.json");
            let mut findings = Vec::new();
            let doc = load_for_check(&store.path(id), id, &rel, &mut findings);
            if let Some(doc) = &doc {
                check_document(&site.config, &rel, doc, &mut findings);
                check_sheet_file(
                    &site.root,
                    site.config.max_sheet_pixels,
                    &rel,
                    doc,
                    &mut findings,
                );
            }
            (findings, doc)
        })
        .collect();
    let mut findings = Vec::new();
    let mut docs = Vec::new();
    for (f, d) in per_doc {
        findings.extend(f);
        docs.extend(d);
    }
    check_site_wide(site, &ids, &docs, &mut findings)?;
    Ok(QaReport::from_findings(findings))
}

/// Reads a document for the check, turning every failure into a finding.
fn load_for_check(
    path: &Path,
    id: &str,
    rel: &str,
    findings: &mut Vec<Finding>,
) -> Option<LabelDocument> {
    match read_document(path) {
        Ok(doc) => {
            if doc.sheet.id != id {
                findings.push(Finding::new(
                    Code::DocumentMisnamed,
                    rel,
                    Some(id),
                    None,
                    format!(
                        "the document describes sheet {:?}, not {id:?}",
                        doc.sheet.id
                    ),
                    &format!("rename the file to labels/{}.json", doc.sheet.id),
                ));
            }
            Some(doc)
        }
        Err(LabelError::Json {
            line,
            column,
            message,
            ..
        }) => {
            findings.push(Finding::new(
                Code::DocumentUnparsable,
                rel,
                Some(id),
                None,
                format!("not a valid label document at line {line}, column {column}: {message}"),
                "repair the JSON or restore the file from a backup",
            ));
            None
        }
        Err(LabelError::Invalid { message, .. }) => {
            findings.push(Finding::new(
                Code::DocumentInvalid,
                rel,
                Some(id),
                None,
                message,
                "fix the document by hand or restore it from a backup",
            ));
            None
        }
        Err(e) => {
            findings.push(Finding::new(
                Code::DocumentUnreadable,
                rel,
                Some(id),
                None,
                format!("cannot be read: {e}"),
                "check the file's permissions and the disk",
            ));
            None
        }
    }
}

/// The checks of one parsed document that need no file access: boxes, classes,
/// sizes, overlaps and whether it has labels at all. `rel` names the file.
pub fn check_document(
    config: &SiteConfig,
    rel: &str,
    doc: &LabelDocument,
    findings: &mut Vec<Finding>,
) {
    let sheet = Some(doc.sheet.id.as_str());
    let (width, height) = (doc.sheet.width, doc.sheet.height);
    let dpi = if doc.sheet.dpi.is_finite() && doc.sheet.dpi > 0.0 {
        doc.sheet.dpi
    } else {
        config.dpi
    };
    let mut usable: Vec<usize> = Vec::new();
    for (index, s) in doc.symbols.iter().enumerate() {
        let here = |code, message, suggestion: &str| {
            Finding::new(code, rel, sheet, Some(&s.id), message, suggestion)
        };
        let class = config.class(&s.class);
        if class.is_none() {
            findings.push(here(
                Code::ClassUnknown,
                format!(
                    "class {:?} is not defined in site.toml (known: {})",
                    s.class,
                    config.class_names().join(", ")
                ),
                "correct the class, or add it to [[classes]] in site.toml",
            ));
        }
        if s.state == ReviewState::Rejected {
            continue;
        }
        let b = &s.bbox;
        if !b.is_finite() {
            findings.push(here(
                Code::BoxNotFinite,
                format!(
                    "box ({}, {}, {}, {}) has a non-finite number",
                    b.x, b.y, b.w, b.h
                ),
                "redraw the box",
            ));
            continue;
        }
        if b.w <= 0.0 || b.h <= 0.0 {
            findings.push(here(
                Code::BoxEmpty,
                format!("box has a non-positive size {} x {}", b.w, b.h),
                "redraw the box or delete the symbol",
            ));
            continue;
        }
        if !b.inside_sheet(width, height) {
            findings.push(here(
                Code::BoxOutsideSheet,
                format!(
                    "box ({}, {}, {}, {}) lies partly outside the {width} x {height} sheet",
                    b.x, b.y, b.w, b.h
                ),
                "move or clip the box to the sheet",
            ));
        }
        let side = b.w.max(b.h);
        if side > f64::from(config.window) {
            findings.push(here(
                Code::LargerThanWindow,
                format!(
                    "larger side {side:.1} px exceeds the {} px crop window",
                    config.window
                ),
                "check the box, or raise window in site.toml",
            ));
        }
        if let Some(class) = class {
            let nominal = class.nominal_mm / 25.4 * dpi;
            let (lo, hi) = (SIZE_BAND.0 * nominal, SIZE_BAND.1 * nominal);
            if side < lo || side > hi {
                findings.push(here(
                    Code::SizeOutlier,
                    format!(
                        "larger side {side:.1} px is outside [{lo:.1}, {hi:.1}] px, {} to {} x the nominal {:.1} px of {} at {dpi} dpi",
                        SIZE_BAND.0, SIZE_BAND.1, nominal, class.name
                    ),
                    "check the box and its class, or nominal_mm in site.toml",
                ));
            }
        }
        usable.push(index);
    }
    let boxes: Vec<BBox> = usable.iter().map(|&i| doc.symbols[i].bbox).collect();
    for (i, j) in overlapping_pairs(&boxes, DUPLICATE_IOU) {
        let (mut a, mut b) = (&doc.symbols[usable[i]], &doc.symbols[usable[j]]);
        if a.id > b.id {
            std::mem::swap(&mut a, &mut b);
        }
        let iou = a.bbox.iou(&b.bbox);
        let finding = if a.class == b.class {
            Finding::new(
                Code::DuplicateBox,
                rel,
                sheet,
                Some(&b.id),
                format!(
                    "overlaps {} of the same class {} (IoU {iou:.3} > {DUPLICATE_IOU})",
                    a.id, a.class
                ),
                &format!("delete {} or {}", b.id, a.id),
            )
        } else {
            Finding::new(
                Code::ClassConflict,
                rel,
                sheet,
                Some(&b.id),
                format!(
                    "is labelled {} on the same spot as {} labelled {} (IoU {iou:.3} > {DUPLICATE_IOU})",
                    b.class, a.id, a.class
                ),
                "keep the symbol with the right class and delete the other",
            )
        };
        findings.push(finding);
    }
    if !doc.symbols.iter().any(|s| s.state != ReviewState::Rejected) {
        findings.push(Finding::new(
            Code::SheetUnlabelled,
            rel,
            sheet,
            None,
            "the sheet has no draft or accepted symbols".to_string(),
            "label it, or remove it if it holds no symbols of the site's classes",
        ));
    }
}

/// Pairs `(i, j)`, `i < j`, of boxes whose IoU is strictly above `threshold`,
/// sorted. A sweep over boxes sorted by left edge: two boxes can only overlap
/// when the later one starts before the earlier one ends. Boxes must be finite.
pub fn overlapping_pairs(boxes: &[BBox], threshold: f64) -> Vec<(usize, usize)> {
    let mut order: Vec<usize> = (0..boxes.len()).collect();
    order.sort_by(|&a, &b| boxes[a].x.total_cmp(&boxes[b].x));
    let mut pairs = Vec::new();
    for (k, &a) in order.iter().enumerate() {
        let right = boxes[a].right();
        for &b in &order[k + 1..] {
            if boxes[b].x >= right {
                break;
            }
            if boxes[a].iou(&boxes[b]) > threshold {
                pairs.push((a.min(b), a.max(b)));
            }
        }
    }
    pairs.sort_unstable();
    pairs
}

/// Checks that a document's sheet file exists, is the registered one (SHA-256)
/// and has the registered pixel size (image header only; a file truncated after
/// registration is caught by its hash).
pub fn check_sheet_file(
    root: &Path,
    max_pixels: u64,
    rel: &str,
    doc: &LabelDocument,
    findings: &mut Vec<Finding>,
) {
    let sheet = Some(doc.sheet.id.as_str());
    let file = &doc.sheet.file;
    let relative = Path::new(file);
    let escapes = relative.is_absolute()
        || relative
            .components()
            .any(|c| !matches!(c, Component::Normal(_) | Component::CurDir));
    if file.is_empty() || escapes {
        findings.push(Finding::new(
            Code::SheetPathInvalid,
            rel,
            sheet,
            None,
            format!("sheet file {file:?} is not a path inside the site folder"),
            "set sheet.file to the path under sheets/, relative to the site root",
        ));
        return;
    }
    let path = root.join(relative);
    if !path.is_file() {
        findings.push(Finding::new(
            Code::SheetMissing,
            rel,
            sheet,
            None,
            format!("the sheet file {file} does not exist"),
            "restore the file, or remove the label document if the sheet was withdrawn",
        ));
        return;
    }
    match sha256_file(&path) {
        Ok(hash) if hash == doc.sheet.sha256 => {}
        Ok(hash) => {
            findings.push(Finding::new(
                Code::SheetChanged,
                rel,
                sheet,
                None,
                format!(
                    "the sheet changed since it was labelled: {file} has SHA-256 {hash}, the document records {}",
                    doc.sheet.sha256
                ),
                "re-register it or restore the file",
            ));
            return;
        }
        Err(e) => {
            findings.push(Finding::new(
                Code::SheetUnreadable,
                rel,
                sheet,
                None,
                format!("the sheet file cannot be read: {e}"),
                "check the file's permissions and the disk",
            ));
            return;
        }
    }
    match image_dimensions(&path, max_pixels) {
        Ok((w, h)) if (w, h) == (doc.sheet.source_width, doc.sheet.source_height) => {}
        Ok((w, h)) => findings.push(Finding::new(
            Code::SheetSizeMismatch,
            rel,
            sheet,
            None,
            format!(
                "{file} is {w} x {h} pixels but the document records {} x {}",
                doc.sheet.source_width, doc.sheet.source_height
            ),
            "re-register the sheet with `symtrust sheets add`",
        )),
        Err(message) => findings.push(Finding::new(
            Code::SheetUnreadable,
            rel,
            sheet,
            None,
            format!("{file} is not a readable image: {message}"),
            "restore the file from the original scan and re-register it",
        )),
    }
}

/// Width and height from an image's header ([`crate::raster::read_header`],
/// which also applies the site's pixel limit), without decoding the pixels.
/// Decoders may panic on hostile input, so the read runs under `catch_unwind`.
fn image_dimensions(path: &Path, max_pixels: u64) -> std::result::Result<(u32, u32), String> {
    let read = || match read_header(path, max_pixels) {
        Ok(h) => Ok((h.width, h.height)),
        Err(LabelError::Image { message, .. }) => Err(message),
        Err(e) => Err(e.to_string()),
    };
    std::panic::catch_unwind(read).unwrap_or_else(|_| Err("the image decoder failed".to_string()))
}

/// Image file extensions looked for in `sheets/`.
const SHEET_EXTENSIONS: [&str; 5] = ["png", "tif", "tiff", "jpg", "jpeg"];

/// Checks that need every document: example counts, held-out sheets, images
/// without a document.
fn check_site_wide(
    site: &Site,
    ids: &[String],
    docs: &[LabelDocument],
    findings: &mut Vec<Finding>,
) -> Result<()> {
    let config = &site.config;
    let mut counts: BTreeMap<&str, usize> = config
        .classes
        .iter()
        .map(|c| (c.name.as_str(), 0))
        .collect();
    for doc in docs.iter().filter(|d| !site.is_held_out(&d.sheet.id)) {
        for s in doc.accepted() {
            if let Some(n) = counts.get_mut(s.class.as_str()) {
                *n += 1;
            }
        }
    }
    for class in &config.classes {
        let n = counts[class.name.as_str()];
        if n < config.min_examples {
            findings.push(Finding::new(
                Code::TooFewExamples,
                "site.toml",
                None,
                None,
                format!(
                    "class {} has {n} accepted examples on training sheets, fewer than min_examples = {}",
                    class.name, config.min_examples
                ),
                "label and accept more examples of it, or remove the class",
            ));
        }
    }
    let known: HashSet<&str> = ids.iter().map(String::as_str).collect();
    for held in &config.held_out {
        if !known.contains(held.as_str()) {
            findings.push(Finding::new(
                Code::HeldOutMissing,
                "site.toml",
                Some(held),
                None,
                format!("held-out sheet {held} has no label document"),
                "register and label the sheet, or remove it from held_out",
            ));
        }
    }
    let registered: HashSet<String> = docs.iter().map(|d| normalise(&d.sheet.file)).collect();
    let dir = site.sheets_dir();
    let entries = match std::fs::read_dir(&dir) {
        Ok(e) => e,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(()),
        Err(e) => return Err(LabelError::io(&dir, e)),
    };
    for entry in entries {
        let entry = entry.map_err(|e| LabelError::io(&dir, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        let is_image = Path::new(&name)
            .extension()
            .map(|e| e.to_string_lossy().to_ascii_lowercase())
            .is_some_and(|e| SHEET_EXTENSIONS.contains(&e.as_str()));
        let rel = format!("sheets/{name}");
        // Documents whose own file failed to parse cannot vouch for their sheet;
        // their image is reported only through the document's finding.
        let stem = Path::new(&name)
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned());
        let doc_unparsed = stem
            .as_deref()
            .is_some_and(|s| known.contains(s) && !docs.iter().any(|d| d.sheet.id == s));
        if is_image && !registered.contains(&rel) && !doc_unparsed {
            findings.push(Finding::new(
                Code::SheetUnregistered,
                &rel,
                None,
                None,
                "the image has no label document, so none of its symbols are labelled".to_string(),
                "register it with `symtrust sheets add` and label it, or move it out of sheets/",
            ));
        }
    }
    Ok(())
}

/// A site-relative path with `./` removed and `\` as `/`, for comparison.
fn normalise(file: &str) -> String {
    let s = file.replace('\\', "/");
    let mut s = s.as_str();
    while let Some(rest) = s.strip_prefix("./") {
        s = rest;
    }
    s.to_string()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::{Origin, Symbol};
    use crate::site::ClassSpec;
    use proptest::prelude::*;

    fn config() -> SiteConfig {
        // 11 mm at 200 dpi is 86.6 px; the band is [43.3, 129.9] px.
        let mut c = SiteConfig::new(
            "qa test",
            vec![
                ClassSpec {
                    name: "pump".into(),
                    description: "d".into(),
                    nominal_mm: 11.0,
                    rotatable: false,
                },
                ClassSpec {
                    name: "valve".into(),
                    description: "d".into(),
                    nominal_mm: 11.0,
                    rotatable: false,
                },
            ],
        );
        c.window = 120;
        c.min_examples = 2;
        c
    }

    fn symbol(id: &str, class: &str, x: f64, y: f64, w: f64, h: f64) -> Symbol {
        Symbol {
            id: id.into(),
            class: class.into(),
            bbox: BBox::new(x, y, w, h),
            state: ReviewState::Accepted,
            origin: Origin::Manual,
            by: "tester".into(),
            at: "2026-12-01T00:00:00Z".into(),
        }
    }

    fn doc(symbols: Vec<Symbol>) -> LabelDocument {
        let mut d = LabelDocument::new(crate::document::tests::sample_sheet("fp-1"));
        d.symbols = symbols;
        d
    }

    fn clean() -> LabelDocument {
        doc(vec![
            symbol("s0001", "pump", 100.0, 100.0, 80.0, 80.0),
            symbol("s0002", "valve", 300.0, 100.0, 80.0, 60.0),
        ])
    }

    fn codes(d: &LabelDocument) -> Vec<Code> {
        let mut f = Vec::new();
        check_document(&config(), "labels/fp-1.json", d, &mut f);
        f.into_iter().map(|f| f.code).collect()
    }

    /// The clean document gives no finding; the crafted one gives exactly `code`.
    fn fires_alone(code: Code, d: &LabelDocument) {
        assert_eq!(codes(&clean()), Vec::<Code>::new());
        assert_eq!(codes(d), vec![code], "{d:?}");
    }

    #[test]
    fn box_outside_sheet_is_an_error() {
        let mut d = clean();
        d.symbols[0].bbox.x = 950.0;
        fires_alone(Code::BoxOutsideSheet, &d);
        assert_eq!(Code::BoxOutsideSheet.severity(), Severity::Error);
        // A box touching the right edge exactly is inside (half-open pixel convention).
        d.symbols[0].bbox.x = 920.0;
        assert_eq!(codes(&d), Vec::<Code>::new());
    }

    #[test]
    fn empty_and_non_finite_boxes_are_errors() {
        let mut d = clean();
        d.symbols[0].bbox.w = 0.0;
        fires_alone(Code::BoxEmpty, &d);
        d.symbols[0].bbox.w = -3.0;
        fires_alone(Code::BoxEmpty, &d);
        d.symbols[0].bbox.w = f64::NAN;
        fires_alone(Code::BoxNotFinite, &d);
        d.symbols[0].bbox.w = 80.0;
        d.symbols[0].bbox.y = f64::INFINITY;
        fires_alone(Code::BoxNotFinite, &d);
    }

    #[test]
    fn unknown_class_names_the_known_ones_even_when_rejected() {
        let mut d = clean();
        d.symbols[1].class = "vlave".into();
        d.symbols[1].state = ReviewState::Rejected;
        fires_alone(Code::ClassUnknown, &d);
        let mut f = Vec::new();
        check_document(&config(), "labels/fp-1.json", &d, &mut f);
        assert!(f[0].message.contains("pump, valve"), "{}", f[0].message);
        assert_eq!(f[0].symbol.as_deref(), Some("s0002"));
    }

    #[test]
    fn rejected_symbols_skip_geometric_checks() {
        let mut d = clean();
        d.symbols
            .push(symbol("s0003", "pump", 990.0, 790.0, -1.0, 300.0));
        d.symbols[2].state = ReviewState::Rejected;
        assert_eq!(codes(&d), Vec::<Code>::new());
    }

    #[test]
    fn near_duplicate_of_one_class_is_an_error() {
        let mut d = clean();
        // 80 x 80 against 80 x 78 at the same corner: IoU = 6240 / 6400 = 0.975.
        d.symbols
            .push(symbol("s0003", "pump", 100.0, 100.0, 80.0, 78.0));
        fires_alone(Code::DuplicateBox, &d);
        let mut f = Vec::new();
        check_document(&config(), "labels/fp-1.json", &d, &mut f);
        assert_eq!(f[0].symbol.as_deref(), Some("s0003"));
        assert!(f[0].message.contains("s0001"), "{}", f[0].message);
    }

    #[test]
    fn same_spot_with_two_classes_is_an_error() {
        let mut d = clean();
        d.symbols
            .push(symbol("s0003", "valve", 101.0, 100.0, 80.0, 80.0));
        fires_alone(Code::ClassConflict, &d);
        // Draft symbols count too.
        d.symbols[2].state = ReviewState::Draft;
        fires_alone(Code::ClassConflict, &d);
    }

    #[test]
    fn iou_threshold_is_strict_at_the_boundary() {
        // Hand calculation: a 100 x 50 box against a 90 x 50 box at the same corner
        // has intersection 4500 and union 5000, IoU exactly 0.9: not a duplicate.
        // pycocotools 2.0.8 `mask.iou` on these [x, y, w, h] boxes gives 0.9 and,
        // for the 90.5 wide box, 0.905 (run once, numpy 2.4.6).
        let mut d = clean();
        d.symbols[0].bbox = BBox::new(100.0, 100.0, 100.0, 50.0);
        d.symbols
            .push(symbol("s0003", "pump", 100.0, 100.0, 90.0, 50.0));
        assert_eq!(d.symbols[0].bbox.iou(&d.symbols[2].bbox), 0.9);
        assert_eq!(codes(&d), Vec::<Code>::new());
        // 90.5 wide: IoU 0.905, just above.
        d.symbols[2].bbox.w = 90.5;
        fires_alone(Code::DuplicateBox, &d);
    }

    #[test]
    fn symbol_larger_than_window_is_a_warning() {
        let mut d = clean();
        // 125 px: above the 120 px window, inside the band up to 129.9 px.
        d.symbols[0].bbox.w = 125.0;
        fires_alone(Code::LargerThanWindow, &d);
        assert_eq!(Code::LargerThanWindow.severity(), Severity::Warning);
    }

    #[test]
    fn size_outlier_uses_the_band_at_the_sheet_resolution() {
        let mut d = clean();
        d.symbols[0].bbox = BBox::new(100.0, 100.0, 40.0, 30.0);
        fires_alone(Code::SizeOutlier, &d);
        let mut f = Vec::new();
        check_document(&config(), "labels/fp-1.json", &d, &mut f);
        assert!(f[0].message.contains("[43.3, 129.9]"), "{}", f[0].message);
        // At 100 dpi the nominal is 43.3 px and the band [21.7, 65.0]: 40 px fits,
        // while the 80 px valve does not.
        d.sheet.dpi = 100.0;
        let mut f = Vec::new();
        check_document(&config(), "labels/fp-1.json", &d, &mut f);
        let hits: Vec<_> = f
            .iter()
            .map(|f| (f.code, f.symbol.clone().unwrap()))
            .collect();
        assert_eq!(hits, vec![(Code::SizeOutlier, "s0002".to_string())]);
    }

    #[test]
    fn sheet_without_labels_is_a_warning() {
        let mut d = clean();
        for s in &mut d.symbols {
            s.state = ReviewState::Rejected;
        }
        fires_alone(Code::SheetUnlabelled, &d);
        fires_alone(Code::SheetUnlabelled, &doc(Vec::new()));
    }

    fn arb_boxes() -> impl Strategy<Value = Vec<BBox>> {
        prop::collection::vec(
            (0.0..200.0f64, 0.0..200.0f64, 1.0..40.0f64, 1.0..40.0f64),
            0..40,
        )
        .prop_map(|v| {
            let mut out: Vec<BBox> = v
                .into_iter()
                .map(|(x, y, w, h)| BBox::new(x, y, w, h))
                .collect();
            // Near copies, so pairs above the threshold actually occur.
            let copies: Vec<BBox> = out
                .iter()
                .step_by(3)
                .map(|b| BBox::new(b.x + 0.3, b.y, b.w, b.h + 0.2))
                .collect();
            out.extend(copies);
            out
        })
    }

    proptest! {
        #[test]
        fn sweep_matches_all_pairs(boxes in arb_boxes(), threshold in prop::sample::select(vec![0.0, 0.5, 0.9])) {
            let mut naive = Vec::new();
            for i in 0..boxes.len() {
                for j in i + 1..boxes.len() {
                    if boxes[i].iou(&boxes[j]) > threshold {
                        naive.push((i, j));
                    }
                }
            }
            prop_assert_eq!(overlapping_pairs(&boxes, threshold), naive);
        }
    }

    #[test]
    fn report_sorts_and_counts() {
        let w = Finding::new(
            Code::SizeOutlier,
            "labels/b.json",
            Some("b"),
            Some("s1"),
            "m".into(),
            "s",
        );
        let e = Finding::new(
            Code::BoxEmpty,
            "labels/a.json",
            Some("a"),
            Some("s2"),
            "m".into(),
            "s",
        );
        let r = QaReport::from_findings(vec![w.clone(), e.clone()]);
        assert_eq!(r.findings, vec![e, w]);
        assert_eq!((r.errors, r.warnings), (1, 1));
        let json = serde_json::to_value(&r).unwrap();
        assert_eq!(json["findings"][0]["code"], "box-empty");
        assert_eq!(json["findings"][0]["severity"], "error");
    }

    /// A site on disk with one labelled sheet whose file is a real PNG.
    fn site_on_disk() -> (tempfile::TempDir, Site) {
        let dir = tempfile::tempdir().unwrap();
        let site = Site::create(dir.path(), config()).unwrap();
        let png = site.sheets_dir().join("fp-1.png");
        image::GrayImage::from_pixel(1000, 800, image::Luma([255u8]))
            .save(&png)
            .unwrap();
        let mut d = clean();
        d.sheet.sha256 = sha256_file(&png).unwrap();
        LabelStore::new(&site).save(&d, "tester").unwrap();
        (dir, site)
    }

    fn site_codes(site: &Site) -> Vec<Code> {
        check_site(site)
            .unwrap()
            .findings
            .iter()
            .map(|f| f.code)
            .collect()
    }

    #[test]
    fn clean_site_has_only_the_example_count_warnings() {
        let (_dir, site) = site_on_disk();
        // One accepted example per class, min_examples = 2.
        assert_eq!(
            site_codes(&site),
            vec![Code::TooFewExamples, Code::TooFewExamples]
        );
        let mut c = site.config.clone();
        c.min_examples = 1;
        let mut site = site;
        site.save_config(c).unwrap();
        assert_eq!(site_codes(&site), Vec::<Code>::new());
    }

    fn lenient(site: &mut Site) {
        let mut c = site.config.clone();
        c.min_examples = 0;
        site.save_config(c).unwrap();
    }

    #[test]
    fn changed_and_missing_sheets_are_errors() {
        let (_dir, mut site) = site_on_disk();
        lenient(&mut site);
        let png = site.sheets_dir().join("fp-1.png");
        let bytes = std::fs::read(&png).unwrap();
        std::fs::write(&png, &bytes[..bytes.len() / 2]).unwrap();
        let report = check_site(&site).unwrap();
        assert_eq!(report.findings[0].code, Code::SheetChanged);
        assert!(report.findings[0].message.contains("sheets/fp-1.png"));
        assert_eq!(report.findings[0].file, "labels/fp-1.json");
        std::fs::remove_file(&png).unwrap();
        assert_eq!(site_codes(&site), vec![Code::SheetMissing]);
    }

    #[test]
    fn corrupt_image_with_matching_hash_is_unreadable() {
        let (_dir, mut site) = site_on_disk();
        lenient(&mut site);
        let png = site.sheets_dir().join("fp-1.png");
        std::fs::write(&png, b"\x89PNG\r\n\x1a\n garbage, not an image").unwrap();
        let store = LabelStore::new(&site);
        let mut d = store.load("fp-1").unwrap();
        d.sheet.sha256 = sha256_file(&png).unwrap();
        store.save(&d, "tester").unwrap();
        assert_eq!(site_codes(&site), vec![Code::SheetUnreadable]);
    }

    #[test]
    fn broken_document_is_a_finding_and_the_check_goes_on() {
        let (_dir, mut site) = site_on_disk();
        lenient(&mut site);
        std::fs::write(
            site.labels_dir().join("fp-2.json"),
            b"{\n  \"schema_version\": 1,\n  \"sheet\": {",
        )
        .unwrap();
        let mut other = clean();
        other.sheet.id = "fp-3".into();
        other.sheet.file = "sheets/gone.png".into();
        other.symbols[0].bbox.x = 990.0;
        LabelStore::new(&site).save(&other, "tester").unwrap();
        let report = check_site(&site).unwrap();
        let got: Vec<(String, Code)> = report
            .findings
            .iter()
            .map(|f| (f.file.clone(), f.code))
            .collect();
        assert_eq!(
            got,
            vec![
                ("labels/fp-2.json".to_string(), Code::DocumentUnparsable),
                ("labels/fp-3.json".to_string(), Code::SheetMissing),
                ("labels/fp-3.json".to_string(), Code::BoxOutsideSheet),
            ]
        );
        assert!(
            report.findings[0].message.contains("line 3"),
            "{}",
            report.findings[0].message
        );
        assert_eq!(report.errors, 3);
    }

    #[test]
    fn misnamed_document_and_escaping_path_are_errors() {
        let (_dir, mut site) = site_on_disk();
        lenient(&mut site);
        std::fs::copy(site.label_path("fp-1"), site.label_path("fp-9")).unwrap();
        let store = LabelStore::new(&site);
        let mut d = store.load("fp-1").unwrap();
        d.sheet.file = "../outside.png".into();
        store.save(&d, "tester").unwrap();
        let got: Vec<(String, Code)> = check_site(&site)
            .unwrap()
            .findings
            .iter()
            .map(|f| (f.file.clone(), f.code))
            .collect();
        assert_eq!(
            got,
            vec![
                ("labels/fp-1.json".to_string(), Code::SheetPathInvalid),
                ("labels/fp-9.json".to_string(), Code::DocumentMisnamed),
            ]
        );
    }

    #[test]
    fn held_out_without_document_and_unregistered_image_are_warnings() {
        let (_dir, mut site) = site_on_disk();
        let mut c = site.config.clone();
        c.min_examples = 1;
        c.held_out = vec!["fp-7".into()];
        site.save_config(c).unwrap();
        std::fs::write(site.sheets_dir().join("fp-8.png"), b"x").unwrap();
        std::fs::write(site.sheets_dir().join("notes.txt"), b"x").unwrap();
        let report = check_site(&site).unwrap();
        let got: Vec<(String, Code)> = report
            .findings
            .iter()
            .map(|f| (f.file.clone(), f.code))
            .collect();
        assert_eq!(
            got,
            vec![
                ("sheets/fp-8.png".to_string(), Code::SheetUnregistered),
                ("site.toml".to_string(), Code::HeldOutMissing),
            ]
        );
        assert_eq!((report.errors, report.warnings), (0, 2));
    }

    #[test]
    fn held_out_sheets_do_not_count_as_examples() {
        let (_dir, mut site) = site_on_disk();
        let mut c = site.config.clone();
        c.min_examples = 1;
        c.held_out = vec!["fp-1".into()];
        site.save_config(c).unwrap();
        assert_eq!(
            site_codes(&site),
            vec![Code::TooFewExamples, Code::TooFewExamples]
        );
    }
}
