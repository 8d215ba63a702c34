//! The classifier's architecture: a small LeNet-style stack.
//!
//! ```text
//! window (1 x S x S, ink = 1, paper = 0)
//!   -> [conv k_i x k_i, no padding, stride 1 -> ReLU -> max pool 2 x 2, stride 2] per layer
//!   -> flatten (C x F x F, channel-major) -> dense `hidden` -> ReLU -> dropout
//!   -> dense `classes` -> softmax
//! ```
//!
//! Convolutions are unpadded ("valid") and pooling drops an odd last row or
//! column, so every feature depends only on pixels inside its window. That is
//! what lets the score map ([`crate::scoremap`]) run the stack once over a
//! whole sheet and still give every window exactly its own score: the native
//! stride is `2^layers`, the product of the pooling factors.

use crate::error::{Result, TrainerError};
use serde::{Deserialize, Serialize};
use symtrust_labels::site::ModelSettings;

/// Pooling factor of every layer (2 x 2 max pooling, stride 2).
pub const POOL: usize = 2;

/// Everything that fixes the shapes of the network's weights.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Architecture {
    /// Side of the square input window in pixels.
    pub window: usize,
    /// Output channels of each convolution layer.
    pub conv_channels: Vec<usize>,
    /// Kernel side of each convolution layer.
    pub conv_kernels: Vec<usize>,
    /// Units of the fully connected hidden layer.
    pub hidden: usize,
    /// Dropout probability on the hidden layer during training.
    pub dropout: f64,
    /// Output classes (the site's classes plus background).
    pub classes: usize,
}

impl Architecture {
    /// The architecture from `site.toml` settings, a window and a class count, checked.
    pub fn from_settings(settings: &ModelSettings, window: usize, classes: usize) -> Result<Self> {
        let arch = Self {
            window,
            conv_channels: settings.conv_channels.clone(),
            conv_kernels: settings.conv_kernels.clone(),
            hidden: settings.hidden,
            dropout: settings.dropout,
            classes,
        };
        arch.validate()?;
        Ok(arch)
    }

    /// Checks that every layer has a positive output size for this window.
    pub fn validate(&self) -> Result<()> {
        let bad = |message: String| Err(TrainerError::Settings { message });
        if self.conv_channels.is_empty() || self.conv_channels.len() != self.conv_kernels.len() {
            return bad(format!(
                "conv_channels ({}) and conv_kernels ({}) must be non-empty and of equal length",
                self.conv_channels.len(),
                self.conv_kernels.len()
            ));
        }
        if self.conv_channels.contains(&0) || self.conv_kernels.contains(&0) {
            return bad("convolution channels and kernels must be positive".to_string());
        }
        if self.hidden == 0 || !(0.0..1.0).contains(&self.dropout) {
            return bad(format!(
                "hidden = {} must be positive and dropout = {} in [0, 1)",
                self.hidden, self.dropout
            ));
        }
        if self.classes < 2 {
            return bad(format!(
                "{} output class(es): a classifier needs at least one symbol class plus background",
                self.classes
            ));
        }
        let mut side = self.window;
        for (i, k) in self.conv_kernels.iter().enumerate() {
            if side < k + 1 {
                return bad(format!(
                    "window {} is too small for the network: layer {} (kernel {k}) sees {side} pixels; use a larger window or fewer or smaller layers",
                    self.window,
                    i + 1
                ));
            }
            side = (side - k + 1) / POOL;
        }
        let unseen = self.unseen_margin();
        if unseen > 0 {
            let fits: Vec<usize> = (self.window.saturating_sub(12)..=self.window + 12)
                .filter(|w| {
                    Self {
                        window: *w,
                        ..self.clone()
                    }
                    .unseen_margin()
                        == 0
                })
                .collect();
            return bad(format!(
                "with window {} the network never sees the last {unseen} pixel row(s) and column(s) of a window (pooling drops an odd edge); windows that fit this network nearby: {fits:?}",
                self.window
            ));
        }
        Ok(())
    }

    /// Pixels at the right and bottom of a window that no feature depends on
    /// (0 when every conv output before a pool has an even side).
    pub fn unseen_margin(&self) -> usize {
        let mut side = self.window;
        let mut used = Vec::new();
        for k in &self.conv_kernels {
            if side < *k {
                return self.window;
            }
            let conv = side - k + 1;
            used.push((conv / POOL) * POOL);
            side = conv / POOL;
        }
        // Walk back: pooled rows used -> conv rows used -> input rows used.
        let mut rows = side;
        for (k, pooled_conv) in self.conv_kernels.iter().zip(&used).rev() {
            let conv_rows = (rows * POOL).min(*pooled_conv);
            rows = conv_rows + k - 1;
        }
        self.window - rows
    }

