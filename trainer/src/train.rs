//! The training loop: AdamW with warm-up and cosine decay, class-weighted
//! cross-entropy, early stopping on validation macro F1, a checkpoint after
//! every epoch and exact reproducibility from the seed.
//!
//! Class imbalance is handled by weighting the loss, not by resampling: class
//! `c` with `n_c` of `n` training crops gets weight `n / (K n_c)` and each batch's
//! loss is the weighted mean (as PyTorch's `CrossEntropyLoss(weight=...)`).
//! Resampling would show the few positives many times per epoch, each time
//! through augmentation, and make an epoch's length depend on the rarest
//! class; weighting keeps one pass over every crop per epoch, so epochs, the
//! log and early stopping mean the same thing on every site.
//!
//! Reproducibility: every random draw comes from a [`SeededRng`] stream named
//! after the seed, the epoch and the batch or crop (`order/<e>`,
//! `augment/<e>/<i>`, `dropout/<e>/<b>`), so the draws do not depend on thread
//! scheduling and a resumed run repeats exactly what an uninterrupted one does.
//! The convolution kernels ([`crate::kernels::conv`]) split work across
//! threads only by sample, and sum weight gradients over fixed groups in a
//! fixed order; Candle's dense kernels do not split sums either. So on one
//! machine with one thread count the weights are identical bit for bit
//! (tested).

use crate::arch::Architecture;
use crate::augment::Augmentation;
use crate::checkpoint::{self, Checkpoint, LoopState};
use crate::data::{Dataset, Sample, ink};
use crate::error::{Result, TensorContext, TrainerError};
use crate::metrics::{Confusion, ValidationMetrics};
use crate::model::Network;
use crate::ops::Kernels;
use crate::optim::{AdamW, learning_rate};
use candle_core::{DType, Device, Tensor};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use std::time::Instant;
use symtrust_labels::SeededRng;
use symtrust_labels::site::TrainSettings;

/// Crops per forward pass when validating or classifying.
pub const EVAL_BATCH: usize = 64;

/// The training schedule.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrainOptions {
    /// Largest number of epochs.
    pub epochs: usize,
    /// Crops per optimiser step.
    pub batch_size: usize,
    /// Peak learning rate.
    pub learning_rate: f64,
    /// AdamW weight decay (weights only).
    pub weight_decay: f64,
    /// Epochs without a better validation macro F1 before stopping (0: never stop early).
    pub patience: usize,
    /// Seed of every random choice.
    pub seed: u64,
    /// Augment training crops (see [`Augmentation::default`]).
    pub augment: bool,
}

impl TrainOptions {
    /// Options from `site.toml`'s `[train]` and a seed.
    pub fn from_settings(t: &TrainSettings, seed: u64) -> Self {
        Self {
            epochs: t.epochs,
            batch_size: t.batch_size,
            learning_rate: t.learning_rate,
            weight_decay: t.weight_decay,
            patience: t.patience,
            seed,
            augment: true,
        }
    }

    /// Refuses settings that cannot train.
    pub fn validate(&self) -> Result<()> {
        if self.epochs == 0 || self.batch_size == 0 {
            return Err(TrainerError::Settings {
                message: "epochs and batch size must be positive".to_string(),
            });
        }
        let lr_ok = self.learning_rate.is_finite() && self.learning_rate > 0.0;
        let decay_ok = self.weight_decay.is_finite() && self.weight_decay >= 0.0;
        if !(lr_ok && decay_ok) {
            return Err(TrainerError::Settings {
                message: "learning rate must be positive and weight decay non-negative".to_string(),
            });
        }
        Ok(())
    }
}

/// One row of the per-epoch log (`epochs.csv`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EpochRow {
    /// 1-based epoch.
    pub epoch: usize,
    /// Mean weighted training loss over the epoch's batches.
    pub train_loss: f64,
    /// Validation loss.
    pub val_loss: f64,
    /// Validation accuracy.
    pub val_accuracy: f64,
    /// Validation macro F1.
    pub val_macro_f1: f64,
    /// Learning rate of the epoch's last step.
    pub learning_rate: f64,
    /// Wall-clock seconds of the epoch.
    pub seconds: f64,
}

