//! Model folders: `models/<id>/` with `weights.safetensors`, `card.json` and
//! `epochs.csv`, written so a crash never leaves a half model that looks whole.
//!
//! The folder is built under `models/.writing-<id>-<pid>/`, every file fsynced,
//! the folder fsynced, renamed to `models/<id>`, and `models/` fsynced. Loading
//! reads the card, hashes the weights and refuses any mismatch with the card's
//! SHA-256, then checks every tensor's name and shape against the architecture.
//!
//! Model ids are `<UTC yyyymmddThhmmss>-<first 8 hex of the weights' SHA-256>`:
//! they sort by time and name the exact weights.

use crate::arch::Architecture;
use crate::data::{DataSource, NORMALISATION};
use crate::error::{Result, TensorContext, TrainerError};
use crate::metrics::ValidationMetrics;
use crate::model::Network;
use crate::train::{EpochRow, TrainOptions, TrainOutcome};
use candle_core::Device;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::io::Write;
use std::path::{Path, PathBuf};
use symtrust_labels::hash::sha256_hex;

/// Version of the model card format written by this build.
pub const CARD_SCHEMA_VERSION: u32 = 1;
/// Weights file name inside a model folder.
pub const WEIGHTS_FILE: &str = "weights.safetensors";
/// Card file name inside a model folder.
pub const CARD_FILE: &str = "card.json";
/// Per-epoch log file name inside a model folder.
pub const LOG_FILE: &str = "epochs.csv";

/// How the model was trained.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrainingRecord {
    /// The schedule asked for.
    pub options: TrainOptions,
    /// Epochs run.
    pub epochs_run: usize,
    /// 1-based epoch whose weights were kept.
    pub best_epoch: usize,
    /// True when early stopping ended the run.
    pub stopped_early: bool,
    /// Loss weight per class (class imbalance: weighted loss).
    pub class_weights: Vec<f64>,
    /// Training crops per class.
    pub train_counts: Vec<usize>,
    /// Validation crops per class.
    pub validation_counts: Vec<usize>,
    /// Seconds spent training.
    pub seconds: f64,
    /// Threads the CPU kernels used.
    pub threads: usize,
}

/// `card.json`: everything needed to use, audit and reproduce a model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelCard {
    /// Format version ([`CARD_SCHEMA_VERSION`]).
    pub schema_version: u32,
    /// The model id (also its folder name).
    pub id: String,
    /// Version of symtrust that trained it.
    pub tool_version: String,
    /// Creation time, RFC 3339 UTC.
    pub created: String,
    /// Output classes in order (site classes, then background).
    pub classes: Vec<String>,
    /// Side of the square input window in pixels.
    pub window: usize,
    /// Native stride of the score map in pixels (product of the pooling factors).
    pub native_stride: usize,
    /// The input normalisation.
    pub normalisation: String,
    /// The network.
    pub architecture: Architecture,
    /// The crop library it was trained on.
    pub data: DataSource,
    /// Seed of every random choice.
    pub seed: u64,
    /// Training record.
    pub training: TrainingRecord,
    /// Validation figures of the kept weights.
    pub validation: ValidationMetrics,
    /// Weights file name.
    pub weights_file: String,
    /// SHA-256 of the weights file.
    pub weights_sha256: String,
    /// Blank-paper threshold of the score map: windows whose fraction of ink
    /// pixels (8-bit value below [`crate::blank::INK_LEVEL`]) is below it get
    /// the scores of an all-paper window without running the dense layers.
    /// Half the smallest ink fraction of any positive training crop, so no
    /// positive training crop would have been skipped. 0 disables skipping;
    /// cards written before this field load with 0.
    #[serde(default)]
    pub blank_ink_fraction: f64,
}

/// Encodes a network's weights as safetensors bytes (deterministic: tensors are
/// ordered by name, no metadata).
pub fn weights_bytes(net: &Network) -> Result<Vec<u8>> {
    let tensors = net.named_tensors()?;
    safetensors::serialize(tensors.iter().map(|(n, t)| (n.clone(), t)), None).map_err(|e| {
        TrainerError::Settings {
            message: format!("cannot encode weights: {e}"),
        }
    })
}

