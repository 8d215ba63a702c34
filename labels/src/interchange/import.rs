//! Importing labels from a CSV or COCO-format file into the site's documents.
//!
//! The whole file is read and validated first: every row must name a registered
//! sheet, a class of `site.toml`, a finite box and, unless rejected, a box of
//! positive size inside the sheet; a symbol id may appear once per sheet. The first
//! bad row fails the import (with its line or annotation index) and no document is
//! touched. Only then are the rows applied, per sheet:
//!
//! * a new id is added (origin "imported" from the file's name);
//! * an existing id with the same class, box and state is left unchanged;
//! * an existing id that differs is updated, unless the symbol on file is
//!   accepted: accepted labels are never overwritten, the row is skipped and
//!   reported;
//! * a row without an id matches an existing symbol of the same class and box
//!   (then the rules above apply), else it is added under a fresh id, so importing
//!   the same file twice adds nothing the second time.
//!
//! Each changed document is saved through [`LabelStore::save`] (atomic, refused
//! when someone saved the sheet meanwhile).

use super::coco::{self, CocoRow};
use super::{Format, Location, Row, csv_rows};
use crate::clock::{current_user, now_rfc3339};
use crate::document::{LabelDocument, Origin, ReviewState, Symbol};
use crate::error::{LabelError, Result};
use crate::site::Site;
use crate::store::LabelStore;
use serde::Serialize;
use std::collections::{BTreeMap, HashMap};
use std::path::Path;

/// A row that was not applied because it would overwrite an accepted label.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SkippedRow {
    /// Sheet id.
    pub sheet: String,
    /// Symbol id.
    pub id: String,
    /// Where the row is in the imported file.
    pub location: Location,
    /// What differs.
    pub reason: String,
}

/// What an import did.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ImportReport {
    /// The imported file.
    pub file: String,
    /// Its format.
    pub format: Format,
    /// Symbols added.
    pub added: usize,
    /// Symbols updated (they were not accepted).
    pub updated: usize,
    /// Rows identical to the symbol on file.
    pub unchanged: usize,
    /// Rows not applied because the symbol on file is accepted.
    pub skipped: Vec<SkippedRow>,
    /// Sheets whose document was saved.
    pub sheets_changed: Vec<String>,
}

/// Reads, validates and applies an interchange file to the site's documents.
pub fn import_file(site: &Site, format: Format, path: &Path) -> Result<ImportReport> {
    let bytes = std::fs::read(path).map_err(|e| LabelError::io(path, e))?;
    let store = LabelStore::new(site);
    let mut registry: BTreeMap<String, Result<LabelDocument>> = BTreeMap::new();
    for id in store.sheet_ids()? {
        let doc = store.load(&id);
        registry.insert(id, doc);
    }
    let rows = match format {
        Format::Csv => csv_rows::parse(path, &bytes)?,
        Format::Coco => {
            let text = std::str::from_utf8(&bytes).map_err(|e| {
                LabelError::invalid(
                    path,
                    format!("not UTF-8 text (byte {}): not a JSON file", e.valid_up_to()),
                )
            })?;
            resolve_coco(path, coco::parse(path, text)?, &registry)?
        }
    };
    let classes = site.config.class_names();
    let per_sheet = validate(path, rows, &registry, &classes)?;
    let source = path.file_name().map_or_else(
        || path.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    );
    let mut report = ImportReport {
        file: path.display().to_string(),
        format,
        added: 0,
        updated: 0,
        unchanged: 0,
        skipped: Vec::new(),
        sheets_changed: Vec::new(),
    };
    let who = current_user();
    let now = now_rfc3339();
    let mut changed = Vec::new();
    for (sheet, rows) in per_sheet {
        let Some(Ok(doc)) = registry.get(&sheet) else {
            unreachable!("validate only passes rows of readable registered sheets")
        };
        let mut doc = doc.clone();
        if apply(&mut doc, &rows, &source, &who, &now, &mut report) {
            changed.push(doc);
        }
    }
    for doc in changed {
        if let Err(e) = store.save(&doc, &who) {
            if report.sheets_changed.is_empty() {
                return Err(e);
            }
            return Err(LabelError::invalid(
                store.path(&doc.sheet.id),
                format!(
                    "{e}; the rows of sheets {} were imported before this failure: fix the problem and run the same import again (rows already in place count as unchanged)",
                    report.sheets_changed.join(", ")
                ),
            ));
        }
        report.sheets_changed.push(doc.sheet.id.clone());
    }
    Ok(report)
}

