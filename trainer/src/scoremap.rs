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
//! the sheet.
//!
//! # Kernels and blank paper
//!
//! The convolution stack runs through [`crate::ops`] (fast kernels); the
//! dense layers run through [`crate::kernels::head`] at each cell's patch of
//! the last feature map. With [`ScoreMapOptions::skip_below_ink`], windows
//! whose ink fraction is below the threshold (counted from an integral image
//! of the binarised tile, see [`crate::blank`]) get the scores of an
//! all-paper window and skip the dense layers; a tile with no window left
//! skips the convolutions too. [`ScoreMap::skipped`] counts those cells.
//!
//! Scores are softmax probabilities; `scores` is row-major by cell,
//! then class: `scores[(r * cols + c) * classes + k]`.

use crate::blank::InkCounts;
use crate::data::ink;
use crate::error::{Result, TensorContext, TrainerError};
use crate::infer::Classifier;
use crate::kernels::head::DenseHead;
use candle_core::{Device, Tensor};
use rayon::prelude::*;

/// How to sweep a sheet.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScoreMapOptions {
    /// Grid step in pixels; must divide the model's native stride.
    pub stride: usize,
    /// Tile side in native grid cells (memory per tile grows with its square).
    pub tile_cells: usize,
    /// Blank-paper skipping: windows whose ink fraction (see
    /// [`crate::blank`]) is below this get the scores of an all-paper window
    /// without running the dense layers. `None` or 0 computes every window.
    pub skip_below_ink: Option<f64>,
}

impl ScoreMapOptions {
    /// The native stride of `classifier`, the default tile and the model
    /// card's blank-paper threshold (no skipping without a card or with a
    /// card written before the threshold existed).
    pub fn native(classifier: &Classifier) -> Self {
        Self {
            stride: classifier.network.arch.native_stride(),
            tile_cells: DEFAULT_TILE_CELLS,
            skip_below_ink: classifier
                .card
                .as_ref()
                .map(|c| c.blank_ink_fraction)
                .filter(|t| *t > 0.0),
        }
    }

    /// [`ScoreMapOptions::native`] without skipping: every window computed.
    pub fn dense(classifier: &Classifier) -> Self {
        Self {
            skip_below_ink: None,
            ..Self::native(classifier)
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
    /// Cells given the all-paper scores by blank-paper skipping (0 without skipping).
    pub skipped: usize,
    /// The ink-fraction threshold that was applied (`None`: no skipping).
    pub skip_below_ink: Option<f64>,
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

    /// Cells of the grid.
    pub fn cells(&self) -> usize {
        self.rows * self.cols
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

/// What a tile sweep needs besides the tile: the dense head, the all-paper
/// scores and the threshold in ink pixels per window.
struct Sweep<'a> {
    head: DenseHead<'a, f32>,
    blank: Vec<f32>,
    min_ink: Option<u32>,
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
        let threshold = opts.skip_below_ink.filter(|t| *t > 0.0);
        if let Some(t) = threshold
            && !(t.is_finite() && t <= 1.0)
        {
            return Err(TrainerError::Settings {
                message: format!("blank-paper threshold {t} must be an ink fraction in [0, 1]"),
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
        let dense = self
            .network
            .dense_values()
            .during("reading the dense layers")?;
        let blank = match threshold {
            Some(_) => self.classify(&[&vec![255u8; window * window]])?.remove(0),
            None => Vec::new(),
        };
        let sweep = Sweep {
            head: DenseHead {
                hidden_w: &dense[0],
                hidden_b: &dense[1],
                out_w: &dense[2],
                out_b: &dense[3],
                channels: arch.conv_channels[arch.layers() - 1],
                side: arch.feature_side(),
            },
            blank,
            // Skip when ink / window^2 < t, i.e. ink < ceil(t window^2).
            min_ink: threshold.map(|t| (t * (window * window) as f64).ceil() as u32),
        };
        // One tile per worker at a time: each tile's kernels run on its own
        // thread, so peak memory is a few tiles' worth whatever the sheet.
        let done: Vec<(Vec<f32>, usize)> = jobs
            .par_iter()
            .map(|t| self.tile_scores(pixels, width, t, &sweep))
            .collect::<Result<_>>()?;
        let mut scores = vec![0f32; rows * cols * k];
        let mut skipped = 0;
        for (t, (tile, n_skipped)) in jobs.iter().zip(done) {
            skipped += n_skipped;
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
        Ok(ScoreMap {
            classes: self.classes.clone(),
            window,
            stride: opts.stride,
            cols,
            rows,
            scores,
            skipped,
            skip_below_ink: threshold,
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

    /// Probabilities of one tile's cells, cell-major then class, and how many
    /// cells were skipped as blank paper.
    fn tile_scores(
        &self,
        pixels: &[u8],
        width: usize,
        t: &Tile,
        sweep: &Sweep<'_>,
    ) -> Result<(Vec<f32>, usize)> {
        let arch = &self.network.arch;
        let (native, window) = (arch.native_stride(), arch.window);
        let k = self.classes.len();
        let w = native * (t.cols - 1) + window;
        let h = native * (t.rows - 1) + window;
        let mut raw = Vec::with_capacity(w * h);
        for y in t.y0..t.y0 + h {
            raw.extend_from_slice(&pixels[y * width + t.x0..y * width + t.x0 + w]);
        }
        let cells: Vec<(usize, usize)> = (0..t.rows)
            .flat_map(|i| (0..t.cols).map(move |j| (i, j)))
            .collect();
        let active: Vec<(usize, usize)> = match sweep.min_ink {
            None => cells.clone(),
            Some(min_ink) => {
                let counts = InkCounts::new(&raw, w, h);
                cells
                    .iter()
                    .copied()
                    .filter(|(i, j)| counts.square(j * native, i * native, window) >= min_ink)
                    .collect()
            }
        };
        let skipped = cells.len() - active.len();
        let mut out = if skipped > 0 {
            sweep.blank.repeat(cells.len())
        } else {
            Vec::new()
        };
        if active.is_empty() {
            return Ok((out, skipped));
        }
        let region: Vec<f32> = raw.iter().map(|p| ink(*p)).collect();
        let features = || -> candle_core::Result<(Vec<f32>, usize, usize)> {
            let x = Tensor::from_vec(region, (1, 1, h, w), &Device::Cpu)?;
            let f = self.network.features(&x)?;
            let (_, _, fh, fw) = f.dims4()?;
            Ok((f.flatten_all()?.to_vec1::<f32>()?, fh, fw))
        };
        let (feats, fh, fw) = features().during("computing a score-map tile")?;
        let logits = sweep.head.logits(&feats, fh, fw, &active);
        if skipped == 0 {
            out = logits;
            out.chunks_mut(k).for_each(softmax);
        } else {
            for ((i, j), row) in active.iter().zip(logits.chunks(k)) {
                let dst = &mut out[(i * t.cols + j) * k..][..k];
                dst.copy_from_slice(row);
                softmax(dst);
            }
        }
        Ok((out, skipped))
    }
}

/// In-place softmax of one cell's logits (max-shifted, as Candle's).
fn softmax(v: &mut [f32]) {
    let m = v.iter().fold(f32::NEG_INFINITY, |a, b| a.max(*b));
    let mut sum = 0.0;
    for x in v.iter_mut() {
        *x = (*x - m).exp();
        sum += *x;
    }
    for x in v.iter_mut() {
        *x /= sum;
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
