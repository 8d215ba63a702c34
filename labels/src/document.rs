//! Label documents: one JSON file per sheet under `labels/<sheet id>.json`.
//!
//! A document records which sheet it describes (file, SHA-256, pixel size,
//! resolution), a revision counter, ignore regions (legend, title block) and the
//! symbols with their review state and origin. Boxes are in pixels at the site's
//! canonical resolution (see [`crate::geometry`]), i.e. on the sheet as loaded
//! after resampling, so a box means the same thing whatever dpi the scan had.
//!
//! Reading checks the structure ([`read_document`]); checking against the site's
//! classes and the sheet's size is [`LabelDocument::check_against`]; the full QA
//! with every finding is in [`crate::qa`].

use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use serde::{Deserialize, Serialize};
use std::collections::HashSet;
use std::path::Path;

/// Version of the label document format written by this build.
pub const LABEL_SCHEMA_VERSION: u32 = 1;

/// Where the resolution of a sheet came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DpiSource {
    /// Read from the image file (PNG pHYs, TIFF resolution tags, JPEG JFIF density).
    FileMetadata,
    /// The file carried none; the site's canonical resolution was assumed.
    SiteDefault,
}

/// The sheet a document describes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SheetRecord {
    /// Sheet id (the file stem; safe as a file name).
    pub id: String,
    /// Image file, relative to the site root (e.g. `sheets/fp-a-0001.png`).
    pub file: String,
    /// SHA-256 of the image file as registered.
    pub sha256: String,
    /// Width of the file in pixels.
    pub source_width: u32,
    /// Height of the file in pixels.
    pub source_height: u32,
    /// Resolution of the file in dots per inch.
    pub source_dpi: f64,
    /// Where `source_dpi` came from.
    pub dpi_source: DpiSource,
    /// Width at the canonical resolution (the coordinate frame of every box).
    pub width: u32,
    /// Height at the canonical resolution.
    pub height: u32,
    /// The canonical resolution the sheet is resampled to.
    pub dpi: f64,
}

/// Review state of a symbol.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ReviewState {
    /// Not yet reviewed (e.g. a model proposal).
    Draft,
    /// Reviewed and confirmed; only accepted symbols train and evaluate.
    Accepted,
    /// Reviewed and judged not a symbol (kept so a proposal is not made again).
    Rejected,
}

impl ReviewState {
    /// The lower-case name used in CSV files.
    pub fn as_str(&self) -> &'static str {
        match self {
            ReviewState::Draft => "draft",
            ReviewState::Accepted => "accepted",
            ReviewState::Rejected => "rejected",
        }
    }

    /// Parses `draft`, `accepted` or `rejected`.
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "draft" => Some(ReviewState::Draft),
            "accepted" => Some(ReviewState::Accepted),
            "rejected" => Some(ReviewState::Rejected),
            _ => None,
        }
    }
}

/// How a symbol came to be in the document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Origin {
    /// Drawn by a person.
    Manual,
    /// Read from an interchange file or written by the synthetic plant generator.
    Imported {
        /// The file or generator it came from.
        source: String,
    },
    /// Proposed by a model (`symtrust detect --propose`).
    Proposed {
        /// The model id.
        model: String,
        /// The model's score for it.
        score: f64,
        /// The class the model proposed; the symbol's own class may since have been
        /// corrected by a person. Absent in documents written before it was recorded.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        proposed_class: Option<String>,
        /// The box the model proposed; absent in documents written before it was
        /// recorded.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        proposed_box: Option<BBox>,
    },
}

/// One labelled symbol.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Symbol {
    /// Id unique within the document.
    pub id: String,
    /// Class name from `site.toml`.
    pub class: String,
    /// Box in canonical pixels.
    #[serde(rename = "box")]
    pub bbox: BBox,
    /// Review state.
    pub state: ReviewState,
    /// Where it came from.
    pub origin: Origin,
    /// Who made the last change to it.
    pub by: String,
    /// When (RFC 3339 UTC).
    pub at: String,
}

/// A region whose contents are neither labelled nor counted (legend, title block).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct IgnoreRegion {
    /// Id unique within the document.
    pub id: String,
    /// Box in canonical pixels.
    #[serde(rename = "box")]
    pub bbox: BBox,
    /// Why it is ignored.
    pub reason: String,
}