/// What the observer tells the loop after a batch.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Flow {
    /// Go on.
    Continue,
    /// Stop now (the run can be resumed from the last finished epoch).
    Stop,
}

/// Hooks for progress display and interruption.
pub trait TrainObserver {
    /// An epoch with `batches` batches begins (1-based `epoch`).
    fn epoch_started(&mut self, _epoch: usize, _batches: usize) {}
    /// A batch finished with this loss.
    fn batch_done(&mut self, _epoch: usize, _batch: usize, _loss: f64) -> Flow {
        Flow::Continue
    }
    /// An epoch finished and was checkpointed.
    fn epoch_done(&mut self, _row: &EpochRow) {}
}

/// An observer that shows nothing and never stops.
#[derive(Debug, Default, Clone, Copy)]
pub struct Silent;

impl TrainObserver for Silent {}

/// The result of a finished run.
#[derive(Debug, Clone)]
pub struct TrainOutcome {
    /// The network with the best epoch's weights.
    pub network: Network,
    /// The per-epoch log.
    pub log: Vec<EpochRow>,
    /// Epochs run.
    pub epochs_run: usize,
    /// 1-based epoch whose weights were kept.
    pub best_epoch: usize,
    /// Validation figures of the kept weights.
    pub validation: ValidationMetrics,
    /// True when early stopping ended the run.
    pub stopped_early: bool,
    /// Seconds spent training (all sessions of a resumed run).
    pub seconds: f64,
    /// Loss weight per class.
    pub class_weights: Vec<f64>,
    /// The run key (names the checkpoint).
    pub run_key: String,
    /// Blank-paper threshold for the score map ([`crate::blank`]): half the
    /// smallest ink fraction of a positive training crop, 0 for none.
    pub blank_ink_fraction: f64,
}

/// The blank-paper threshold of a data set: from its positive training crops
/// (every class but the background, the last class).
pub fn blank_threshold(data: &Dataset) -> f64 {
    let background = data.classes.len().saturating_sub(1);
    crate::blank::threshold_from_positives(
        data.train
            .iter()
            .filter(|s| s.class != background)
            .map(|s| s.pixels.as_slice()),
    )
}

/// The key of a run: what decides its weights, hashed.
pub fn run_key(data: &Dataset, arch: &Architecture, opts: &TrainOptions) -> String {
    let key = serde_json::json!({ "source": data.source, "arch": arch, "opts": opts, "classes": data.classes });
    symtrust_labels::hash::sha256_hex(key.to_string().as_bytes())[..16].to_string()
}

/// Class weights `n / (K n_c)` from training counts.
pub fn class_weights(counts: &[usize]) -> Vec<f64> {
    let n: usize = counts.iter().sum();
    let k = counts.len() as f64;
    counts
        .iter()
        .map(|c| {
            if *c == 0 {
                0.0
            } else {
                n as f64 / (k * *c as f64)
            }
        })
        .collect()
}

/// Builds a `(batch, 1, S, S)` input from ink images.
pub fn batch_tensor(
    images: Vec<Vec<f32>>,
    side: usize,
    dtype: DType,
) -> candle_core::Result<Tensor> {
    let n = images.len();
    let flat: Vec<f32> = images.into_iter().flatten().collect();
    Tensor::from_vec(flat, (n, 1, side, side), &Device::Cpu)?.to_dtype(dtype)
}

/// Weighted cross-entropy of `logits` against `classes`, mean over the weights.
pub fn weighted_loss(
    logits: &Tensor,
    classes: &[usize],
    weights: &[f64],
) -> candle_core::Result<Tensor> {
    let (n, k) = logits.dims2()?;
    let mut target = vec![0f64; n * k];
    let mut total = 0.0;
    for (i, c) in classes.iter().enumerate() {
        target[i * k + c] = weights[*c];
        total += weights[*c];
    }
    let target = Tensor::from_vec(target, (n, k), &Device::Cpu)?.to_dtype(logits.dtype())?;
    let logp = candle_nn::ops::log_softmax(logits, 1)?;
    (logp * target)?.sum_all()? * (-1.0 / total.max(f64::MIN_POSITIVE))
}

