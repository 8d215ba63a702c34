//! COCO-format detection JSON, as an open interchange format.
//!
//! The layout follows the COCO dataset's published data format for object
//! detection (cocodataset.org, "Data format" page, object detection; recalled
//! from memory, and an export of the synthetic plant loads and evaluates in
//! pycocotools 2.0.8, checked once by hand):
//! `images` (id, file_name, width, height), `annotations` (id, image_id,
//! category_id, `bbox` as `[x, y, width, height]` from the top-left corner in
//! pixels, area, iscrowd) and `categories` (id, name). Ids are ours: images are
//! numbered from 1 in sheet order, annotations from 1 in (sheet, symbol id) order,
//! categories from 1 in the order of `site.toml` (then, by name, any class a
//! label still uses that `site.toml` no longer defines).
//!
//! Each annotation also carries an object of our own, `"symtrust": {"symbol":
//! <id>, "state": <review state>}`, which other tools ignore and which makes the
//! round trip lossless. An annotation without it (a file from another tool)
//! imports as a draft with a fresh id.
//!
//! The pixel frame is the sheet at the site's canonical resolution (the frame of
//! every label box): `width` and `height` are the canonical size, which differs
//! from the image file's own size when the scan had another resolution.

use super::{Location, Row};
use crate::document::{LabelDocument, ReviewState};
use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::path::Path;

/// The `images` entry.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CocoImage {
    /// Image id.
    pub id: u64,
    /// The sheet file, relative to the site root.
    pub file_name: String,
    /// Width in canonical pixels.
    pub width: u32,
    /// Height in canonical pixels.
    pub height: u32,
}

/// Our own per-annotation object: the symbol id and its review state.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SymtrustExtra {
    /// Symbol id within its sheet.
    pub symbol: String,
    /// Review state (`draft`, `accepted`, `rejected`).
    pub state: String,
}

/// The `annotations` entry.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CocoAnnotation {
    /// Annotation id.
    pub id: u64,
    /// The image it belongs to.
    pub image_id: u64,
    /// Its category.
    pub category_id: u64,
    /// `[x, y, width, height]` in pixels.
    pub bbox: Vec<f64>,
    /// `width * height`.
    #[serde(default)]
    pub area: f64,
    /// 0 for a single object (crowd regions are not supported).
    #[serde(default)]
    pub iscrowd: u8,
    /// Symbol id and review state, when written by symtrust.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub symtrust: Option<SymtrustExtra>,
}

/// The `categories` entry.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CocoCategory {
    /// Category id.
    pub id: u64,
    /// Class name.
    pub name: String,
}

/// A whole COCO-format file (other top-level keys are ignored on reading).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CocoFile {
    /// Free-form description of the file (read and ignored on import).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub info: Option<serde_json::Value>,
    /// The sheets.
    pub images: Vec<CocoImage>,
    /// The symbols.
    pub annotations: Vec<CocoAnnotation>,
    /// The classes.
    pub categories: Vec<CocoCategory>,
}

/// The COCO file of these documents (pretty JSON, trailing newline).
pub fn build(docs: &[LabelDocument], classes: &[String]) -> CocoFile {
    let mut docs: Vec<&LabelDocument> = docs.iter().collect();
    docs.sort_by(|a, b| a.sheet.id.cmp(&b.sheet.id));
    // Site classes first, in site order; a class that site.toml no longer defines
    // (`labels check` reports it) follows in name order, so the file stays valid.
    let mut names: Vec<String> = classes.to_vec();
    let mut strays: Vec<&str> = docs
        .iter()
        .flat_map(|d| d.symbols.iter().map(|s| s.class.as_str()))
        .filter(|c| !classes.iter().any(|k| k == c))
        .collect();
    strays.sort_unstable();
    strays.dedup();
    names.extend(strays.into_iter().map(str::to_string));
    let category: HashMap<String, u64> = names
        .iter()
        .enumerate()
        .map(|(i, c)| (c.clone(), i as u64 + 1))
        .collect();
    let mut images = Vec::new();
    let mut annotations = Vec::new();
    for (i, doc) in docs.iter().enumerate() {
        let image_id = i as u64 + 1;
        images.push(CocoImage {
            id: image_id,
            file_name: doc.sheet.file.clone(),
            width: doc.sheet.width,
            height: doc.sheet.height,
        });
        let mut symbols: Vec<_> = doc.symbols.iter().collect();
        symbols.sort_by(|a, b| a.id.cmp(&b.id));
        for s in symbols {
            let b = &s.bbox;
            annotations.push(CocoAnnotation {
                id: annotations.len() as u64 + 1,
                image_id,
                category_id: category[&s.class],
                bbox: vec![b.x, b.y, b.w, b.h],
                area: b.area(),
                iscrowd: 0,
                symtrust: Some(SymtrustExtra {
                    symbol: s.id.clone(),
                    state: s.state.as_str().to_string(),
                }),
            });
        }
    }
    let categories = names
        .iter()
        .enumerate()
        .map(|(i, c)| CocoCategory {
            id: i as u64 + 1,
            name: c.clone(),
        })
        .collect();
    CocoFile {
        info: None,
        images,
        annotations,
        categories,
    }
}

