//! The evaluation record: everything one `symtrust eval` run measured, with the
//! hashes of everything it read, as written to `metrics.json`.
//!
//! The record keeps its own inputs (ground truth and detections per sheet, in
//! [`EvaluationRecord::inputs`]), so any figure in it can be recomputed from
//! the file alone, and shard records can be merged into exactly the figures an
//! unsharded run gives ([`merge_inputs`]).

use crate::calibration::FittedCalibration;
use crate::compare::{McNemarResult, PairedApComparison, Verdict};
use crate::crop_eval::CropEvaluation;
use crate::error::{EvalError, Result};
use crate::match_log::MatchLog;
use crate::sheet_eval::{SheetEvalConfig, SheetEvaluation, SheetInput};
use serde::{Deserialize, Serialize};

/// Version of the `metrics.json` layout; bumped on any incompatible change.
pub const METRICS_SCHEMA_VERSION: u32 = 1;

/// File name of the record inside an evaluation folder.
pub const METRICS_FILE: &str = "metrics.json";

/// Who ran what, where and when.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunStamp {
    /// Version of symtrust.
    pub tool_version: String,
    /// Start time, RFC 3339 UTC.
    pub created: String,
    /// The exact command line, one argument per entry.
    pub command_line: Vec<String>,
    /// Host name of the machine.
    pub host: String,
    /// User who ran it.
    pub user: String,
    /// Worker threads.
    pub threads: usize,
    /// Wall-clock seconds of the whole evaluation.
    pub seconds: f64,
}

/// What produced the detections.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum DetectorInfo {
    /// A symtrust model folder, swept by this run.
    Model {
        /// Model id.
        id: String,
        /// The model folder, relative to the site root when inside it, else absolute.
        dir: String,
        /// SHA-256 of the weights file.
        weights_sha256: String,
        /// SHA-256 of `card.json`.
        card_sha256: String,
        /// Crop library the model was trained on.
        crop_library: String,
        /// SHA-256 of that library's `manifest.json`.
        crop_manifest_sha256: String,
    },
    /// A detections file from any system.
    File {
        /// Path as given on the command line.
        path: String,
        /// SHA-256 of the file.
        sha256: String,
        /// `csv`, `json` (ours) or `coco` (COCO-format results JSON).
        format: String,
        /// Model id recorded in the file, if any.
        model: Option<String>,
    },
}

impl DetectorInfo {
    /// A short name for statements and titles.
    pub fn label(&self) -> String {
        match self {
            Self::Model { id, .. } => format!("model {id}"),
            Self::File { path, .. } => format!("the detector of {path}"),
        }
    }
}

/// How a model's score maps were turned into detections.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DetectSettings {
    /// Smallest score kept.
    pub min_score: f64,
    /// IoU above which overlapping detections are suppressed.
    pub nms_iou: f64,
    /// Suppression across classes as well as within.
    pub nms_across_classes: bool,
    /// Cap on detections per sheet, if any (none by default).
    pub max_per_sheet: Option<usize>,
}

/// One held-out sheet as read: the hashes an auditor re-checks.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SheetStamp {
    /// Sheet id.
    pub sheet: String,
    /// Sheet file, relative to the site folder.
    pub file: String,
    /// SHA-256 of the sheet file.
    pub sheet_sha256: String,
    /// Label document, relative to the site folder.
    pub labels_file: String,
    /// SHA-256 of the label document.
    pub labels_sha256: String,
    /// Revision of the label document.
    pub labels_revision: u64,
    /// Width at the canonical resolution, pixels.
    pub width: u32,
    /// Height at the canonical resolution, pixels.
    pub height: u32,
    /// Window positions swept (model runs only).
    pub windows: Option<u64>,
    /// Of those, windows on blank paper given background without running the network.
    pub windows_skipped: Option<u64>,
    /// Ground-truth symbols whose centred window falls below the blank-paper
    /// threshold, i.e. that skipping alone could lose (model runs with
    /// skipping only; 0 is what an evaluation must show).
    #[serde(default)]
    pub truths_on_blank: Option<u64>,
}

/// One crop of the crop-level evaluation and the model's decision on it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CropDecision {
    /// Sheet id.
    pub sheet: String,
    /// Left edge of the window, sheet pixels.
    pub x: i64,
    /// Top edge of the window, sheet pixels.
    pub y: i64,
    /// True class (a site class or the background class).
    pub truth: String,
    /// Predicted class (arg-max).
    pub predicted: String,
    /// Probability per class, in model order.
    pub scores: Vec<f64>,
}