/// Validation loss, accuracy and F1 of `net` on `samples` (fast kernels).
pub fn evaluate(net: &Network, samples: &[Sample], classes: usize) -> Result<ValidationMetrics> {
    evaluate_with(Kernels::Fast, net, samples, classes)
}

/// [`evaluate`] with the chosen kernels.
pub fn evaluate_with(
    kernels: Kernels,
    net: &Network,
    samples: &[Sample],
    classes: usize,
) -> Result<ValidationMetrics> {
    let side = net.arch.window;
    let mut truth = Vec::with_capacity(samples.len());
    let mut predicted = Vec::with_capacity(samples.len());
    let mut loss_sum = 0.0;
    for chunk in samples.chunks(EVAL_BATCH) {
        let images: Vec<Vec<f32>> = chunk
            .iter()
            .map(|s| s.pixels.iter().map(|p| ink(*p)).collect())
            .collect();
        let run = || -> candle_core::Result<(Vec<Vec<f32>>, f64)> {
            let x = batch_tensor(images, side, DType::F32)?;
            let logits = net.forward_with(kernels, &x, None)?;
            let labels: Vec<usize> = chunk.iter().map(|s| s.class).collect();
            let ones = vec![1.0; classes];
            let loss = weighted_loss(&logits, &labels, &ones)?.to_scalar::<f32>()? as f64;
            Ok((logits.to_vec2::<f32>()?, loss * chunk.len() as f64))
        };
        let (rows, loss) = run().during("validating")?;
        loss_sum += loss;
        for (s, row) in chunk.iter().zip(rows) {
            truth.push(s.class);
            predicted.push(argmax(&row));
        }
    }
    let confusion = Confusion::new(classes, &truth, &predicted);
    Ok(ValidationMetrics {
        loss: loss_sum / samples.len().max(1) as f64,
        accuracy: confusion.accuracy(),
        macro_f1: confusion.macro_f1(),
        per_class_f1: confusion.per_class_f1(),
    })
}

/// Index of the largest value (the first on ties).
pub fn argmax(row: &[f32]) -> usize {
    let mut best = 0;
    for (i, v) in row.iter().enumerate() {
        if *v > row[best] {
            best = i;
        }
    }
    best
}

/// Trains a network on `data`. With `checkpoint_dir` (the models folder) the
/// state is checkpointed after every epoch, and `resume` continues from the
/// checkpoint of the same run; the checkpoint is left in place for the caller
/// to remove once the model folder is written.
pub fn train(
    data: &Dataset,
    arch: &Architecture,
    opts: &TrainOptions,
    checkpoint_dir: Option<&Path>,
    resume: bool,
    observer: &mut dyn TrainObserver,
) -> Result<TrainOutcome> {
    train_with(
        Kernels::Fast,
        data,
        arch,
        opts,
        checkpoint_dir,
        resume,
        observer,
    )
}

