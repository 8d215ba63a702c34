//! Fully-convolutional score maps over a whole sheet.
//!
//! The convolution stack runs once over the sheet and the dense layers are
//! applied as convolutions (the hidden layer as an `F x F` kernel over the last
//! feature map, the output layer as `1 x 1`), so every window position on the
//! native grid gets its scores without classifying windows one by one.
//!
//! # Alignment
//!
//! Grid cell `(r, c)` is the window whose top-left pixel is
//! `(x, y) = (c * stride, r * stride)` and which lies fully inside the sheet:
//! `cols = (width - window) / stride + 1`, `rows = (height - window) / stride + 1`
//! (integer division). A window that would cross the right or bottom edge has no
//! cell; the last `(width - window) % stride` columns of pixels are seen only by
//! windows that also cover pixels to their left. Its scores equal those of
//! [`crate::infer::Classifier::classify`] on that window (tested).
//!
//! # Strides and tiles
//!
//! The native stride is the product of the pooling factors (`2^layers`, 8 for
//! three layers); a finer stride that divides it is made by shifted passes, one
//! per offset `(dx, dy)` in multiples of the stride. Each pass is cut into tiles
//! of `tile_cells x tile_cells` native cells whose pixel regions overlap by
//! `window - native stride`; tiles run in parallel, at most one per thread at a
//! time, so peak memory depends on the tile size and the thread count, not on
//! the sheet. Scores are softmax probabilities; `scores` is row-major by cell,
//! then class: `scores[(r * cols + c) * classes + k]`.

use crate::data::ink;
use crate::error::{Result, TensorContext, TrainerError};
use crate::infer::Classifier;
use candle_core::{Device, Tensor};
use rayon::prelude::*;

/// How to sweep a sheet.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ScoreMapOptions {
    /// Grid step in pixels; must divide the model's native stride.
    pub stride: usize,
    /// Tile side in native grid cells (memory per tile grows with its square).
    pub tile_cells: usize,
}

impl ScoreMapOptions {
    /// The native stride of `classifier` and the default tile.
    pub fn native(classifier: &Classifier) -> Self {
        Self {
            stride: classifier.network.arch.native_stride(),
            tile_cells: DEFAULT_TILE_CELLS,
        }
    }
}

/// Default tile side in native cells (608 x 608 pixels for the default network).
pub const DEFAULT_TILE_CELLS: usize = 64;

/// Per-class scores at every window position of a sheet.
#[derive(Debug, Clone, PartialEq)]
pub struct ScoreMap {
    /// Class names, in score order.
    pub classes: Vec<String>,
    /// Window side in pixels.
    pub window: usize,
    /// Grid step in pixels.
    pub stride: usize,
    /// Grid columns.
    pub cols: usize,
    /// Grid rows.
    pub rows: usize,
    /// `rows * cols * classes` probabilities, cell-major.
    pub scores: Vec<f32>,
}

impl ScoreMap {
    /// The scores of cell `(row, col)`, one per class.
    pub fn cell(&self, row: usize, col: usize) -> &[f32] {
        let k = self.classes.len();
        let i = (row * self.cols + col) * k;
        &self.scores[i..i + k]
    }

    /// Top-left pixel `(x, y)` of the window of cell `(row, col)`.
    pub fn window_origin(&self, row: usize, col: usize) -> (usize, usize) {
        (col * self.stride, row * self.stride)
    }
}

/// Grid `(cols, rows)` of windows fully inside a `width x height` sheet.
pub fn grid_size(width: usize, height: usize, window: usize, stride: usize) -> (usize, usize) {
    let n = |side: usize| {
        if side < window {
            0
        } else {
            (side - window) / stride + 1
        }
    };
    (n(width), n(height))
}

struct Tile {
    x0: usize,
    y0: usize,
    cols: usize,
    rows: usize,
}