/// The label document of one sheet.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LabelDocument {
    /// Format version ([`LABEL_SCHEMA_VERSION`]).
    pub schema_version: u32,
    /// The sheet.
    pub sheet: SheetRecord,
    /// Revision counter; every save adds one.
    pub revision: u64,
    /// Who saved the current revision.
    pub changed_by: String,
    /// When the current revision was saved (RFC 3339 UTC).
    pub changed_at: String,
    /// Regions excluded from labelling and evaluation.
    #[serde(default)]
    pub ignore: Vec<IgnoreRegion>,
    /// The symbols.
    #[serde(default)]
    pub symbols: Vec<Symbol>,
}

impl LabelDocument {
    /// A new, empty document for a registered sheet (revision 0, not yet saved).
    pub fn new(sheet: SheetRecord) -> Self {
        Self {
            schema_version: LABEL_SCHEMA_VERSION,
            sheet,
            revision: 0,
            changed_by: String::new(),
            changed_at: String::new(),
            ignore: Vec::new(),
            symbols: Vec::new(),
        }
    }

    /// Symbols that are accepted.
    pub fn accepted(&self) -> impl Iterator<Item = &Symbol> {
        self.symbols
            .iter()
            .filter(|s| s.state == ReviewState::Accepted)
    }

    /// The symbol with this id.
    pub fn symbol(&self, id: &str) -> Option<&Symbol> {
        self.symbols.iter().find(|s| s.id == id)
    }

    /// A fresh symbol id not used in the document (`s0001`, `s0002`, ...).
    pub fn next_symbol_id(&self) -> String {
        let used: HashSet<&str> = self.symbols.iter().map(|s| s.id.as_str()).collect();
        (1..)
            .map(|n| format!("s{n:04}"))
            .find(|id| !used.contains(id.as_str()))
            .expect("an unused id exists")
    }

    /// True when the point lies in an ignore region.
    pub fn in_ignore(&self, x: f64, y: f64) -> bool {
        self.ignore.iter().any(|r| r.bbox.contains_point(x, y))
    }

    /// Structural checks that make a document unusable when they fail: schema
    /// version, ids, finite numbers. `path` names the file in the message.
    pub fn check_structure(&self, path: &Path) -> Result<()> {
        if self.schema_version != LABEL_SCHEMA_VERSION {
            return Err(LabelError::invalid(
                path,
                format!(
                    "schema_version {} is not supported (this build reads {LABEL_SCHEMA_VERSION})",
                    self.schema_version
                ),
            ));
        }
        if !crate::site::valid_name(&self.sheet.id) {
            return Err(LabelError::invalid(
                path,
                format!("sheet id {:?} is not a valid id", self.sheet.id),
            ));
        }
        if self.sheet.width == 0 || self.sheet.height == 0 {
            return Err(LabelError::invalid(path, "sheet size is zero"));
        }
        let mut ids = HashSet::new();
        for s in &self.symbols {
            if s.id.is_empty() || !ids.insert(s.id.as_str()) {
                return Err(LabelError::invalid(
                    path,
                    format!(
                        "symbol id {:?} is empty or used twice; give each symbol its own id",
                        s.id
                    ),
                ));
            }
        }
        let mut ids = HashSet::new();
        for r in &self.ignore {
            if !ids.insert(r.id.as_str()) {
                return Err(LabelError::invalid(
                    path,
                    format!("ignore region id {:?} is used twice", r.id),
                ));
            }
            if !r.bbox.is_finite() || r.bbox.w <= 0.0 || r.bbox.h <= 0.0 {
                return Err(LabelError::invalid(
                    path,
                    format!("ignore region {:?} has a non-finite or empty box", r.id),
                ));
            }
        }
        Ok(())
    }

    /// Strict checks before the labels are used for crops or evaluation: every
    /// symbol that is not rejected has a finite, positive box inside the sheet and a
    /// class from the site. The first problem is returned; `labels check` lists all.
    pub fn check_against(&self, path: &Path, classes: &[String]) -> Result<()> {
        self.check_structure(path)?;
        for s in self
            .symbols
            .iter()
            .filter(|s| s.state != ReviewState::Rejected)
        {
            let b = &s.bbox;
            let problem = if !b.is_finite() {
                Some("has a non-finite coordinate".to_string())
            } else if b.w <= 0.0 || b.h <= 0.0 {
                Some(format!("has a non-positive size {} x {}", b.w, b.h))
            } else if !b.inside_sheet(self.sheet.width, self.sheet.height) {
                Some(format!(
                    "box ({}, {}, {}, {}) lies partly outside the {} x {} sheet",
                    b.x, b.y, b.w, b.h, self.sheet.width, self.sheet.height
                ))
            } else if !classes.contains(&s.class) {
                Some(format!(
                    "has class {:?}, which site.toml does not define (known: {})",
                    s.class,
                    classes.join(", ")
                ))
            } else {
                None
            };
            if let Some(p) = problem {
                return Err(LabelError::invalid(
                    path,
                    format!(
                        "symbol {}: {p}; fix it or run `symtrust labels check` for all findings",
                        s.id
                    ),
                ));
            }
        }
        Ok(())
    }
}

