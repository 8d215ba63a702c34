//! Interchange formats for labels (`symtrust labels import | export`): a CSV with
//! one row per symbol and COCO-format detection JSON, so labels can move between
//! symtrust and other tools and back without loss.
//!
//! Both formats carry, per symbol: sheet, id, class, box (pixels at the site's
//! canonical resolution, [`crate::geometry`]) and review state. Who made a symbol
//! and when is not carried; an import records the file it came from instead.
//! Exports write atomically; imports validate the whole file before touching any
//! label document (see [`import`]).

pub mod coco;
pub mod csv_rows;
pub mod import;

use crate::atomic::write_atomic;
use crate::document::{LabelDocument, ReviewState};
use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use crate::site::Site;
use crate::store::LabelStore;
use serde::Serialize;
use std::path::Path;

pub use import::{ImportReport, SkippedRow, import_file};

/// An interchange file format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// CSV, header `sheet,id,class,x,y,w,h,state`.
    Csv,
    /// COCO-format detection JSON (`images`, `annotations`, `categories`).
    Coco,
}

/// One symbol as the interchange formats carry it.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    /// Sheet id.
    pub sheet: String,
    /// Symbol id; empty in an imported row means "give it a fresh id".
    pub id: String,
    /// Class name.
    pub class: String,
    /// Box in canonical pixels.
    pub bbox: BBox,
    /// Review state.
    pub state: ReviewState,
}

/// Where a row came from in its file, for error messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Location {
    /// 1-based line of a CSV file.
    Line(u64),
    /// 0-based index into a COCO file's `annotations`.
    Annotation(usize),
}

impl std::fmt::Display for Location {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Location::Line(n) => write!(f, "line {n}"),
            Location::Annotation(i) => write!(f, "annotation {i}"),
        }
    }
}

impl Location {
    /// The error for a bad row at this location of `path`.
    pub fn error(&self, path: &Path, message: impl Into<String>) -> LabelError {
        match self {
            Location::Line(line) => LabelError::Csv {
                path: path.to_path_buf(),
                line: *line,
                message: message.into(),
            },
            Location::Annotation(i) => {
                LabelError::invalid(path, format!("annotations[{i}]: {}", message.into()))
            }
        }
    }
}

/// Every symbol of the given documents as rows, sorted by sheet then id.
pub fn rows_of(docs: &[LabelDocument]) -> Vec<Row> {
    let mut rows: Vec<Row> = docs
        .iter()
        .flat_map(|d| {
            d.symbols.iter().map(|s| Row {
                sheet: d.sheet.id.clone(),
                id: s.id.clone(),
                class: s.class.clone(),
                bbox: s.bbox,
                state: s.state,
            })
        })
        .collect();
    rows.sort_by(|a, b| (&a.sheet, &a.id).cmp(&(&b.sheet, &b.id)));
    rows
}

/// Every label document of the site, sorted by sheet id. The first document
/// that cannot be read fails the whole call, naming the file.
pub fn load_all(site: &Site) -> Result<Vec<LabelDocument>> {
    let store = LabelStore::new(site);
    store
        .sheet_ids()?
        .iter()
        .map(|id| store.load(id))
        .collect()
}

/// What an export wrote.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct ExportSummary {
    /// The file written.
    pub file: String,
    /// Its format.
    pub format: Format,
    /// Sheets in it.
    pub sheets: usize,
    /// Symbols in it (all review states).
    pub symbols: usize,
}

/// Writes every symbol of the site to `out` in `format`, atomically: `out` is
/// either left as it was or replaced by the complete export.
pub fn export(site: &Site, format: Format, out: &Path) -> Result<ExportSummary> {
    let docs = load_all(site)?;
    let bytes = match format {
        Format::Csv => csv_rows::render(&rows_of(&docs)),
        Format::Coco => coco::render(&docs, &site.config.class_names(), &site.config.name),
    };
    write_atomic(out, &bytes)?;
    Ok(ExportSummary {
        file: out.display().to_string(),
        format,
        sheets: docs.len(),
        symbols: docs.iter().map(|d| d.symbols.len()).sum(),
    })
}