/// Finds the registered sheet of each COCO image: by the document's `sheet.file`,
/// else by the same file name in another folder, else by a file stem equal to a
/// sheet id. Checks the image's size against the sheet's canonical size.
fn resolve_coco(
    path: &Path,
    rows: Vec<CocoRow>,
    registry: &BTreeMap<String, Result<LabelDocument>>,
) -> Result<Vec<(Location, Row)>> {
    let docs: Vec<&LabelDocument> = registry.values().filter_map(|d| d.as_ref().ok()).collect();
    let base = |f: &str| f.rsplit(['/', '\\']).next().unwrap_or(f).to_string();
    let mut out = Vec::with_capacity(rows.len());
    for r in rows {
        let name = r.file_name.trim_start_matches("./");
        let by_base: Vec<&&LabelDocument> = docs
            .iter()
            .filter(|d| base(&d.sheet.file) == base(name))
            .collect();
        let stem = Path::new(&base(name))
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let sheet = if let Some(d) = docs.iter().find(|d| d.sheet.file == name) {
            d.sheet.id.clone()
        } else if let [d] = by_base[..] {
            d.sheet.id.clone()
        } else if registry.contains_key(&stem) {
            stem
        } else {
            return Err(r.at.error(
                path,
                format!(
                    "image {:?} is not a registered sheet; register it with `symtrust sheets add` first",
                    r.file_name
                ),
            ));
        };
        if let Some(Ok(d)) = registry.get(&sheet)
            && r.frame != (d.sheet.width, d.sheet.height)
        {
            return Err(r.at.error(
                path,
                format!(
                    "image {:?} is {} x {} but sheet {sheet} is {} x {} at the site's resolution; the boxes would land in the wrong place",
                    r.file_name, r.frame.0, r.frame.1, d.sheet.width, d.sheet.height
                ),
            ));
        }
        let mut row = r.row;
        row.sheet = sheet;
        out.push((r.at, row));
    }
    Ok(out)
}

/// Checks every row against the registry and the classes; groups them by sheet.
fn validate(
    path: &Path,
    rows: Vec<(Location, Row)>,
    registry: &BTreeMap<String, Result<LabelDocument>>,
    classes: &[String],
) -> Result<BTreeMap<String, Vec<(Location, Row)>>> {
    let mut seen: HashMap<(String, String), Location> = HashMap::new();
    let mut per_sheet: BTreeMap<String, Vec<(Location, Row)>> = BTreeMap::new();
    for (at, row) in rows {
        let doc = match registry.get(&row.sheet) {
            None => {
                return Err(at.error(
                    path,
                    format!(
                        "sheet {:?} is not registered; register it with `symtrust sheets add` first",
                        row.sheet
                    ),
                ));
            }
            Some(Err(e)) => {
                return Err(at.error(
                    path,
                    format!(
                        "the label document of sheet {} cannot be read ({e}); repair it first",
                        row.sheet
                    ),
                ));
            }
            Some(Ok(doc)) => doc,
        };
        if !classes.contains(&row.class) {
            return Err(at.error(
                path,
                format!(
                    "class {:?} is not defined in site.toml (known: {}); correct the class or add it to site.toml",
                    row.class,
                    classes.join(", ")
                ),
            ));
        }
        let b = &row.bbox;
        if !b.is_finite() {
            return Err(at.error(
                path,
                "the box has a non-finite number; give four finite numbers",
            ));
        }
        if row.state != ReviewState::Rejected {
            if b.w <= 0.0 || b.h <= 0.0 {
                return Err(at.error(
                    path,
                    format!(
                        "the box has a non-positive size {} x {}; fix its width and height",
                        b.w, b.h
                    ),
                ));
            }
            let (w, h) = (doc.sheet.width, doc.sheet.height);
            if !b.inside_sheet(w, h) {
                return Err(at.error(
                    path,
                    format!(
                        "the box ({}, {}, {}, {}) lies partly outside the {w} x {h} sheet {}; move or clip it to the sheet",
                        b.x, b.y, b.w, b.h, row.sheet
                    ),
                ));
            }
        }
        if !row.id.is_empty()
            && let Some(first) = seen.insert((row.sheet.clone(), row.id.clone()), at)
        {
            return Err(at.error(
                path,
                format!(
                    "symbol {} of sheet {} appears twice (first at {first}); give each symbol its own id",
                    row.id, row.sheet
                ),
            ));
        }
        per_sheet
            .entry(row.sheet.clone())
            .or_default()
            .push((at, row));
    }
    Ok(per_sheet)
}

