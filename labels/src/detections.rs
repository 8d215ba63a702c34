//! The detections file: what `symtrust detect` writes and `crops build
//! --hard-negatives` reads.
//!
//! CSV, one row per detection, header `sheet,class,score,x,y,w,h` (box in pixels at
//! the site's canonical resolution, as in [`crate::geometry`]); or JSON, an object
//! `{"schema_version": 1, "model": "<id or null>", "detections": [{...}, ...]}`
//! with the same fields. The format is chosen by the file extension (`.csv` or
//! `.json`).

use crate::crops::library::csv_error;
use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Version of the JSON detections format.
pub const DETECTIONS_SCHEMA_VERSION: u32 = 1;

/// One detected symbol.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Detection {
    /// Sheet id.
    pub sheet: String,
    /// Predicted class name.
    pub class: String,
    /// Score in `[0, 1]` (higher is more confident).
    pub score: f64,
    /// Left edge in pixels.
    pub x: f64,
    /// Top edge in pixels.
    pub y: f64,
    /// Width in pixels.
    pub w: f64,
    /// Height in pixels.
    pub h: f64,
}

impl Detection {
    /// The detection's box.
    pub fn bbox(&self) -> BBox {
        BBox::new(self.x, self.y, self.w, self.h)
    }
}

/// A detections file as a whole.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DetectionSet {
    /// Format version ([`DETECTIONS_SCHEMA_VERSION`]).
    pub schema_version: u32,
    /// Id of the model that produced them, when known.
    pub model: Option<String>,
    /// The detections.
    pub detections: Vec<Detection>,
}

fn check(path: &Path, line: u64, d: &Detection) -> Result<()> {
    let bad = |message: String| {
        Err(LabelError::Csv {
            path: path.to_path_buf(),
            line,
            message,
        })
    };
    if !d.bbox().is_finite() || !d.score.is_finite() {
        return bad(format!(
            "detection on sheet {:?} has a non-finite number",
            d.sheet
        ));
    }
    if d.w <= 0.0 || d.h <= 0.0 {
        return bad(format!(
            "detection on sheet {:?} has a non-positive size {}x{}",
            d.sheet, d.w, d.h
        ));
    }
    if !(0.0..=1.0).contains(&d.score) {
        return bad(format!("score {} is outside [0, 1]", d.score));
    }
    Ok(())
}

/// Reads a detections file (CSV or JSON by extension), validating every row.
pub fn read_detections(path: &Path) -> Result<DetectionSet> {
    match path.extension().and_then(|e| e.to_str()) {
        Some("csv") => {
            let mut reader = csv::Reader::from_path(path).map_err(|e| csv_error(path, &e))?;
            let mut detections = Vec::new();
            for row in reader.deserialize() {
                let d: Detection = row.map_err(|e| csv_error(path, &e))?;
                check(path, detections.len() as u64 + 2, &d)?;
                detections.push(d);
            }
            Ok(DetectionSet {
                schema_version: DETECTIONS_SCHEMA_VERSION,
                model: None,
                detections,
            })
        }
        Some("json") => {
            let text = std::fs::read_to_string(path).map_err(|e| LabelError::io(path, e))?;
            let set: DetectionSet =
                serde_json::from_str(&text).map_err(|e| LabelError::json(path, &e))?;
            if set.schema_version != DETECTIONS_SCHEMA_VERSION {
                return Err(LabelError::invalid(
                    path,
                    format!(
                        "detections schema version {} is not the supported {DETECTIONS_SCHEMA_VERSION}",
                        set.schema_version
                    ),
                ));
            }
            for (i, d) in set.detections.iter().enumerate() {
                check(path, i as u64, d).map_err(|_| {
                    LabelError::invalid(
                        path,
                        format!(
                            "detection #{i} (sheet {:?}) has an invalid box or score",
                            d.sheet
                        ),
                    )
                })?;
            }
            Ok(set)
        }
        _ => Err(LabelError::invalid(
            path,
            "a detections file must end in .csv or .json",
        )),
    }
}

/// Writes a detections file (CSV or JSON by extension) atomically.
pub fn write_detections(path: &Path, set: &DetectionSet) -> Result<()> {
    let bytes = match path.extension().and_then(|e| e.to_str()) {
        Some("csv") => {
            let mut w = csv::Writer::from_writer(Vec::new());
            for d in &set.detections {
                w.serialize(d).map_err(|e| csv_error(path, &e))?;
            }
            if set.detections.is_empty() {
                w.write_record(["sheet", "class", "score", "x", "y", "w", "h"])
                    .map_err(|e| csv_error(path, &e))?;
            }
            w.into_inner()
                .map_err(|e| LabelError::invalid(path, e.to_string()))?
        }
        Some("json") => {
            let mut v = serde_json::to_vec_pretty(set).expect("detections serialise");
            v.push(b'\n');
            v
        }
        _ => {
            return Err(LabelError::invalid(
                path,
                "a detections file must end in .csv or .json",
            ));
        }
    };
    crate::atomic::write_atomic(path, &bytes)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> DetectionSet {
        DetectionSet {
            schema_version: DETECTIONS_SCHEMA_VERSION,
            model: Some("m1".into()),
            detections: vec![Detection {
                sheet: "s1".into(),
                class: "pump".into(),
                score: 0.75,
                x: 10.5,
                y: 20.0,
                w: 100.0,
                h: 100.0,
            }],
        }
    }

    #[test]
    fn csv_and_json_round_trip() {
        let dir = tempfile::tempdir().unwrap();
        for name in ["d.csv", "d.json"] {
            let p = dir.path().join(name);
            write_detections(&p, &sample()).unwrap();
            let back = read_detections(&p).unwrap();
            assert_eq!(back.detections, sample().detections, "{name}");
        }
    }

    #[test]
    fn bad_row_names_its_line() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("d.csv");
        std::fs::write(
            &p,
            "sheet,class,score,x,y,w,h\ns1,pump,0.5,1,2,3,4\ns1,pump,high,1,2,3,4\n",
        )
        .unwrap();
        let msg = read_detections(&p).unwrap_err().to_string();
        assert!(msg.contains("d.csv:3"), "{msg}");
    }
}
