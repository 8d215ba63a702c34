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
    store.sheet_ids()?.iter().map(|id| store.load(id)).collect()
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::{Origin, Symbol};
    use crate::site::{ClassSpec, SiteConfig};
    use proptest::prelude::*;

    fn config() -> SiteConfig {
        let class = |name: &str| ClassSpec {
            name: name.into(),
            description: "d".into(),
            nominal_mm: 11.0,
            rotatable: false,
        };
        SiteConfig::new("interchange test", vec![class("pump"), class("valve")])
    }

    fn sheet(id: &str) -> LabelDocument {
        LabelDocument::new(crate::document::tests::sample_sheet(id))
    }

    /// A site whose sheets `fp-1` and `fp-2` are registered with these symbols.
    fn site_with(symbols: &[(usize, Symbol)]) -> (tempfile::TempDir, Site) {
        let dir = tempfile::tempdir().unwrap();
        let site = Site::create(dir.path(), config()).unwrap();
        let store = LabelStore::new(&site);
        for (k, id) in ["fp-1", "fp-2"].iter().enumerate() {
            let mut doc = sheet(id);
            doc.symbols = symbols
                .iter()
                .filter(|(s, _)| *s == k)
                .map(|(_, s)| s.clone())
                .collect();
            store.save(&doc, "tester").unwrap();
        }
        (dir, site)
    }

    fn symbol(id: &str, class: &str, bbox: BBox, state: ReviewState) -> Symbol {
        Symbol {
            id: id.into(),
            class: class.into(),
            bbox,
            state,
            origin: Origin::Manual,
            by: "tester".into(),
            at: "2026-12-01T00:00:00Z".into(),
        }
    }

    fn labels_bytes(site: &Site) -> Vec<Vec<u8>> {
        ["fp-1", "fp-2"]
            .iter()
            .map(|id| std::fs::read(site.label_path(id)).unwrap())
            .collect()
    }

    fn arb_symbols() -> impl Strategy<Value = Vec<(usize, Symbol)>> {
        let state = prop::sample::select(vec![
            ReviewState::Draft,
            ReviewState::Accepted,
            ReviewState::Rejected,
        ]);
        let one = (
            0usize..2,
            prop::sample::select(vec!["pump", "valve"]),
            0.0..900.0f64,
            0.0..700.0f64,
            1e-3..100.0f64,
            1e-3..100.0f64,
            state,
        );
        prop::collection::vec(one, 0..12).prop_map(|v| {
            v.into_iter()
                .enumerate()
                .map(|(n, (sheet, class, x, y, w, h, state))| {
                    (
                        sheet,
                        symbol(&format!("q{n:03}"), class, BBox::new(x, y, w, h), state),
                    )
                })
                .collect()
        })
    }

    fn round_trip(
        symbols: &[(usize, Symbol)],
        format: Format,
    ) -> (Vec<Row>, Vec<Row>, ImportReport) {
        let (_a_dir, a) = site_with(symbols);
        let out = a.root.join(match format {
            Format::Csv => "all.csv",
            Format::Coco => "all.json",
        });
        let summary = export(&a, format, &out).unwrap();
        assert_eq!(summary.symbols, symbols.len());
        let (_b_dir, b) = site_with(&[]);
        let report = import_file(&b, format, &out).unwrap();
        (
            rows_of(&load_all(&a).unwrap()),
            rows_of(&load_all(&b).unwrap()),
            report,
        )
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(24))]

        #[test]
        fn csv_round_trip_into_a_fresh_copy_is_lossless(symbols in arb_symbols()) {
            let (before, after, report) = round_trip(&symbols, Format::Csv);
            prop_assert_eq!(report.added, symbols.len());
            prop_assert_eq!(after, before);
        }

        #[test]
        fn coco_round_trip_into_a_fresh_copy_is_lossless(symbols in arb_symbols()) {
            let (before, after, report) = round_trip(&symbols, Format::Coco);
            prop_assert_eq!(report.added, symbols.len());
            prop_assert_eq!(after, before);
        }
    }

    fn sample() -> Vec<(usize, Symbol)> {
        vec![
            (
                0,
                symbol(
                    "s0001",
                    "pump",
                    BBox::new(10.5, 20.25, 80.0, 80.0),
                    ReviewState::Accepted,
                ),
            ),
            (
                0,
                symbol(
                    "s0002",
                    "valve",
                    BBox::new(300.0, 20.0, 60.0, 40.0),
                    ReviewState::Draft,
                ),
            ),
            (
                1,
                symbol(
                    "s0001",
                    "valve",
                    BBox::new(990.0, 790.0, 30.0, 30.0),
                    ReviewState::Rejected,
                ),
            ),
        ]
    }

    #[test]
    fn export_then_import_into_the_same_site_changes_nothing() {
        for (format, name) in [(Format::Csv, "x.csv"), (Format::Coco, "x.json")] {
            let (_dir, site) = site_with(&sample());
            let out = site.root.join(name);
            export(&site, format, &out).unwrap();
            let before = labels_bytes(&site);
            let report = import_file(&site, format, &out).unwrap();
            assert_eq!((report.added, report.updated, report.unchanged), (0, 0, 3));
            assert!(report.skipped.is_empty() && report.sheets_changed.is_empty());
            assert_eq!(labels_bytes(&site), before, "{format:?}");
        }
    }

    #[test]
    fn csv_export_is_sorted_by_sheet_then_id() {
        let (_dir, site) = site_with(&sample());
        let out = site.root.join("x.csv");
        export(&site, Format::Csv, &out).unwrap();
        assert_eq!(
            std::fs::read_to_string(&out).unwrap(),
            "sheet,id,class,x,y,w,h,state\n\
             fp-1,s0001,pump,10.5,20.25,80,80,accepted\n\
             fp-1,s0002,valve,300,20,60,40,draft\n\
             fp-2,s0001,valve,990,790,30,30,rejected\n"
        );
    }

    #[test]
    fn import_reports_skipped_accepted_labels() {
        let (_dir, site) = site_with(&sample());
        let file = site.root.join("in.csv");
        std::fs::write(
            &file,
            "sheet,id,class,x,y,w,h,state\n\
             fp-1,s0001,pump,11,20.25,80,80,accepted\n\
             fp-1,s0002,valve,300,20,60,40,accepted\n\
             fp-2,,pump,100,100,50,50,draft\n",
        )
        .unwrap();
        let report = import_file(&site, Format::Csv, &file).unwrap();
        assert_eq!((report.added, report.updated, report.unchanged), (1, 1, 0));
        assert_eq!(report.skipped.len(), 1);
        assert_eq!(report.skipped[0].location, Location::Line(2));
        assert_eq!(
            report.sheets_changed,
            vec!["fp-1".to_string(), "fp-2".to_string()]
        );
        let store = LabelStore::new(&site);
        let fp1 = store.load("fp-1").unwrap();
        assert_eq!(
            fp1.symbol("s0001").unwrap().bbox.x,
            10.5,
            "accepted label kept"
        );
        assert_eq!(fp1.symbol("s0002").unwrap().state, ReviewState::Accepted);
        let fp2 = store.load("fp-2").unwrap();
        let added = fp2.symbol("s0002").unwrap();
        assert_eq!(
            added.origin,
            Origin::Imported {
                source: "in.csv".into()
            }
        );
        assert_eq!(fp2.revision, 2);
    }

    /// Imports `text` and checks it fails with a message holding every needle
    /// and that no label document changed.
    fn refused(format: Format, name: &str, text: &str, needles: &[&str]) {
        let (_dir, site) = site_with(&sample());
        let file = site.root.join(name);
        std::fs::write(&file, text).unwrap();
        let before = labels_bytes(&site);
        let msg = import_file(&site, format, &file).unwrap_err().to_string();
        for needle in needles {
            assert!(msg.contains(needle), "{needle:?} not in {msg}");
        }
        assert_eq!(labels_bytes(&site), before, "a document changed: {msg}");
    }

    const HEAD: &str = "sheet,id,class,x,y,w,h,state\n";

    #[test]
    fn bad_csv_rows_are_refused_with_their_line_and_nothing_written() {
        let good = "fp-1,n1,pump,1,1,10,10,draft\n";
        refused(
            Format::Csv,
            "a.csv",
            &format!("{HEAD}{good}fp-7,n2,pump,1,1,10,10,draft\n"),
            &[
                "a.csv:3:",
                "sheet \"fp-7\" is not registered",
                "symtrust sheets add",
            ],
        );
        refused(
            Format::Csv,
            "b.csv",
            &format!("{HEAD}{good}fp-1,n2,pipe,1,1,10,10,draft\n"),
            &["b.csv:3:", "class \"pipe\"", "known: pump, valve"],
        );
        refused(
            Format::Csv,
            "c.csv",
            &format!("{HEAD}{good}fp-2,n2,pump,995,1,10,10,accepted\n"),
            &["c.csv:3:", "outside the 1000 x 800 sheet fp-2"],
        );
        refused(
            Format::Csv,
            "d.csv",
            &format!("{HEAD}{good}fp-1,n2,pump,1,1,0,10,draft\n"),
            &["d.csv:3:", "non-positive size"],
        );
        refused(
            Format::Csv,
            "e.csv",
            &format!("{HEAD}{good}{good}"),
            &["e.csv:3:", "appears twice (first at line 2)"],
        );
        // Truncated in the middle of the third row.
        refused(
            Format::Csv,
            "f.csv",
            &format!("{HEAD}{good}fp-1,n2,pump,1,1"),
            &["f.csv:3:", "truncated"],
        );
    }

    #[test]
    fn bad_coco_files_are_refused_and_nothing_written() {
        let (_dir, site) = site_with(&sample());
        let out = site.root.join("all.json");
        export(&site, Format::Coco, &out).unwrap();
        let text = std::fs::read_to_string(&out).unwrap();
        refused(
            Format::Coco,
            "t.json",
            &text[..text.len() / 2],
            &["t.json:", "EOF"],
        );
        let unknown = text.replace("sheets/fp-2.png", "sheets/fp-9.png");
        refused(
            Format::Coco,
            "u.json",
            &unknown,
            &[
                "u.json: annotations[2]:",
                "\"sheets/fp-9.png\" is not a registered sheet",
            ],
        );
        let outside = text.replace("\"width\": 1000", "\"width\": 500");
        refused(
            Format::Coco,
            "w.json",
            &outside,
            &["w.json: annotations[0]:", "500 x 800", "1000 x 800"],
        );
        let class = text.replace("\"name\": \"valve\"", "\"name\": \"gate\"");
        refused(
            Format::Coco,
            "c.json",
            &class,
            &[
                "c.json: annotations[1]:",
                "class \"gate\"",
                "known: pump, valve",
            ],
        );
    }

    #[test]
    fn coco_image_matches_a_sheet_by_bare_file_name() {
        let (_dir, site) = site_with(&sample());
        let file = site.root.join("other-tool.json");
        std::fs::write(
            &file,
            r#"{"images": [{"id": 4, "file_name": "fp-2.png", "width": 1000, "height": 800}],
                "annotations": [{"id": 1, "image_id": 4, "category_id": 2, "bbox": [5, 6, 40, 30], "area": 1200, "iscrowd": 0}],
                "categories": [{"id": 2, "name": "pump"}]}"#,
        )
        .unwrap();
        let report = import_file(&site, Format::Coco, &file).unwrap();
        assert_eq!(report.added, 1);
        let s = LabelStore::new(&site)
            .load("fp-2")
            .unwrap()
            .symbol("s0002")
            .cloned()
            .unwrap();
        assert_eq!(
            (s.class.as_str(), s.bbox, s.state),
            ("pump", BBox::new(5.0, 6.0, 40.0, 30.0), ReviewState::Draft)
        );
    }

    #[test]
    fn export_fails_on_a_broken_document_and_leaves_the_old_file() {
        let (_dir, site) = site_with(&sample());
        let out = site.root.join("x.csv");
        std::fs::write(&out, b"old").unwrap();
        std::fs::write(site.label_path("fp-2"), b"{ \"schema_version\": 1,").unwrap();
        let msg = export(&site, Format::Csv, &out).unwrap_err().to_string();
        assert!(msg.contains("fp-2.json"), "{msg}");
        assert_eq!(std::fs::read(&out).unwrap(), b"old");
    }
}