/// Applies validated rows of one sheet to its document; true when it changed.
fn apply(
    doc: &mut LabelDocument,
    rows: &[(Location, Row)],
    source: &str,
    who: &str,
    now: &str,
    report: &mut ImportReport,
) -> bool {
    let mut changed = false;
    let with_id = rows.iter().filter(|(_, r)| !r.id.is_empty());
    let without_id = rows.iter().filter(|(_, r)| r.id.is_empty());
    for (at, row) in with_id.chain(without_id) {
        let target = if row.id.is_empty() {
            doc.symbols
                .iter()
                .position(|s| s.class == row.class && s.bbox == row.bbox)
        } else {
            doc.symbols.iter().position(|s| s.id == row.id)
        };
        let imported = |id: String| Symbol {
            id,
            class: row.class.clone(),
            bbox: row.bbox,
            state: row.state,
            origin: Origin::Imported {
                source: source.to_string(),
            },
            by: who.to_string(),
            at: now.to_string(),
        };
        match target {
            None => {
                let id = if row.id.is_empty() {
                    doc.next_symbol_id()
                } else {
                    row.id.clone()
                };
                doc.symbols.push(imported(id));
                report.added += 1;
                changed = true;
            }
            Some(i) => {
                let s = &doc.symbols[i];
                let mut diffs = Vec::new();
                if s.class != row.class {
                    diffs.push(format!("class {} -> {}", s.class, row.class));
                }
                if s.bbox != row.bbox {
                    let (a, b) = (&s.bbox, &row.bbox);
                    diffs.push(format!(
                        "box ({}, {}, {}, {}) -> ({}, {}, {}, {})",
                        a.x, a.y, a.w, a.h, b.x, b.y, b.w, b.h
                    ));
                }
                if s.state != row.state {
                    diffs.push(format!(
                        "state {} -> {}",
                        s.state.as_str(),
                        row.state.as_str()
                    ));
                }
                if diffs.is_empty() {
                    report.unchanged += 1;
                } else if s.state == ReviewState::Accepted {
                    report.skipped.push(SkippedRow {
                        sheet: doc.sheet.id.clone(),
                        id: s.id.clone(),
                        location: *at,
                        reason: format!(
                            "the accepted label would change ({}); edit it in the label document or review it instead",
                            diffs.join(", ")
                        ),
                    });
                } else {
                    let id = s.id.clone();
                    doc.symbols[i] = imported(id);
                    report.updated += 1;
                    changed = true;
                }
            }
        }
    }
    changed
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::tests::sample_doc;
    use crate::geometry::BBox;

    fn report() -> ImportReport {
        ImportReport {
            file: "x.csv".into(),
            format: Format::Csv,
            added: 0,
            updated: 0,
            unchanged: 0,
            skipped: Vec::new(),
            sheets_changed: Vec::new(),
        }
    }

    fn row(id: &str, class: &str, x: f64, state: ReviewState) -> (Location, Row) {
        (
            Location::Line(2),
            Row {
                sheet: "s1".into(),
                id: id.into(),
                class: class.into(),
                bbox: BBox::new(x, 100.0, 80.0, 80.0),
                state,
            },
        )
    }

    #[test]
    fn adds_updates_skips_and_leaves_unchanged() {
        // sample_doc: s0001, pump, (100, 100, 80, 80), accepted.
        let mut doc = sample_doc();
        doc.symbols.push(Symbol {
            id: "s0002".into(),
            state: ReviewState::Draft,
            ..doc.symbols[0].clone()
        });
        let original = doc.clone();
        let mut r = report();
        let rows = vec![
            row("s0001", "pump", 100.0, ReviewState::Accepted),
            row("s0002", "valve", 300.0, ReviewState::Accepted),
            row("s0009", "pump", 500.0, ReviewState::Draft),
        ];
        assert!(apply(&mut doc, &rows, "in.csv", "ben", "T", &mut r));
        assert_eq!(
            (r.added, r.updated, r.unchanged, r.skipped.len()),
            (1, 1, 1, 0)
        );
        assert_eq!(
            doc.symbols[0], original.symbols[0],
            "unchanged symbol untouched"
        );
        let s2 = doc.symbol("s0002").unwrap();
        assert_eq!(
            (s2.class.as_str(), s2.bbox.x, s2.state),
            ("valve", 300.0, ReviewState::Accepted)
        );
        assert_eq!(
            s2.origin,
            Origin::Imported {
                source: "in.csv".into()
            }
        );
        assert_eq!((s2.by.as_str(), s2.at.as_str()), ("ben", "T"));
        assert_eq!(doc.symbol("s0009").unwrap().bbox.x, 500.0);
    }

    #[test]
    fn accepted_labels_are_never_overwritten() {
        let mut doc = sample_doc();
        let original = doc.clone();
        let mut r = report();
        let rows = vec![row("s0001", "pump", 101.0, ReviewState::Rejected)];
        assert!(!apply(&mut doc, &rows, "in.csv", "ben", "T", &mut r));
        assert_eq!(doc, original);
        assert_eq!(r.skipped.len(), 1);
        let s = &r.skipped[0];
        assert_eq!(
            (s.sheet.as_str(), s.id.as_str(), s.location),
            ("s1", "s0001", Location::Line(2))
        );
        assert!(
            s.reason
                .contains("box (100, 100, 80, 80) -> (101, 100, 80, 80)"),
            "{}",
            s.reason
        );
        assert!(
            s.reason.contains("state accepted -> rejected"),
            "{}",
            s.reason
        );
    }

    #[test]
    fn rows_without_id_get_fresh_ids_once() {
        let mut doc = sample_doc();
        let mut r = report();
        let rows = vec![
            row("", "pump", 300.0, ReviewState::Draft),
            row("s0002", "pump", 500.0, ReviewState::Draft),
            row("", "pump", 700.0, ReviewState::Draft),
        ];
        assert!(apply(&mut doc, &rows, "in.csv", "ben", "T", &mut r));
        let ids: Vec<(&str, f64)> = doc
            .symbols
            .iter()
            .map(|s| (s.id.as_str(), s.bbox.x))
            .collect();
        assert_eq!(
            ids,
            vec![
                ("s0001", 100.0),
                ("s0002", 500.0),
                ("s0003", 300.0),
                ("s0004", 700.0)
            ]
        );
        // The same rows again change nothing.
        let mut r = report();
        assert!(!apply(&mut doc, &rows, "in.csv", "ben", "T", &mut r));
        assert_eq!((r.added, r.unchanged), (0, 3));
    }
}