/// The bytes of the COCO export of these documents.
pub fn render(docs: &[LabelDocument], classes: &[String], site_name: &str) -> Vec<u8> {
    let mut file = build(docs, classes);
    file.info = Some(serde_json::json!({
        "description": format!("symtrust label export of site {site_name}"),
    }));
    let mut bytes = serde_json::to_vec_pretty(&file).expect("COCO files always serialise");
    bytes.push(b'\n');
    bytes
}

/// A row read from a COCO file, before it is matched to a registered sheet.
#[derive(Debug, Clone, PartialEq)]
pub struct CocoRow {
    /// Where it is in the file.
    pub at: Location,
    /// `file_name` of its image.
    pub file_name: String,
    /// Width and height of its image.
    pub frame: (u32, u32),
    /// The row, with `sheet` still empty.
    pub row: Row,
}

/// Parses COCO-format JSON; `path` names the file in errors (JSON errors carry
/// line and column, others the annotation index).
pub fn parse(path: &Path, text: &str) -> Result<Vec<CocoRow>> {
    let file: CocoFile = serde_json::from_str(text).map_err(|e| LabelError::json(path, &e))?;
    let mut images = HashMap::new();
    for (i, image) in file.images.iter().enumerate() {
        if images.insert(image.id, image).is_some() {
            return Err(LabelError::invalid(
                path,
                format!("images[{i}]: image id {} is used twice", image.id),
            ));
        }
    }
    let mut categories = HashMap::new();
    for (i, c) in file.categories.iter().enumerate() {
        if categories.insert(c.id, c.name.as_str()).is_some() {
            return Err(LabelError::invalid(
                path,
                format!("categories[{i}]: category id {} is used twice", c.id),
            ));
        }
    }
    let mut rows = Vec::new();
    for (i, a) in file.annotations.iter().enumerate() {
        let at = Location::Annotation(i);
        let Some(image) = images.get(&a.image_id) else {
            return Err(at.error(path, format!("image_id {} is not in images", a.image_id)));
        };
        let Some(class) = categories.get(&a.category_id) else {
            return Err(at.error(
                path,
                format!("category_id {} is not in categories", a.category_id),
            ));
        };
        if a.iscrowd != 0 {
            return Err(at.error(
                path,
                "iscrowd = 1 (a crowd region) is not supported; label each symbol as its own annotation",
            ));
        }
        let [x, y, w, h] = a.bbox[..] else {
            return Err(at.error(
                path,
                format!(
                    "bbox has {} numbers; it must be [x, y, width, height]",
                    a.bbox.len()
                ),
            ));
        };
        let (id, state) = match &a.symtrust {
            Some(extra) => {
                let state = ReviewState::parse(&extra.state).ok_or_else(|| {
                    at.error(
                        path,
                        format!(
                            "symtrust.state = {:?} must be draft, accepted or rejected",
                            extra.state
                        ),
                    )
                })?;
                (extra.symbol.trim().to_string(), state)
            }
            None => (String::new(), ReviewState::Draft),
        };
        rows.push(CocoRow {
            at,
            file_name: image.file_name.clone(),
            frame: (image.width, image.height),
            row: Row {
                sheet: String::new(),
                id,
                class: class.to_string(),
                bbox: BBox::new(x, y, w, h),
                state,
            },
        });
    }
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::tests::sample_doc;

    fn classes() -> Vec<String> {
        vec!["valve".into(), "pump".into()]
    }

    #[test]
    fn export_follows_the_coco_layout() {
        let mut doc = sample_doc();
        doc.symbols[0].bbox = BBox::new(10.0, 20.0, 30.0, 40.0);
        let v: serde_json::Value =
            serde_json::from_slice(&render(&[doc], &classes(), "north")).unwrap();
        // COCO data format (cocodataset.org, from memory): bbox is [x, y, width,
        // height] from the top-left corner, area in square pixels; ids from 1 are ours.
        let a = &v["annotations"][0];
        assert_eq!(a["bbox"], serde_json::json!([10.0, 20.0, 30.0, 40.0]));
        assert_eq!(a["area"], 1200.0);
        assert_eq!(a["iscrowd"], 0);
        assert_eq!(a["image_id"], 1);
        assert_eq!(a["category_id"], 2, "pump is the second class of site.toml");
        assert_eq!(a["symtrust"]["symbol"], "s0001");
        assert_eq!(v["images"][0]["file_name"], "sheets/s1.png");
        assert_eq!(v["images"][0]["width"], 1000);
        assert_eq!(
            v["categories"][0],
            serde_json::json!({"id": 1, "name": "valve"})
        );
    }

    #[test]
    fn a_class_missing_from_the_site_gets_its_own_category() {
        let mut doc = sample_doc();
        doc.symbols[0].class = "old_pump".into();
        let file = build(&[doc], &classes());
        let names: Vec<&str> = file.categories.iter().map(|c| c.name.as_str()).collect();
        assert_eq!(names, vec!["valve", "pump", "old_pump"]);
        assert_eq!(file.annotations[0].category_id, 3);
    }

    #[test]
    fn parse_reads_back_what_build_wrote() {
        let doc = sample_doc();
        let text = String::from_utf8(render(std::slice::from_ref(&doc), &classes(), "n")).unwrap();
        let rows = parse(Path::new("c.json"), &text).unwrap();
        assert_eq!(rows.len(), 1);
        let r = &rows[0];
        assert_eq!(r.file_name, "sheets/s1.png");
        assert_eq!(r.frame, (1000, 800));
        assert_eq!(r.row.id, "s0001");
        assert_eq!(r.row.class, "pump");
        assert_eq!(r.row.bbox, doc.symbols[0].bbox);
        assert_eq!(r.row.state, ReviewState::Accepted);
    }

    #[test]
    fn foreign_annotation_imports_as_draft_without_id() {
        let text = r#"{"info": {}, "licenses": [],
            "images": [{"id": 7, "file_name": "fp-1.png", "width": 100, "height": 90}],
            "annotations": [{"id": 3, "image_id": 7, "category_id": 1, "bbox": [1, 2, 3, 4],
                             "area": 12, "iscrowd": 0, "segmentation": []}],
            "categories": [{"id": 1, "name": "pump", "supercategory": "equipment"}]}"#;
        let rows = parse(Path::new("c.json"), text).unwrap();
        assert_eq!(rows[0].row.id, "");
        assert_eq!(rows[0].row.state, ReviewState::Draft);
        assert_eq!(rows[0].row.bbox, BBox::new(1.0, 2.0, 3.0, 4.0));
    }

    #[test]
    fn bad_annotations_name_their_index() {
        let base = |ann: &str| {
            format!(
                r#"{{"images": [{{"id": 1, "file_name": "a.png", "width": 10, "height": 10}}],
                "categories": [{{"id": 1, "name": "pump"}}], "annotations": [
                {{"id": 1, "image_id": 1, "category_id": 1, "bbox": [1, 1, 2, 2]}}, {ann}]}}"#
            )
        };
        for (ann, needle) in [
            (
                r#"{"id": 2, "image_id": 5, "category_id": 1, "bbox": [1, 1, 2, 2]}"#,
                "image_id 5",
            ),
            (
                r#"{"id": 2, "image_id": 1, "category_id": 9, "bbox": [1, 1, 2, 2]}"#,
                "category_id 9",
            ),
            (
                r#"{"id": 2, "image_id": 1, "category_id": 1, "bbox": [1, 1, 2]}"#,
                "3 numbers",
            ),
            (
                r#"{"id": 2, "image_id": 1, "category_id": 1, "bbox": [1, 1, 2, 2], "iscrowd": 1}"#,
                "crowd",
            ),
            (
                r#"{"id": 2, "image_id": 1, "category_id": 1, "bbox": [1, 1, 2, 2], "symtrust": {"symbol": "a", "state": "ok"}}"#,
                "symtrust.state",
            ),
        ] {
            let msg = parse(Path::new("in/c.json"), &base(ann))
                .unwrap_err()
                .to_string();
            assert!(
                msg.starts_with("in/c.json: annotations[1]:") && msg.contains(needle),
                "{msg}"
            );
        }
    }

    #[test]
    fn every_truncation_is_an_error_with_a_position() {
        let text = String::from_utf8(render(&[sample_doc()], &classes(), "n")).unwrap();
        // The closing brace is the last byte before the newline: every shorter cut
        // is incomplete JSON.
        for cut in 0..text.trim_end().len() {
            let err = parse(Path::new("c.json"), &text[..cut]).unwrap_err();
            assert!(matches!(err, LabelError::Json { .. }), "cut {cut}: {err}");
        }
    }

    proptest::proptest! {
        #[test]
        fn damaged_files_parse_or_name_the_file(flips in proptest::collection::vec((0usize..2000, proptest::prelude::any::<u8>()), 1..8)) {
            let mut bytes = render(&[sample_doc()], &classes(), "n");
            for (at, b) in flips {
                let n = bytes.len();
                bytes[at % n] = b;
            }
            if let Ok(text) = std::str::from_utf8(&bytes)
                && let Err(e) = parse(Path::new("c.json"), text)
            {
                proptest::prop_assert!(e.to_string().starts_with("c.json:"), "{}", e);
            }
        }
    }

    #[test]
    fn truncated_json_names_line_and_column() {
        let text = String::from_utf8(render(&[sample_doc()], &classes(), "n")).unwrap();
        let cut = &text[..text.len() * 2 / 3];
        let err = parse(Path::new("c.json"), cut).unwrap_err();
        assert!(
            matches!(err, LabelError::Json { line, .. } if line > 1),
            "{err}"
        );
        assert!(err.to_string().starts_with("c.json:"), "{err}");
    }
}