/// [`train`] with the chosen kernels ([`Kernels::Stock`] is the reference twin).
pub fn train_with(
    kernels: Kernels,
    data: &Dataset,
    arch: &Architecture,
    opts: &TrainOptions,
    checkpoint_dir: Option<&Path>,
    resume: bool,
    observer: &mut dyn TrainObserver,
) -> Result<TrainOutcome> {
    opts.validate()?;
    arch.validate()?;
    if arch.window != data.window || arch.classes != data.classes.len() {
        return Err(TrainerError::WindowMismatch {
            what: "crop library".to_string(),
            expected: format!("{0} x {0} with {1} classes", arch.window, arch.classes),
            found: format!(
                "{0} x {0} with {1} classes",
                data.window,
                data.classes.len()
            ),
        });
    }
    let key = run_key(data, arch, opts);
    let ckpt_path: Option<PathBuf> = checkpoint_dir.map(|d| checkpoint::path_for(d, &key));
    let names: Vec<String> = arch
        .parameter_shapes()
        .into_iter()
        .map(|(n, _)| n)
        .collect();
    let net = Network::init(arch, opts.seed, DType::F32)?;
    let decay: Vec<f64> = names
        .iter()
        .map(|n| {
            if n.ends_with(".weight") {
                opts.weight_decay
            } else {
                0.0
            }
        })
        .collect();
    let mut opt = AdamW::new(&net.params, decay)?;
    let mut state = LoopState {
        run_key: key.clone(),
        epochs_done: 0,
        step: 0,
        best_epoch: 0,
        best: None,
        bad_epochs: 0,
        log: Vec::new(),
        seconds: 0.0,
    };
    let mut best: Vec<Tensor> = net.snapshot()?;
    match (&ckpt_path, resume) {
        (Some(path), true) => {
            let c = Checkpoint::load(path, &names)?;
            net.set_values(&c.params)?;
            opt.m = c.m;
            opt.v = c.v;
            opt.step = c.state.step;
            best = c.best;
            state = c.state;
        }
        (None, true) => {
            return Err(TrainerError::Settings {
                message: "resume needs a models folder for checkpoints".to_string(),
            });
        }
        (Some(path), false) => save(path, &names, &net, &opt, &best, &state)?,
        (None, false) => {}
    }
    let weights = class_weights(&data.class_counts(&data.train));
    let per_epoch = data.train.len().div_ceil(opts.batch_size) as u64;
    let total_steps = per_epoch * opts.epochs as u64;
    let aug = if opts.augment {
        Augmentation::default()
    } else {
        Augmentation::none()
    };
    let side = arch.window;
    let mut stopped_early = false;
    for epoch in state.epochs_done..opts.epochs {
        if opts.patience > 0 && state.bad_epochs >= opts.patience {
            stopped_early = true;
            break;
        }
        let started = Instant::now();
        let mut order: Vec<usize> = (0..data.train.len()).collect();
        SeededRng::derive(opts.seed, &format!("order/{epoch}")).shuffle(&mut order);
        observer.epoch_started(epoch + 1, per_epoch as usize);
        let (mut loss_sum, mut lr) = (0.0, opts.learning_rate);
        for (b, chunk) in order.chunks(opts.batch_size).enumerate() {
            lr = learning_rate(opts.learning_rate, opt.step, total_steps, per_epoch);
            let images: Vec<Vec<f32>> = chunk
                .par_iter()
                .enumerate()
                .map(|(j, &i)| {
                    let s = &data.train[i];
                    let px: Vec<f32> = s.pixels.iter().map(|p| ink(*p)).collect();
                    let mut rng = SeededRng::derive(
                        opts.seed,
                        &format!("augment/{epoch}/{}", b * opts.batch_size + j),
                    );
                    aug.apply(&px, side, data.rotatable[s.class], &mut rng)
                })
                .collect();
            let labels: Vec<usize> = chunk.iter().map(|&i| data.train[i].class).collect();
            let mask =
                dropout_mask(arch, chunk.len(), opts.seed, epoch, b).during("building dropout")?;
            let step = || -> candle_core::Result<(f64, candle_core::backprop::GradStore)> {
                let x = batch_tensor(images, side, DType::F32)?;
                let logits = net.forward_with(kernels, &x, mask.as_ref())?;
                let loss = weighted_loss(&logits, &labels, &weights)?;
                let grads = loss.backward()?;
                Ok((loss.to_scalar::<f32>()? as f64, grads))
            };
            let (loss, grads) = step().during("computing gradients")?;
            opt.step(&net.params, &grads, lr)?;
            loss_sum += loss;
            if observer.batch_done(epoch + 1, b + 1, loss) == Flow::Stop {
                return Err(TrainerError::Interrupted {
                    epochs_done: state.epochs_done,
                    checkpoint: ckpt_path.clone().unwrap_or_default(),
                });
            }
        }
        let val = evaluate_with(kernels, &net, &data.validation, data.classes.len())?;
        let seconds = started.elapsed().as_secs_f64();
        let row = EpochRow {
            epoch: epoch + 1,
            train_loss: loss_sum / per_epoch.max(1) as f64,
            val_loss: val.loss,
            val_accuracy: val.accuracy,
            val_macro_f1: val.macro_f1,
            learning_rate: lr,
            seconds,
        };
        let improved = match &state.best {
            None => true,
            Some(b) => {
                val.macro_f1 > b.macro_f1 || (val.macro_f1 == b.macro_f1 && val.loss < b.loss)
            }
        };
        if improved {
            best = net.snapshot()?;
            state.best = Some(val);
            state.best_epoch = epoch + 1;
            state.bad_epochs = 0;
        } else {
            state.bad_epochs += 1;
        }
        state.log.push(row.clone());
        state.epochs_done = epoch + 1;
        state.step = opt.step;
        state.seconds += seconds;
        if let Some(path) = &ckpt_path {
            save(path, &names, &net, &opt, &best, &state)?;
        }
        observer.epoch_done(&row);
    }
    if opts.patience > 0 && state.bad_epochs >= opts.patience && state.epochs_done < opts.epochs {
        stopped_early = true;
    }
    net.set_values(&best)?;
    let validation = state.best.clone().ok_or_else(|| TrainerError::Settings {
        message: "no epoch was run".to_string(),
    })?;
    Ok(TrainOutcome {
        network: net,
        log: state.log,
        epochs_run: state.epochs_done,
        best_epoch: state.best_epoch,
        validation,
        stopped_early,
        seconds: state.seconds,
        class_weights: weights,
        run_key: key,
        blank_ink_fraction: blank_threshold(data),
    })
}