/// Crop-level evaluation on crops cut from the held-out sheets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CropLevel {
    /// Classes in model order (site classes, then background).
    pub classes: Vec<String>,
    /// The figures.
    pub evaluation: CropEvaluation,
    /// Every crop, in a fixed order (sheet, then position), so two models'
    /// decisions pair up for McNemar's test.
    pub crops: Vec<CropDecision>,
}

/// Shard of a sharded run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shard {
    /// 1-based index.
    pub index: u32,
    /// Number of shards.
    pub count: u32,
}

/// Everything in `metrics.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EvaluationRecord {
    /// [`METRICS_SCHEMA_VERSION`].
    pub schema_version: u32,
    /// The plain-language trust statement.
    pub trust_statement: String,
    /// The caution that goes with every figure.
    pub caution: String,
    /// Who ran it, how, where and when.
    pub stamp: RunStamp,
    /// What produced the detections.
    pub detector: DetectorInfo,
    /// Site classes, in site order.
    pub classes: Vec<String>,
    /// Held-out sheets as listed in the site configuration.
    pub held_out: Vec<String>,
    /// The evaluated sheets and their hashes.
    pub sheets: Vec<SheetStamp>,
    /// Detection settings (model runs only).
    pub detect_settings: Option<DetectSettings>,
    /// Sheet-level figures.
    pub sheet_level: SheetEvaluation,
    /// Crop-level figures (model runs only).
    pub crop_level: Option<CropLevel>,
    /// Score calibration fitted on validation sheets, when asked for.
    pub calibration_fit: Option<FittedCalibration>,
    /// The fate of every detection and symbol.
    pub matches: MatchLog,
    /// Ground truth and detections per sheet (outside nothing: ignore regions
    /// are applied by the evaluation), enough to recompute every figure.
    pub inputs: Vec<SheetInput>,
    /// The shard this record covers, when sharded.
    pub shard: Option<Shard>,
}

/// Version of the comparison file layout.
pub const COMPARISON_SCHEMA_VERSION: u32 = 1;

/// File name of a comparison record.
pub const COMPARISON_FILE: &str = "comparison.json";

/// The overall outcome of a comparison.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ComparisonOutcome {
    /// Not worse on any class, and the mAP difference interval lies above 0.
    Better,
    /// Not worse on any class beyond the margin.
    NotWorse,
    /// Worse beyond the margin on at least one class.
    Worse,
}

impl ComparisonOutcome {
    /// From a verdict and the mAP difference interval.
    pub fn of(verdict: &Verdict, ap: &PairedApComparison) -> Self {
        if !verdict.promote {
            Self::Worse
        } else if ap.map.difference.lower.is_some_and(|lo| lo > 0.0) {
            Self::Better
        } else {
            Self::NotWorse
        }
    }

    /// Plain word for messages.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Better => "better",
            Self::NotWorse => "not worse",
            Self::Worse => "worse",
        }
    }
}

/// A champion and a challenger compared on the same frozen held-out sheets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ComparisonRecord {
    /// [`COMPARISON_SCHEMA_VERSION`].
    pub schema_version: u32,
    /// One-paragraph summary in plain words.
    pub summary: String,
    /// Who ran it, how, where and when.
    pub stamp: RunStamp,
    /// The champion.
    pub champion: DetectorInfo,
    /// The challenger.
    pub challenger: DetectorInfo,
    /// The sheets both were evaluated on, with their hashes.
    pub sheets: Vec<SheetStamp>,
    /// Paired bootstrap of the AP difference per class and for the mAP.
    pub ap: PairedApComparison,
    /// McNemar's test on paired crop decisions (model runs only).
    pub mcnemar: Option<McNemarResult>,
    /// The per-class verdict under the margin.
    pub verdict: Verdict,
    /// Better, not worse, or worse.
    pub outcome: ComparisonOutcome,
}

/// The combined inputs of shard records, ready to evaluate again.
#[derive(Debug, Clone, PartialEq)]
pub struct MergedInputs {
    /// Sheets of all shards, in the order of the held-out list.
    pub inputs: Vec<SheetInput>,
    /// Their stamps, in the same order.
    pub sheets: Vec<SheetStamp>,
    /// Crop decisions of all shards (model runs), in sheet order.
    pub crops: Option<Vec<CropDecision>>,
}

