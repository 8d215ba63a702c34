//! The dense layers applied at chosen cells of a feature map: the hidden
//! layer as an `F x F` convolution (its weights `(hidden, C F F)` read as one
//! matrix), ReLU, then the output layer, without autograd.
//!
//! For a batch of cells, each cell's `C x F x F` patch is copied into one row
//! of a `cells x C F F` matrix, so `hidden = patches W_h^T` and
//! `logits = relu(hidden + b_h) W_o^T + b_o` are two GEMMs. Only the cells
//! asked for are computed, which is how the score map skips blank paper.

use super::Float;
use super::matmul::{View, gemm};

/// Cells per GEMM (the patch buffer is `CELLS x C F F`, 6.5 MB of f32 for the
/// default network).
const CELLS: usize = 256;

/// The two dense layers, borrowed from the network's weights.
#[derive(Debug, Clone, Copy)]
pub struct DenseHead<'a, T> {
    /// Hidden weights, `hidden x (channels * side * side)` row-major.
    pub hidden_w: &'a [T],
    /// Hidden biases.
    pub hidden_b: &'a [T],
    /// Output weights, `classes x hidden` row-major.
    pub out_w: &'a [T],
    /// Output biases.
    pub out_b: &'a [T],
    /// Channels of the feature map.
    pub channels: usize,
    /// Side `F` of the hidden layer's kernel (the feature side of one window).
    pub side: usize,
}

impl<T: Float> DenseHead<'_, T> {
    /// Logits `cells x classes` at feature-map cells `(row, col)` (top-left of
    /// each `F x F` patch) of a `channels x fh x fw` map.
    ///
    /// # Panics
    /// When a patch reaches past the map or the weights' sizes disagree.
    pub fn logits(&self, features: &[T], fh: usize, fw: usize, cells: &[(usize, usize)]) -> Vec<T> {
        let (c, f) = (self.channels, self.side);
        let kp = c * f * f;
        let hidden = self.hidden_b.len();
        let classes = self.out_b.len();
        assert_eq!(self.hidden_w.len(), hidden * kp, "hidden weights");
        assert_eq!(self.out_w.len(), classes * hidden, "output weights");
        assert_eq!(features.len(), c * fh * fw, "feature map");
        let mut out = vec![T::ZERO; cells.len() * classes];
        let mut patches = vec![T::ZERO; CELLS.min(cells.len()) * kp];
        let mut h = vec![T::ZERO; CELLS.min(cells.len()) * hidden];
        for (chunk, dst) in cells.chunks(CELLS).zip(out.chunks_mut(CELLS * classes)) {
            let n = chunk.len();
            for (j, &(r, col)) in chunk.iter().enumerate() {
                assert!(
                    r + f <= fh && col + f <= fw,
                    "cell ({r}, {col}) outside the map"
                );
                let row = &mut patches[j * kp..(j + 1) * kp];
                for ch in 0..c {
                    for ky in 0..f {
                        let src = (ch * fh + r + ky) * fw + col;
                        row[(ch * f + ky) * f..][..f].copy_from_slice(&features[src..src + f]);
                    }
                }
            }
            let h = &mut h[..n * hidden];
            gemm(
                h,
                hidden,
                View::rows(&patches[..n * kp], n, kp, kp),
                View::rows(self.hidden_w, hidden, kp, kp).t(),
                false,
            );
            for row in h.chunks_mut(hidden) {
                for (v, b) in row.iter_mut().zip(self.hidden_b) {
                    let s = *v + *b;
                    *v = if s < T::ZERO { T::ZERO } else { s };
                }
            }
            gemm(
                dst,
                classes,
                View::rows(h, n, hidden, hidden),
                View::rows(self.out_w, classes, hidden, hidden).t(),
                false,
            );
            for row in dst.chunks_mut(classes) {
                for (v, b) in row.iter_mut().zip(self.out_b) {
                    *v += *b;
                }
            }
        }
        out
    }
}