/// Everything [`write_model`] needs besides the trained network.
#[derive(Debug, Clone)]
pub struct ModelInputs<'a> {
    /// Class names.
    pub classes: &'a [String],
    /// Provenance of the data.
    pub source: &'a DataSource,
    /// The schedule.
    pub options: &'a TrainOptions,
    /// Training crops per class.
    pub train_counts: Vec<usize>,
    /// Validation crops per class.
    pub validation_counts: Vec<usize>,
}

/// Writes `models_dir/<id>/` atomically and returns its card and folder.
pub fn write_model(
    models_dir: &Path,
    outcome: &TrainOutcome,
    inputs: &ModelInputs<'_>,
) -> Result<(ModelCard, PathBuf)> {
    let weights = weights_bytes(&outcome.network)?;
    let sha = sha256_hex(&weights);
    let created = symtrust_labels::clock::now_rfc3339();
    let stamp: String = created
        .chars()
        .filter(|c| c.is_ascii_digit() || *c == 'T')
        .collect();
    let id = format!("{stamp}-{}", &sha[..8]);
    let arch = outcome.network.arch.clone();
    let card = ModelCard {
        schema_version: CARD_SCHEMA_VERSION,
        id: id.clone(),
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        created,
        classes: inputs.classes.to_vec(),
        window: arch.window,
        native_stride: arch.native_stride(),
        normalisation: NORMALISATION.to_string(),
        architecture: arch,
        data: inputs.source.clone(),
        seed: inputs.options.seed,
        training: TrainingRecord {
            options: inputs.options.clone(),
            epochs_run: outcome.epochs_run,
            best_epoch: outcome.best_epoch,
            stopped_early: outcome.stopped_early,
            class_weights: outcome.class_weights.clone(),
            train_counts: inputs.train_counts.clone(),
            validation_counts: inputs.validation_counts.clone(),
            seconds: outcome.seconds,
            threads: rayon::current_num_threads(),
        },
        validation: outcome.validation.clone(),
        weights_file: WEIGHTS_FILE.to_string(),
        weights_sha256: sha,
        blank_ink_fraction: outcome.blank_ink_fraction,
    };
    let card_json = serde_json::to_string_pretty(&card).map_err(|e| TrainerError::Settings {
        message: format!("cannot encode the model card: {e}"),
    })?;
    let files: [(&str, Vec<u8>); 3] = [
        (WEIGHTS_FILE, weights),
        (CARD_FILE, card_json.into_bytes()),
        (LOG_FILE, log_csv(&outcome.log).into_bytes()),
    ];
    let dir = write_folder(models_dir, &id, &files)?;
    Ok((card, dir))
}

/// The per-epoch log as CSV.
pub fn log_csv(rows: &[EpochRow]) -> String {
    let mut s =
        String::from("epoch,train_loss,val_loss,val_accuracy,val_macro_f1,learning_rate,seconds\n");
    for r in rows {
        s.push_str(&format!(
            "{},{:.6},{:.6},{:.6},{:.6},{:.3e},{:.2}\n",
            r.epoch,
            r.train_loss,
            r.val_loss,
            r.val_accuracy,
            r.val_macro_f1,
            r.learning_rate,
            r.seconds
        ));
    }
    s
}

