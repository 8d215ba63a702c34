//! Blank-paper skipping for the score map: how much ink a window holds, and
//! the threshold below which a window is treated as paper.
//!
//! A pixel is ink when its 8-bit value is below [`INK_LEVEL`] (paper 255,
//! ink 0). The score map counts the ink pixels of every window from an
//! integral image of the binarised tile (summed-area table, four look-ups per
//! window) and gives windows whose ink fraction is below the model's
//! threshold the scores of an all-paper window, without running the dense
//! layers for them.
//!
//! The threshold is chosen at training time from the training crops: half the
//! smallest ink fraction of any positive (non-background) training crop, so no
//! positive training crop would have been skipped, with a factor-of-two margin
//! for grid windows that sit a few pixels off a symbol's centre (the margin is
//! our design choice, not a published figure). It is stored in the model card
//! as `blank_ink_fraction`; 0 (cards written before the field existed, or a
//! positive crop with no ink) disables skipping.

/// Pixels darker than this (8-bit, paper 255) count as ink.
pub const INK_LEVEL: u8 = 128;

/// Margin: the threshold is this fraction of the smallest positive crop's ink fraction.
pub const THRESHOLD_MARGIN: f64 = 0.5;

/// Fraction of ink pixels in `pixels` (0 for an empty slice).
pub fn ink_fraction(pixels: &[u8]) -> f64 {
    if pixels.is_empty() {
        return 0.0;
    }
    pixels.iter().filter(|p| **p < INK_LEVEL).count() as f64 / pixels.len() as f64
}

/// The skipping threshold from positive training crops' pixels: half the
/// smallest ink fraction among them, 0 (no skipping) when there are none.
pub fn threshold_from_positives<'a>(positives: impl IntoIterator<Item = &'a [u8]>) -> f64 {
    let min = positives
        .into_iter()
        .map(ink_fraction)
        .fold(f64::INFINITY, f64::min);
    if min.is_finite() {
        THRESHOLD_MARGIN * min
    } else {
        0.0
    }
}

/// Ink counts of a `width x height` region, queried per rectangle in O(1).
#[derive(Debug, Clone)]
pub struct InkCounts {
    width: usize,
    sums: Vec<u32>,
}

impl InkCounts {
    /// The summed-area table of the binarised region (rows of `width` bytes).
    pub fn new(pixels: &[u8], width: usize, height: usize) -> Self {
        assert_eq!(pixels.len(), width * height, "region size");
        let stride = width + 1;
        let mut sums = vec![0u32; stride * (height + 1)];
        for y in 0..height {
            let mut row = 0u32;
            for x in 0..width {
                row += u32::from(pixels[y * width + x] < INK_LEVEL);
                sums[(y + 1) * stride + x + 1] = sums[y * stride + x + 1] + row;
            }
        }
        Self { width, sums }
    }

    /// Ink pixels in the `side x side` square with top-left `(x, y)`.
    pub fn square(&self, x: usize, y: usize, side: usize) -> u32 {
        let s = self.width + 1;
        let at = |xx: usize, yy: usize| self.sums[yy * s + xx];
        at(x + side, y + side) + at(x, y) - at(x + side, y) - at(x, y + side)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_match_a_brute_force_sum_and_the_threshold_keeps_every_positive() {
        let mut rng = symtrust_labels::SeededRng::new(8);
        let (w, h) = (23, 17);
        let px: Vec<u8> = (0..w * h).map(|_| rng.below(256) as u8).collect();
        let counts = InkCounts::new(&px, w, h);
        for (x, y, side) in [(0, 0, 17), (3, 5, 7), (22, 16, 1), (6, 0, 17)] {
            let brute = (y..y + side)
                .flat_map(|yy| (x..x + side).map(move |xx| (xx, yy)))
                .filter(|(xx, yy)| px[yy * w + xx] < INK_LEVEL)
                .count() as u32;
            assert_eq!(
                counts.square(x, y, side),
                brute,
                "square at ({x}, {y}) side {side}"
            );
        }
        // Hand calculation: crops with 2 and 5 ink pixels of 10 -> min 0.2 -> threshold 0.1.
        let a = [0u8, 0, 255, 255, 255, 255, 255, 255, 255, 255];
        let b = [0u8, 10, 20, 30, 127, 128, 200, 255, 255, 255];
        let t = threshold_from_positives([&a[..], &b[..]]);
        assert!((t - 0.1).abs() < 1e-12, "{t}");
        assert!(ink_fraction(&a) >= t && ink_fraction(&b) >= t);
        assert_eq!(threshold_from_positives(std::iter::empty()), 0.0);
    }
}
