//! Detections from another system as COCO-format results JSON: an array of
//! `{"image_id", "category_id", "bbox": [x, y, w, h], "score"}`.
//!
//! A results file names images and categories by number only, so it is read
//! together with a COCO-format index (a dataset file with `images` and
//! `categories`, such as the one `symtrust labels export --format coco`
//! writes): an image's `file_name` names the sheet (the sheet file relative to
//! the site, or its file name, or its stem as the sheet id) and a category's
//! `name` names the class.

use crate::detections::{DETECTIONS_SCHEMA_VERSION, Detection, DetectionSet};
use crate::document::SheetRecord;
use crate::error::{LabelError, Result};
use crate::interchange::coco::CocoFile;
use serde::Deserialize;
use std::collections::HashMap;
use std::path::Path;

/// One entry of a COCO-format results file.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct CocoResult {
    /// Image id (from the index).
    pub image_id: u64,
    /// Category id (from the index).
    pub category_id: u64,
    /// `[x, y, width, height]` in pixels.
    pub bbox: Vec<f64>,
    /// Confidence in `[0, 1]`.
    pub score: f64,
}

/// The sheet an index image names, if any of `sheets` fits.
fn sheet_of<'a>(file_name: &str, sheets: &'a [SheetRecord]) -> Option<&'a SheetRecord> {
    let base = Path::new(file_name);
    let name = base.file_name().and_then(|n| n.to_str());
    let stem = base.file_stem().and_then(|n| n.to_str());
    sheets.iter().find(|s| s.file == file_name).or_else(|| {
        sheets.iter().find(|s| {
            let own = Path::new(&s.file);
            name.is_some() && own.file_name().and_then(|n| n.to_str()) == name
                || stem == Some(s.id.as_str())
        })
    })
}

/// Reads COCO-format results `results` with the index `index`, naming sheets
/// from `sheets` and checking classes against `classes`.
pub fn read_coco_results(
    results: &Path,
    index: &Path,
    sheets: &[SheetRecord],
    classes: &[String],
) -> Result<DetectionSet> {
    let text = std::fs::read_to_string(index).map_err(|e| LabelError::io(index, e))?;
    let index_file: CocoFile =
        serde_json::from_str(&text).map_err(|e| LabelError::json(index, &e))?;
    let mut images = HashMap::new();
    for (i, img) in index_file.images.iter().enumerate() {
        let Some(sheet) = sheet_of(&img.file_name, sheets) else {
            return Err(LabelError::invalid(
                index,
                format!(
                    "images[{i}]: file_name {:?} names no registered sheet of this site",
                    img.file_name
                ),
            ));
        };
        if images.insert(img.id, sheet.id.clone()).is_some() {
            return Err(LabelError::invalid(
                index,
                format!("images[{i}]: image id {} is used twice", img.id),
            ));
        }
    }
    let mut categories = HashMap::new();
    for (i, c) in index_file.categories.iter().enumerate() {
        if !classes.contains(&c.name) {
            return Err(LabelError::invalid(
                index,
                format!(
                    "categories[{i}]: {:?} is not one of the site's classes ({})",
                    c.name,
                    classes.join(", ")
                ),
            ));
        }
        if categories.insert(c.id, c.name.clone()).is_some() {
            return Err(LabelError::invalid(
                index,
                format!("categories[{i}]: category id {} is used twice", c.id),
            ));
        }
    }
    let text = std::fs::read_to_string(results).map_err(|e| LabelError::io(results, e))?;
    let rows: Vec<CocoResult> =
        serde_json::from_str(&text).map_err(|e| LabelError::json(results, &e))?;
    let mut detections = Vec::with_capacity(rows.len());
    for (i, r) in rows.iter().enumerate() {
        let bad = |m: String| LabelError::invalid(results, format!("result #{i}: {m}"));
        let sheet = images
            .get(&r.image_id)
            .ok_or_else(|| bad(format!("image_id {} is not in the index", r.image_id)))?;
        let class = categories
            .get(&r.category_id)
            .ok_or_else(|| bad(format!("category_id {} is not in the index", r.category_id)))?;
        let [x, y, w, h] = r.bbox[..] else {
            return Err(bad(format!(
                "bbox must have 4 numbers, has {}",
                r.bbox.len()
            )));
        };
        if ![x, y, w, h, r.score].iter().all(|v| v.is_finite()) || w <= 0.0 || h <= 0.0 {
            return Err(bad(
                "bbox and score must be finite numbers with positive width and height".into(),
            ));
        }
        if !(0.0..=1.0).contains(&r.score) {
            return Err(bad(format!("score {} is outside [0, 1]", r.score)));
        }
        detections.push(Detection {
            sheet: sheet.clone(),
            class: class.clone(),
            score: r.score,
            x,
            y,
            w,
            h,
        });
    }
    Ok(DetectionSet {
        schema_version: DETECTIONS_SCHEMA_VERSION,
        model: None,
        detections,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::tests::sample_sheet;

    fn write(dir: &Path, name: &str, text: &str) -> std::path::PathBuf {
        let p = dir.join(name);
        std::fs::write(&p, text).unwrap();
        p
    }

    #[test]
    fn maps_ids_to_sheets_and_classes() {
        let dir = tempfile::tempdir().unwrap();
        let sheet = sample_sheet("fp-a-0001");
        let index = write(
            dir.path(),
            "index.json",
            &format!(
                r#"{{"images": [{{"id": 7, "file_name": "{}", "width": 10, "height": 10}}],
                    "annotations": [],
                    "categories": [{{"id": 3, "name": "pump"}}]}}"#,
                sheet.file
            ),
        );
        let results = write(
            dir.path(),
            "results.json",
            r#"[{"image_id": 7, "category_id": 3, "bbox": [1, 2, 30, 40], "score": 0.75}]"#,
        );
        let classes = vec!["pump".to_string()];
        let set =
            read_coco_results(&results, &index, std::slice::from_ref(&sheet), &classes).unwrap();
        assert_eq!(set.detections.len(), 1);
        let d = &set.detections[0];
        assert_eq!(
            (d.sheet.as_str(), d.class.as_str()),
            (sheet.id.as_str(), "pump")
        );
        assert_eq!((d.x, d.y, d.w, d.h, d.score), (1.0, 2.0, 30.0, 40.0, 0.75));

        let bad = write(
            dir.path(),
            "bad.json",
            r#"[{"image_id": 7, "category_id": 3, "bbox": [1, 2, 30, 40], "score": 1.5}]"#,
        );
        let err =
            read_coco_results(&bad, &index, std::slice::from_ref(&sheet), &classes).unwrap_err();
        assert!(err.to_string().contains("result #0: score 1.5"), "{err}");
        let unknown = write(
            dir.path(),
            "unknown.json",
            r#"[{"image_id": 8, "category_id": 3, "bbox": [1, 2, 30, 40], "score": 0.5}]"#,
        );
        let err = read_coco_results(&unknown, &index, &[sheet], &classes).unwrap_err();
        assert!(
            err.to_string().contains("image_id 8 is not in the index"),
            "{err}"
        );
    }
}
