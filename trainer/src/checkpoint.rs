//! Checkpoints: the whole state of an unfinished training run in one file, so
//! `--resume` continues exactly where the last finished epoch left off.
//!
//! The file is `models/.unfinished-<run key>.safetensors`: current weights,
//! best weights, AdamW moments (tensors `param.*`, `best.*`, `m.*`, `v.*`) and
//! the loop's counters as JSON in the safetensors metadata. It is replaced
//! atomically after every epoch, and its name starts with a dot, so it never
//! looks like a model. The run key hashes everything that decides the weights
//! (crop library, architecture, schedule, seed), so a resume with other
//! settings finds nothing instead of mixing two runs.

use crate::error::{Result, TensorContext, TrainerError};
use crate::metrics::ValidationMetrics;
use crate::train::EpochRow;
use candle_core::{Device, Tensor};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// Counters of the training loop after a finished epoch.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LoopState {
    /// The run key the checkpoint belongs to.
    pub run_key: String,
    /// Epochs finished.
    pub epochs_done: usize,
    /// Optimiser steps taken.
    pub step: u64,
    /// 1-based epoch of the best validation result so far (0: none yet).
    pub best_epoch: usize,
    /// The best validation result so far.
    pub best: Option<ValidationMetrics>,
    /// Epochs since the best one.
    pub bad_epochs: usize,
    /// The per-epoch log so far.
    pub log: Vec<EpochRow>,
    /// Seconds of training so far.
    pub seconds: f64,
}

/// Everything a checkpoint holds.
#[derive(Debug, Clone)]
pub struct Checkpoint {
    /// Loop counters.
    pub state: LoopState,
    /// Current weights, in architecture order.
    pub params: Vec<Tensor>,
    /// Best weights so far.
    pub best: Vec<Tensor>,
    /// AdamW first moments.
    pub m: Vec<Tensor>,
    /// AdamW second moments.
    pub v: Vec<Tensor>,
}

/// The checkpoint file of a run in a models folder.
pub fn path_for(models_dir: &Path, run_key: &str) -> PathBuf {
    models_dir.join(format!(".unfinished-{run_key}.safetensors"))
}

const GROUPS: [&str; 4] = ["param", "best", "m", "v"];

impl Checkpoint {
    /// Writes the checkpoint atomically (temp file, fsync, rename, fsync folder).
    pub fn save(&self, path: &Path, names: &[String]) -> Result<()> {
        let mut tensors: Vec<(String, &Tensor)> = Vec::new();
        for (group, list) in GROUPS
            .iter()
            .zip([&self.params, &self.best, &self.m, &self.v])
        {
            for (name, t) in names.iter().zip(list) {
                tensors.push((format!("{group}.{name}"), t));
            }
        }
        let state = serde_json::to_string(&self.state).map_err(|e| TrainerError::ModelFolder {
            path: path.to_path_buf(),
            message: format!("cannot encode the training state: {e}"),
        })?;
        let meta = HashMap::from([("state".to_string(), state)]);
        let bytes =
            safetensors::serialize(tensors, Some(meta)).map_err(|e| TrainerError::ModelFolder {
                path: path.to_path_buf(),
                message: format!("cannot encode the checkpoint: {e}"),
            })?;
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).map_err(|e| TrainerError::io(dir, e))?;
        }
        symtrust_labels::atomic::write_atomic(path, &bytes)?;
        Ok(())
    }

    /// Reads a checkpoint written by [`Checkpoint::save`] for a run with `names`.
    pub fn load(path: &Path, names: &[String]) -> Result<Self> {
        let bytes = match std::fs::read(path) {
            Ok(b) => b,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                return Err(TrainerError::NothingToResume {
                    path: path.to_path_buf(),
                });
            }
            Err(e) => return Err(TrainerError::io(path, e)),
        };
        let bad = |message: String| TrainerError::ModelFolder {
            path: path.to_path_buf(),
            message,
        };
        let (_, meta) = safetensors::SafeTensors::read_metadata(&bytes)
            .map_err(|e| bad(format!("not a readable checkpoint: {e}")))?;
        let state_text = meta
            .metadata()
            .as_ref()
            .and_then(|m| m.get("state"))
            .ok_or_else(|| bad("checkpoint has no training state".to_string()))?;
        let state: LoopState = serde_json::from_str(state_text)
            .map_err(|e| bad(format!("bad training state: {e}")))?;
        let map = candle_core::safetensors::load_buffer(&bytes, &Device::Cpu)
            .during("reading a checkpoint")?;
        let take = |group: &str| -> Result<Vec<Tensor>> {
            names
                .iter()
                .map(|n| {
                    map.get(&format!("{group}.{n}"))
                        .cloned()
                        .ok_or_else(|| bad(format!("tensor {group}.{n} is missing")))
                })
                .collect()
        };
        Ok(Self {
            state,
            params: take(GROUPS[0])?,
            best: take(GROUPS[1])?,
            m: take(GROUPS[2])?,
            v: take(GROUPS[3])?,
        })
    }
}