    /// Number of convolution layers.
    pub fn layers(&self) -> usize {
        self.conv_channels.len()
    }

    /// Side of the last pooled feature map for one window.
    pub fn feature_side(&self) -> usize {
        self.conv_kernels
            .iter()
            .fold(self.window, |side, k| (side - k + 1) / POOL)
    }

    /// Inputs of the hidden layer: channels x side x side of the last feature map.
    pub fn flat_features(&self) -> usize {
        let f = self.feature_side();
        self.conv_channels[self.layers() - 1] * f * f
    }

    /// The native stride of the score map: the product of the pooling factors.
    pub fn native_stride(&self) -> usize {
        POOL.pow(self.layers() as u32)
    }

    /// Input channels of convolution layer `i` (the image has one).
    pub fn conv_inputs(&self, i: usize) -> usize {
        if i == 0 { 1 } else { self.conv_channels[i - 1] }
    }

    /// Names and shapes of every weight tensor, in a fixed order.
    pub fn parameter_shapes(&self) -> Vec<(String, Vec<usize>)> {
        let mut out = Vec::new();
        for i in 0..self.layers() {
            let (c, k) = (self.conv_channels[i], self.conv_kernels[i]);
            out.push((
                format!("conv{}.weight", i + 1),
                vec![c, self.conv_inputs(i), k, k],
            ));
            out.push((format!("conv{}.bias", i + 1), vec![c]));
        }
        out.push((
            "hidden.weight".into(),
            vec![self.hidden, self.flat_features()],
        ));
        out.push(("hidden.bias".into(), vec![self.hidden]));
        out.push(("output.weight".into(), vec![self.classes, self.hidden]));
        out.push(("output.bias".into(), vec![self.classes]));
        out
    }

    /// Multiply-accumulates to classify one window on its own.
    pub fn window_macs(&self) -> u64 {
        let mut side = self.window;
        let mut macs = 0u64;
        for i in 0..self.layers() {
            let k = self.conv_kernels[i];
            let out = side - k + 1;
            macs += (out * out * k * k * self.conv_inputs(i) * self.conv_channels[i]) as u64;
            side = out / POOL;
        }
        macs + (self.flat_features() * self.hidden + self.hidden * self.classes) as u64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn default_arch() -> Architecture {
        Architecture::from_settings(&ModelSettings::default(), 100, 4).unwrap()
    }

    #[test]
    fn default_network_on_a_100_pixel_window() {
        // Hand calculation: 100 -5+1 = 96 -> 48; 48 -5+1 = 44 -> 22; 22 -3+1 = 20 -> 10.
        let a = default_arch();
        assert_eq!(a.feature_side(), 10);
        assert_eq!(a.flat_features(), 64 * 10 * 10);
        assert_eq!(a.native_stride(), 8);
        let shapes = a.parameter_shapes();
        assert_eq!(shapes[0], ("conv1.weight".to_string(), vec![16, 1, 5, 5]));
        assert_eq!(shapes[6], ("hidden.weight".to_string(), vec![128, 6400]));
    }

    #[test]
    fn odd_sides_drop_the_last_row_when_pooling_and_are_refused() {
        // 33 -3+1 = 31 -> 15 (floor): conv row 30, so pixel 32, is never seen.
        let a = Architecture {
            window: 33,
            conv_channels: vec![4],
            conv_kernels: vec![3],
            hidden: 8,
            dropout: 0.0,
            classes: 2,
        };
        assert_eq!(a.feature_side(), 15);
        assert_eq!(a.unseen_margin(), 1);
        let err = a.validate().unwrap_err().to_string();
        assert!(err.contains("32") && err.contains("34"), "{err}");
        // Default network at 32 pixels: 28 -> 14 -> 10 -> 5 -> 3 -> 1. Back from the
        // 1 x 1 map: conv3 rows 0-1, pool2 rows 0-3, conv2 rows 0-7, pool1 rows
        // 0-11, conv1 rows 0-23, pixels 0-27: 4 never seen (hand calculation).
        let d = Architecture {
            window: 32,
            ..default_arch()
        };
        assert_eq!(d.unseen_margin(), 4);
        assert_eq!(default_arch().unseen_margin(), 0);
    }

    #[test]
    fn too_small_window_is_refused_with_the_layer() {
        let err = Architecture::from_settings(&ModelSettings::default(), 20, 3).unwrap_err();
        assert!(err.to_string().contains("layer 3"), "{err}");
        assert!(err.is_bad_input());
    }

    #[test]
    fn one_class_is_refused() {
        assert!(Architecture::from_settings(&ModelSettings::default(), 100, 1).is_err());
    }
}