/// Parses a label document from text and checks its structure.
pub fn parse_document(text: &str, path: &Path) -> Result<LabelDocument> {
    let doc: LabelDocument = serde_json::from_str(text).map_err(|e| LabelError::json(path, &e))?;
    doc.check_structure(path)?;
    Ok(doc)
}

/// Reads a label document and checks its structure.
pub fn read_document(path: &Path) -> Result<LabelDocument> {
    let text = std::fs::read_to_string(path).map_err(|e| LabelError::io(path, e))?;
    parse_document(&text, path)
}

/// Serialises a document as the pretty JSON stored on disk.
pub fn render_document(doc: &LabelDocument) -> Vec<u8> {
    let mut v = serde_json::to_vec_pretty(doc).expect("label documents always serialise");
    v.push(b'\n');
    v
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// A registered 1000 x 800 sheet at 200 dpi, for tests.
    pub(crate) fn sample_sheet(id: &str) -> SheetRecord {
        SheetRecord {
            id: id.into(),
            file: format!("sheets/{id}.png"),
            sha256: "0".repeat(64),
            source_width: 1000,
            source_height: 800,
            source_dpi: 200.0,
            dpi_source: DpiSource::FileMetadata,
            width: 1000,
            height: 800,
            dpi: 200.0,
        }
    }

    pub(crate) fn sample_doc() -> LabelDocument {
        let mut doc = LabelDocument::new(sample_sheet("s1"));
        doc.symbols.push(Symbol {
            id: "s0001".into(),
            class: "pump".into(),
            bbox: BBox::new(100.0, 100.0, 80.0, 80.0),
            state: ReviewState::Accepted,
            origin: Origin::Manual,
            by: "tester".into(),
            at: "2026-12-01T00:00:00Z".into(),
        });
        doc
    }

    #[test]
    fn round_trips_through_json() {
        let doc = sample_doc();
        let text = String::from_utf8(render_document(&doc)).unwrap();
        assert_eq!(parse_document(&text, Path::new("x.json")).unwrap(), doc);
    }

    #[test]
    fn truncated_json_names_file_and_line() {
        let text = String::from_utf8(render_document(&sample_doc())).unwrap();
        let cut = &text[..text.len() / 2];
        let msg = parse_document(cut, Path::new("labels/s1.json"))
            .unwrap_err()
            .to_string();
        assert!(msg.starts_with("labels/s1.json:"), "{msg}");
    }

    #[test]
    fn unknown_class_and_outside_box_are_refused() {
        let classes = vec!["pump".to_string()];
        let mut doc = sample_doc();
        assert!(doc.check_against(Path::new("d.json"), &classes).is_ok());
        doc.symbols[0].class = "valve".into();
        let msg = doc
            .check_against(Path::new("d.json"), &classes)
            .unwrap_err()
            .to_string();
        assert!(msg.contains("s0001") && msg.contains("valve"), "{msg}");
        let mut doc = sample_doc();
        doc.symbols[0].bbox.x = 950.0;
        let msg = doc
            .check_against(Path::new("d.json"), &classes)
            .unwrap_err()
            .to_string();
        assert!(msg.contains("outside"), "{msg}");
    }

    #[test]
    fn duplicate_ids_are_refused() {
        let mut doc = sample_doc();
        doc.symbols.push(doc.symbols[0].clone());
        assert!(doc.check_structure(Path::new("d.json")).is_err());
    }

    proptest::proptest! {
        /// Any truncation or byte corruption of a valid document is either read
        /// correctly or refused with the file named; it never panics.
        #[test]
        fn damaged_documents_never_panic(cut in 0usize..2000, flips in proptest::collection::vec((0usize..2000, 0u8..=255), 0..4)) {
            let mut bytes = render_document(&sample_doc());
            for (at, b) in flips {
                let n = bytes.len();
                bytes[at % n] = b;
            }
            bytes.truncate(cut.min(bytes.len()));
            let text = String::from_utf8_lossy(&bytes);
            if let Err(e) = parse_document(&text, Path::new("labels/s1.json")) {
                proptest::prop_assert!(e.to_string().starts_with("labels/s1.json"));
            }
        }
    }

    #[test]
    fn next_id_skips_used() {
        let doc = sample_doc();
        assert_eq!(doc.next_symbol_id(), "s0002");
    }
}