/// Builds `parent/<name>` from `files` under a temporary name and renames it into place.
pub fn write_folder(parent: &Path, name: &str, files: &[(&str, Vec<u8>)]) -> Result<PathBuf> {
    symtrust_labels::atomic::create_dir_durable(parent)?;
    let target = parent.join(name);
    if target.exists() {
        return Err(TrainerError::ModelFolder {
            path: target,
            message: "a model with this id already exists".to_string(),
        });
    }
    let tmp = parent.join(format!(".writing-{name}-{}", std::process::id()));
    let result = (|| -> std::io::Result<()> {
        std::fs::create_dir(&tmp)?;
        for (file, bytes) in files {
            let mut f = std::fs::File::create_new(tmp.join(file))?;
            f.write_all(bytes)?;
            f.sync_all()?;
        }
        std::fs::File::open(&tmp)?.sync_all()?;
        std::fs::rename(&tmp, &target)?;
        std::fs::File::open(parent)?.sync_all()
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_dir_all(&tmp);
        return Err(TrainerError::io(&target, e));
    }
    Ok(target)
}

/// Removes `.writing-*` folders left in `models_dir` by writers that died
/// (their process id no longer runs); returns how many were removed.
pub fn remove_stale_writes(models_dir: &Path) -> Result<usize> {
    let entries = match std::fs::read_dir(models_dir) {
        Ok(e) => e,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(0),
        Err(e) => return Err(TrainerError::io(models_dir, e)),
    };
    let mut removed = 0;
    for entry in entries {
        let entry = entry.map_err(|e| TrainerError::io(models_dir, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(rest) = name.strip_prefix(".writing-") else {
            continue;
        };
        let pid = rest.rsplit('-').next().unwrap_or("");
        let alive = !pid.is_empty() && Path::new("/proc").join(pid).exists();
        if !alive {
            std::fs::remove_dir_all(entry.path()).map_err(|e| TrainerError::io(entry.path(), e))?;
            removed += 1;
        }
    }
    Ok(removed)
}

/// Reads and checks a model folder: the card parses, the weights' SHA-256
/// matches it, and every tensor fits the architecture.
pub fn load_model(dir: &Path) -> Result<(ModelCard, Network)> {
    let card_path = dir.join(CARD_FILE);
    let text = std::fs::read_to_string(&card_path).map_err(|e| TrainerError::ModelFolder {
        path: card_path.clone(),
        message: format!("cannot read the model card ({e}); is this a model folder?"),
    })?;
    let card: ModelCard = serde_json::from_str(&text).map_err(|e| TrainerError::ModelFolder {
        path: card_path.clone(),
        message: format!("line {}: {e}", e.line()),
    })?;
    if card.schema_version != CARD_SCHEMA_VERSION {
        return Err(TrainerError::ModelFolder {
            path: card_path,
            message: format!(
                "card schema {} is not the supported {CARD_SCHEMA_VERSION}",
                card.schema_version
            ),
        });
    }
    if card.classes.len() != card.architecture.classes || card.window != card.architecture.window {
        return Err(TrainerError::ModelFolder {
            path: card_path,
            message: "classes or window disagree with the architecture".to_string(),
        });
    }
    let weights_path = dir.join(&card.weights_file);
    let bytes = std::fs::read(&weights_path).map_err(|e| TrainerError::ModelFolder {
        path: weights_path.clone(),
        message: format!("cannot read the weights ({e}); the model folder is incomplete"),
    })?;
    let found = sha256_hex(&bytes);
    if found != card.weights_sha256 {
        return Err(TrainerError::WeightsTampered {
            path: weights_path,
            expected: card.weights_sha256.clone(),
            found,
        });
    }
    let tensors: HashMap<String, candle_core::Tensor> =
        candle_core::safetensors::load_buffer(&bytes, &Device::Cpu).during("reading weights")?;
    let net = Network::from_tensors(&card.architecture, &tensors, &weights_path)?;
    Ok((card, net))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn failed_folder_write_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        // Two files with the same name: the second create_new fails mid-write.
        let files = [("a", b"1".to_vec()), ("a", b"2".to_vec())];
        assert!(write_folder(dir.path(), "m1", &files).is_err());
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
        std::fs::create_dir(dir.path().join(".writing-m0-4000000000")).unwrap();
        std::fs::create_dir(
            dir.path()
                .join(format!(".writing-m9-{}", std::process::id())),
        )
        .unwrap();
        assert_eq!(
            remove_stale_writes(dir.path()).unwrap(),
            1,
            "only the dead writer's folder"
        );
        std::fs::remove_dir(
            dir.path()
                .join(format!(".writing-m9-{}", std::process::id())),
        )
        .unwrap();
        let ok = write_folder(dir.path(), "m2", &[("a", b"1".to_vec())]).unwrap();
        assert_eq!(std::fs::read(ok.join("a")).unwrap(), b"1");
        assert!(write_folder(dir.path(), "m2", &[("a", b"1".to_vec())]).is_err());
    }
}
