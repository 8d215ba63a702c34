//! Reading what a report is made from: the evaluation folder (`metrics.json`),
//! the site folder its sheets and labels live in, and the model's training log.

use crate::error::{ReportError, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use symtrust_eval::record::{DetectorInfo, EvaluationRecord, METRICS_FILE, METRICS_SCHEMA_VERSION};
use symtrust_labels::hash::sha256_file;

/// File name of a model's training log inside its folder.
pub const TRAINING_LOG_FILE: &str = "epochs.csv";

/// One evaluation to report on.
#[derive(Debug, Clone)]
pub struct EvaluationInput {
    /// The evaluation folder (holds `metrics.json`).
    pub dir: PathBuf,
    /// The site folder the evaluation's sheets and label documents are
    /// relative to.
    pub site_root: PathBuf,
    /// A short title for tables and legends, e.g. "style-a model on style-b
    /// sheets"; default: the evaluation folder's name.
    pub title: Option<String>,
}

/// One row of a model's `epochs.csv`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct EpochRow {
    /// Epoch, from 1.
    pub epoch: u32,
    /// Mean training loss (cross-entropy, nats).
    pub train_loss: f64,
    /// Validation loss (cross-entropy, nats).
    pub val_loss: f64,
    /// Validation accuracy, 0-1.
    pub val_accuracy: f64,
    /// Validation macro F1, 0-1.
    pub val_macro_f1: f64,
    /// Learning rate.
    pub learning_rate: f64,
    /// Seconds the epoch took.
    pub seconds: f64,
}

/// An evaluation as read.
#[derive(Debug, Clone)]
pub struct LoadedEvaluation {
    /// Where it came from.
    pub input: EvaluationInput,
    /// Its title (given, or the folder name).
    pub title: String,
    /// The record.
    pub record: EvaluationRecord,
    /// SHA-256 of `metrics.json`.
    pub metrics_sha256: String,
    /// The model folder, when the detector is a model and its folder was found.
    pub model_dir: Option<PathBuf>,
    /// The model's training log, when found.
    pub training: Option<Vec<EpochRow>>,
}

/// Reads `dir/metrics.json`, checking its schema version.
pub fn read_record(dir: &Path) -> Result<(EvaluationRecord, String)> {
    let path = dir.join(METRICS_FILE);
    if !path.is_file() {
        return Err(ReportError::input(
            dir,
            format!(
                "not an evaluation folder: it has no {METRICS_FILE} (write one with `symtrust eval --out DIR`)"
            ),
        ));
    }
    let text = std::fs::read_to_string(&path).map_err(|e| ReportError::io(&path, e))?;
    let version = serde_json::from_str::<serde_json::Value>(&text)
        .map_err(|e| ReportError::input(&path, format!("not valid JSON: {e}")))?
        .get("schema_version")
        .and_then(serde_json::Value::as_u64);
    if version != Some(u64::from(METRICS_SCHEMA_VERSION)) {
        return Err(ReportError::input(
            &path,
            format!(
                "schema version {version:?}; this symtrust reads version {METRICS_SCHEMA_VERSION}: re-run the evaluation with this version"
            ),
        ));
    }
    let record: EvaluationRecord = serde_json::from_str(&text)
        .map_err(|e| ReportError::input(&path, format!("not an evaluation record: {e}")))?;
    Ok((record, sha256_file(&path)?))
}

/// Parses a training log (the columns `symtrust train` writes).
pub fn read_training_log(path: &Path) -> Result<Vec<EpochRow>> {
    let mut reader = csv::Reader::from_path(path)
        .map_err(|e| ReportError::input(path, format!("cannot read the training log: {e}")))?;
    let mut rows = Vec::new();
    for (i, row) in reader.deserialize::<EpochRow>().enumerate() {
        rows.push(row.map_err(|e| {
            ReportError::input(path, format!("line {}: not a training-log row: {e}", i + 2))
        })?);
    }
    Ok(rows)
}

/// The model folder of a model run: the folder as recorded (absolute, or
/// relative to the site, or to the current folder), else `models/<id>` of the site.
pub fn find_model_dir(record: &EvaluationRecord, site_root: &Path) -> Option<PathBuf> {
    let DetectorInfo::Model { id, dir, .. } = &record.detector else {
        return None;
    };
    let given = PathBuf::from(dir);
    let candidates = [
        given.clone(),
        site_root.join(&given),
        site_root.join("models").join(id),
    ];
    candidates.into_iter().find(|c| c.is_dir())
}

/// The site folder of an evaluation folder: the nearest folder at or above
/// it holding `site.toml`.
pub fn find_site_root(eval_dir: &Path) -> Option<PathBuf> {
    let abs = std::path::absolute(eval_dir).ok()?;
    abs.ancestors()
        .find(|a| a.join(symtrust_labels::site::SITE_FILE).is_file())
        .map(Path::to_path_buf)
}

/// Reads one evaluation and what belongs to it.
pub fn load(input: &EvaluationInput) -> Result<LoadedEvaluation> {
    let (record, metrics_sha256) = read_record(&input.dir)?;
    let model_dir = find_model_dir(&record, &input.site_root);
    let training = match &model_dir {
        Some(d) if d.join(TRAINING_LOG_FILE).is_file() => {
            Some(read_training_log(&d.join(TRAINING_LOG_FILE))?)
        }
        _ => None,
    };
    let title = input.title.clone().unwrap_or_else(|| {
        input
            .dir
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "evaluation".into())
    });
    Ok(LoadedEvaluation {
        input: input.clone(),
        title,
        record,
        metrics_sha256,
        model_dir,
        training,
    })
}