impl Classifier {
    /// The score map of an 8-bit sheet (`width * height` bytes, paper 255, ink 0).
    pub fn score_map(
        &self,
        pixels: &[u8],
        width: usize,
        height: usize,
        opts: &ScoreMapOptions,
    ) -> Result<ScoreMap> {
        let arch = &self.network.arch;
        let (window, native) = (arch.window, arch.native_stride());
        if pixels.len() != width * height {
            return Err(TrainerError::Settings {
                message: format!(
                    "sheet buffer holds {} bytes, {width} x {height} needs {}",
                    pixels.len(),
                    width * height
                ),
            });
        }
        if opts.stride == 0 || native % opts.stride != 0 || opts.tile_cells == 0 {
            return Err(TrainerError::Settings {
                message: format!(
                    "stride {} must divide the model's native stride {native}, and tiles must be positive",
                    opts.stride
                ),
            });
        }
        if width < window || height < window {
            return Err(TrainerError::WindowMismatch {
                what: "sheet".to_string(),
                expected: format!("at least {window} x {window}"),
                found: format!("{width} x {height}"),
            });
        }
        let (cols, rows) = grid_size(width, height, window, opts.stride);
        let k = self.classes.len();
        let mut scores = vec![0f32; rows * cols * k];
        let mut jobs = Vec::new();
        for dy in (0..native).step_by(opts.stride) {
            for dx in (0..native).step_by(opts.stride) {
                let (pc, pr) = grid_size(
                    width.saturating_sub(dx),
                    height.saturating_sub(dy),
                    window,
                    native,
                );
                for r0 in (0..pr).step_by(opts.tile_cells) {
                    for c0 in (0..pc).step_by(opts.tile_cells) {
                        jobs.push(Tile {
                            x0: dx + c0 * native,
                            y0: dy + r0 * native,
                            cols: opts.tile_cells.min(pc - c0),
                            rows: opts.tile_cells.min(pr - r0),
                        });
                    }
                }
            }
        }
        let threads = rayon::current_num_threads().max(1);
        for group in jobs.chunks(threads) {
            let done: Vec<Vec<f32>> = group
                .par_iter()
                .map(|t| self.tile_scores(pixels, width, t))
                .collect::<Result<_>>()?;
            for (t, tile) in group.iter().zip(done) {
                for i in 0..t.rows {
                    for j in 0..t.cols {
                        let r = (t.y0 + i * native) / opts.stride;
                        let c = (t.x0 + j * native) / opts.stride;
                        let src = (i * t.cols + j) * k;
                        let dst = (r * cols + c) * k;
                        scores[dst..dst + k].copy_from_slice(&tile[src..src + k]);
                    }
                }
            }
        }
        Ok(ScoreMap {
            classes: self.classes.clone(),
            window,
            stride: opts.stride,
            cols,
            rows,
            scores,
        })
    }

    /// The score map of a grayscale image (paper 255, ink 0).
    pub fn score_map_image(
        &self,
        sheet: &image::GrayImage,
        opts: &ScoreMapOptions,
    ) -> Result<ScoreMap> {
        self.score_map(
            sheet.as_raw(),
            sheet.width() as usize,
            sheet.height() as usize,
            opts,
        )
    }

    /// Probabilities of one tile's cells, cell-major then class.
    fn tile_scores(&self, pixels: &[u8], width: usize, t: &Tile) -> Result<Vec<f32>> {
        let arch = &self.network.arch;
        let native = arch.native_stride();
        let w = native * (t.cols - 1) + arch.window;
        let h = native * (t.rows - 1) + arch.window;
        let mut region = Vec::with_capacity(w * h);
        for y in t.y0..t.y0 + h {
            let row = &pixels[y * width + t.x0..y * width + t.x0 + w];
            region.extend(row.iter().map(|p| ink(*p)));
        }
        let run = || -> candle_core::Result<Vec<f32>> {
            let x = Tensor::from_vec(region, (1, 1, h, w), &Device::Cpu)?;
            let logits = self.network.forward_dense_as_conv(&x)?;
            let logits = logits.narrow(2, 0, t.rows)?.narrow(3, 0, t.cols)?;
            let probs = candle_nn::ops::softmax(&logits, 1)?;
            probs
                .squeeze(0)?
                .permute((1, 2, 0))?
                .flatten_all()?
                .to_vec1::<f32>()
        };
        run().during("computing a score-map tile")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grid_counts_only_windows_fully_inside() {
        // Hand calculation: width 131, window 100, stride 8: x = 0, 8, 16, 24 fit
        // (24 + 100 = 124 <= 131), 32 + 100 = 132 does not -> 4 columns.
        assert_eq!(grid_size(131, 100, 100, 8), (4, 1));
        assert_eq!(grid_size(132, 99, 100, 8), (5, 0));
    }
}