/// Checks that `records` are the shards `1..=N` of one run (same detector,
/// classes, held-out list and settings) and combines their inputs.
pub fn merge_inputs(records: &[EvaluationRecord]) -> Result<MergedInputs> {
    let Some(first) = records.first() else {
        return Err(EvalError::Empty {
            what: "shard records".into(),
        });
    };
    let count = first.shard.map_or(1, |s| s.count);
    let mut seen = vec![false; count as usize];
    let same_config = |c: &SheetEvalConfig| *c == first.sheet_level.config;
    for r in records {
        let mismatch = |what: &str| EvalError::ShardMismatch {
            what: what.to_string(),
        };
        if r.schema_version != METRICS_SCHEMA_VERSION {
            return Err(mismatch("schema version"));
        }
        if r.detector != first.detector {
            return Err(mismatch("detector"));
        }
        if r.classes != first.classes {
            return Err(mismatch("classes"));
        }
        if r.held_out != first.held_out {
            return Err(mismatch("held-out sheet list"));
        }
        if !same_config(&r.sheet_level.config) || r.detect_settings != first.detect_settings {
            return Err(mismatch("evaluation settings"));
        }
        let shard = r.shard.unwrap_or(Shard { index: 1, count: 1 });
        if shard.count != count || shard.index == 0 || shard.index > count {
            return Err(mismatch("shard numbering"));
        }
        if std::mem::replace(&mut seen[shard.index as usize - 1], true) {
            return Err(EvalError::ShardMismatch {
                what: format!("shard {}/{count} given twice", shard.index),
            });
        }
        if r.crop_level.is_some() != first.crop_level.is_some() {
            return Err(mismatch(
                "crop-level evaluation present in some shards only",
            ));
        }
    }
    if let Some(missing) = seen.iter().position(|s| !s) {
        return Err(EvalError::ShardMismatch {
            what: format!("shard {}/{count} is missing", missing + 1),
        });
    }
    let order = |sheet: &str| {
        first
            .held_out
            .iter()
            .position(|h| h == sheet)
            .unwrap_or(usize::MAX)
    };
    let mut inputs: Vec<SheetInput> = records.iter().flat_map(|r| r.inputs.clone()).collect();
    inputs.sort_by_key(|s| (order(&s.sheet), s.sheet.clone()));
    let mut sheets: Vec<SheetStamp> = records.iter().flat_map(|r| r.sheets.clone()).collect();
    sheets.sort_by_key(|s| (order(&s.sheet), s.sheet.clone()));
    let crops = first.crop_level.as_ref().map(|_| {
        let mut c: Vec<CropDecision> = records
            .iter()
            .filter_map(|r| r.crop_level.as_ref())
            .flat_map(|c| c.crops.clone())
            .collect();
        // Stable: within a sheet, crops keep the order the shard wrote them in.
        c.sort_by_key(|d| (order(&d.sheet), d.sheet.clone()));
        c
    });
    Ok(MergedInputs {
        inputs,
        sheets,
        crops,
    })
}

/// The sheets of shard `index` of `count` (1-based): every `count`-th sheet of
/// `sheets` in the given order, starting at position `index - 1`, so shards
/// differ in size by at most one sheet.
pub fn shard_sheets(sheets: &[String], shard: Shard) -> Result<Vec<String>> {
    if shard.count == 0 || shard.index == 0 || shard.index > shard.count {
        return Err(EvalError::ShardMismatch {
            what: format!(
                "shard {}/{}: K must lie in 1..=N and N be at least 1",
                shard.index, shard.count
            ),
        });
    }
    Ok(sheets
        .iter()
        .skip(shard.index as usize - 1)
        .step_by(shard.count as usize)
        .cloned()
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_partition_the_sheets() {
        let sheets: Vec<String> = (0..7).map(|i| format!("s{i}")).collect();
        let mut all = Vec::new();
        for k in 1..=3 {
            let part = shard_sheets(&sheets, Shard { index: k, count: 3 }).unwrap();
            assert!(part.len() == 2 || part.len() == 3);
            all.extend(part);
        }
        all.sort();
        assert_eq!(all, sheets);
        assert!(shard_sheets(&sheets, Shard { index: 0, count: 3 }).is_err());
        assert!(shard_sheets(&sheets, Shard { index: 4, count: 3 }).is_err());
    }
}
