//! Batch classification of windows with a loaded model (the naive twin of the
//! score map, and what evaluation uses for crop-level metrics).
//!
//! Input windows are 8-bit grayscale at the site's canonical resolution (paper
//! 255, ink 0), `window * window` bytes row-major; output is one probability
//! per class (softmax), in the card's class order.

use crate::card::{ModelCard, load_model};
use crate::data::ink;
use crate::error::{Result, TensorContext, TrainerError};
use crate::model::Network;
use crate::train::{EVAL_BATCH, batch_tensor};
use candle_core::DType;
use rayon::prelude::*;
use std::path::Path;

/// A model ready for inference.
#[derive(Debug, Clone)]
pub struct Classifier {
    /// Output class names in order.
    pub classes: Vec<String>,
    /// The network.
    pub network: Network,
    /// The model card, when loaded from a model folder.
    pub card: Option<ModelCard>,
}

impl Classifier {
    /// Loads and checks a model folder (see [`load_model`]).
    pub fn load(dir: &Path) -> Result<Self> {
        let (card, network) = load_model(dir)?;
        Ok(Self {
            classes: card.classes.clone(),
            network,
            card: Some(card),
        })
    }

    /// Wraps a network with class names (one per output).
    pub fn from_network(network: Network, classes: Vec<String>) -> Result<Self> {
        if classes.len() != network.arch.classes {
            return Err(TrainerError::Settings {
                message: format!(
                    "{} class names for a network with {} outputs",
                    classes.len(),
                    network.arch.classes
                ),
            });
        }
        Ok(Self {
            classes,
            network,
            card: None,
        })
    }

    /// Side of the square window the model classifies.
    pub fn window(&self) -> usize {
        self.network.arch.window
    }

    /// Class probabilities for each window, in input order.
    pub fn classify(&self, windows: &[&[u8]]) -> Result<Vec<Vec<f32>>> {
        let side = self.window();
        for (i, w) in windows.iter().enumerate() {
            if w.len() != side * side {
                return Err(TrainerError::WindowMismatch {
                    what: format!("window {i}"),
                    expected: format!("{side} x {side} = {} pixels", side * side),
                    found: format!("{} pixels", w.len()),
                });
            }
        }
        let threads = rayon::current_num_threads().max(1);
        let mut out = Vec::with_capacity(windows.len());
        for group in windows.chunks(EVAL_BATCH * threads) {
            let parts: Vec<Vec<Vec<f32>>> = group
                .par_chunks(EVAL_BATCH)
                .map(|chunk| {
                    let images: Vec<Vec<f32>> = chunk
                        .iter()
                        .map(|w| w.iter().map(|p| ink(*p)).collect())
                        .collect();
                    let run = || -> candle_core::Result<Vec<Vec<f32>>> {
                        let x = batch_tensor(images, side, DType::F32)?;
                        let logits = self.network.forward(&x, None)?;
                        candle_nn::ops::softmax(&logits, 1)?.to_vec2::<f32>()
                    };
                    run().during("classifying windows")
                })
                .collect::<Result<_>>()?;
            out.extend(parts.into_iter().flatten());
        }
        Ok(out)
    }
}