fn save(
    path: &Path,
    names: &[String],
    net: &Network,
    opt: &AdamW,
    best: &[Tensor],
    state: &LoopState,
) -> Result<()> {
    Checkpoint {
        state: state.clone(),
        params: net.snapshot()?,
        best: best.to_vec(),
        m: opt.m.clone(),
        v: opt.v.clone(),
    }
    .save(path, names)
}

/// Inverted-dropout mask `(batch, hidden)`: 0 or `1 / keep`, from the seed.
fn dropout_mask(
    arch: &Architecture,
    batch: usize,
    seed: u64,
    epoch: usize,
    b: usize,
) -> candle_core::Result<Option<Tensor>> {
    if arch.dropout <= 0.0 {
        return Ok(None);
    }
    let keep = 1.0 - arch.dropout;
    let mut rng = SeededRng::derive(seed, &format!("dropout/{epoch}/{b}"));
    let values: Vec<f32> = (0..batch * arch.hidden)
        .map(|_| {
            if rng.chance(keep) {
                (1.0 / keep) as f32
            } else {
                0.0
            }
        })
        .collect();
    Ok(Some(Tensor::from_vec(
        values,
        (batch, arch.hidden),
        &Device::Cpu,
    )?))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn class_weights_balance_the_classes() {
        // Hand calculation: n = 100, K = 2 -> 100 / (2 * 90) and 100 / (2 * 10).
        let w = class_weights(&[90, 10]);
        assert!((w[0] - 100.0 / 180.0).abs() < 1e-12 && (w[1] - 5.0).abs() < 1e-12);
        assert!(
            (90.0 * w[0] - 10.0 * w[1]).abs() < 1e-9,
            "equal total weight per class"
        );
    }

    #[test]
    fn weighted_loss_of_uniform_logits_is_ln_k() {
        // Uniform logits over K classes give -ln(1/K) = ln K per sample, whatever the weights.
        let logits = Tensor::zeros((3, 4), DType::F32, &Device::Cpu).unwrap();
        let l = weighted_loss(&logits, &[0, 1, 3], &[1.0, 2.0, 3.0, 4.0]).unwrap();
        assert!((l.to_scalar::<f32>().unwrap() as f64 - 4f64.ln()).abs() < 1e-6);
    }
}
