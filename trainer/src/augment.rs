//! Augmentation that fits line drawings, applied to training windows only.
//!
//! Each window gets, in this order: a turn by a multiple of 90 degrees (only for
//! classes marked `rotatable` in `site.toml`, and for background); a shift of a
//! few pixels with a small horizontal or vertical skew (nearest-neighbour
//! resampling, paper outside); with some chance a stroke thickened by one pixel
//! or thinned by one pixel on one side (never below one pixel, so hairlines
//! survive); a contrast change (lighter ink, greyer paper); with some chance a
//! hard threshold; and with some chance speckle. Every random choice comes from
//! the [`SeededRng`] the caller passes, so a seed fixes the whole epoch.

use symtrust_labels::SeededRng;

/// How strong each augmentation is; [`Augmentation::none`] turns all off.
#[derive(Debug, Clone, PartialEq)]
pub struct Augmentation {
    /// Largest shift in pixels along each axis.
    pub max_shift: i64,
    /// Largest skew (pixels of shift per pixel of distance from the centre).
    pub max_skew: f64,
    /// Chance of thickening strokes by one pixel.
    pub p_thicken: f64,
    /// Chance of thinning strokes by one pixel on one side.
    pub p_thin: f64,
    /// Lowest ink intensity after the contrast change (1 keeps full ink).
    pub min_ink: f64,
    /// Highest paper intensity after the contrast change (0 keeps white paper).
    pub max_paper: f64,
    /// Chance of a hard threshold at a random level in `[0.3, 0.7]`.
    pub p_threshold: f64,
    /// Chance of speckle.
    pub p_speckle: f64,
    /// Largest fraction of pixels flipped by speckle.
    pub max_speckle: f64,
    /// Allow turns by 90 degrees for classes marked rotatable.
    pub rotate: bool,
}

impl Default for Augmentation {
    fn default() -> Self {
        Self {
            max_shift: 3,
            max_skew: 0.04,
            p_thicken: 0.2,
            p_thin: 0.2,
            min_ink: 0.6,
            max_paper: 0.12,
            p_threshold: 0.15,
            p_speckle: 0.3,
            max_speckle: 0.004,
            rotate: true,
        }
    }
}

impl Augmentation {
    /// No augmentation at all (the identity).
    pub fn none() -> Self {
        Self {
            max_shift: 0,
            max_skew: 0.0,
            p_thicken: 0.0,
            p_thin: 0.0,
            min_ink: 1.0,
            max_paper: 0.0,
            p_threshold: 0.0,
            p_speckle: 0.0,
            max_speckle: 0.0,
            rotate: false,
        }
    }

    /// An augmented copy of a square `side x side` ink image (ink 1, paper 0).
    pub fn apply(
        &self,
        ink: &[f32],
        side: usize,
        rotatable: bool,
        rng: &mut SeededRng,
    ) -> Vec<f32> {
        let mut img = ink.to_vec();
        if self.rotate && rotatable {
            let turns = rng.below(4);
            for _ in 0..turns {
                img = rotate90(&img, side);
            }
        }
        if self.max_shift > 0 || self.max_skew > 0.0 {
            let dx = rng.range_i64(-self.max_shift, self.max_shift);
            let dy = rng.range_i64(-self.max_shift, self.max_shift);
            let skew = rng.range_f64(-self.max_skew, self.max_skew);
            let horizontal = rng.chance(0.5);
            img = shift_skew(&img, side, dx, dy, skew, horizontal);
        }
        if rng.chance(self.p_thicken) {
            img = thicken(&img, side);
        } else if rng.chance(self.p_thin) {
            img = thin(&img, side, rng.below(4) as usize);
        }
        let ink_level = rng.range_f64(self.min_ink, 1.0) as f32;
        let paper = rng.range_f64(0.0, self.max_paper) as f32;
        for v in &mut img {
            *v = paper + *v * (ink_level - paper);
        }
        if rng.chance(self.p_threshold) {
            let t = rng.range_f64(0.3, 0.7) as f32;
            for v in &mut img {
                *v = if *v > t { 1.0 } else { 0.0 };
            }
        }
        if rng.chance(self.p_speckle) {
            let n = (rng.uniform() * self.max_speckle * (side * side) as f64) as usize;
            for _ in 0..n {
                let i = rng.below((side * side) as u64) as usize;
                img[i] = if rng.chance(0.5) { 1.0 } else { 0.0 };
            }
        }
        for v in &mut img {
            *v = v.clamp(0.0, 1.0);
        }
        img
    }
}

/// Turns a square image a quarter turn clockwise.
pub fn rotate90(img: &[f32], side: usize) -> Vec<f32> {
    let mut out = vec![0.0; img.len()];
    for y in 0..side {
        for x in 0..side {
            out[x * side + (side - 1 - y)] = img[y * side + x];
        }
    }
    out
}

/// Shifts by `(dx, dy)` and skews about the centre, nearest neighbour, paper outside.
fn shift_skew(img: &[f32], side: usize, dx: i64, dy: i64, skew: f64, horizontal: bool) -> Vec<f32> {
    let c = (side as f64 - 1.0) / 2.0;
    let mut out = vec![0.0; img.len()];
    for y in 0..side {
        for x in 0..side {
            let (mut sx, mut sy) = ((x as i64 - dx) as f64, (y as i64 - dy) as f64);
            if horizontal {
                sx -= skew * (y as f64 - c);
            } else {
                sy -= skew * (x as f64 - c);
            }
            let (sx, sy) = (sx.round() as i64, sy.round() as i64);
            if (0..side as i64).contains(&sx) && (0..side as i64).contains(&sy) {
                out[y * side + x] = img[sy as usize * side + sx as usize];
            }
        }
    }
    out
}

/// Grows strokes by one pixel: the maximum over the 4-neighbourhood.
fn thicken(img: &[f32], side: usize) -> Vec<f32> {
    let at = |x: usize, y: usize| img[y * side + x];
    let mut out = img.to_vec();
    for y in 0..side {
        for x in 0..side {
            let mut m = at(x, y);
            if x > 0 {
                m = m.max(at(x - 1, y));
            }
            if x + 1 < side {
                m = m.max(at(x + 1, y));
            }
            if y > 0 {
                m = m.max(at(x, y - 1));
            }
            if y + 1 < side {
                m = m.max(at(x, y + 1));
            }
            out[y * side + x] = m;
        }
    }
    out
}

/// Peels one pixel off the strokes' edges facing `dir` (0 left, 1 right, 2 up,
/// 3 down), only where the stroke is at least two pixels thick there.
fn thin(img: &[f32], side: usize, dir: usize) -> Vec<f32> {
    let (ox, oy): (i64, i64) = [(-1, 0), (1, 0), (0, -1), (0, 1)][dir];
    let get = |x: i64, y: i64| -> f32 {
        if (0..side as i64).contains(&x) && (0..side as i64).contains(&y) {
            img[y as usize * side + x as usize]
        } else {
            0.0
        }
    };
    let mut out = img.to_vec();
    for y in 0..side as i64 {
        for x in 0..side as i64 {
            let here = get(x, y);
            if here >= 0.5 && get(x + ox, y + oy) < 0.5 && get(x - ox, y - oy) >= 0.5 {
                out[y as usize * side + x as usize] = 0.0;
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bar(side: usize, row: usize, thickness: usize) -> Vec<f32> {
        let mut img = vec![0.0; side * side];
        for y in row..row + thickness {
            for x in 2..side - 2 {
                img[y * side + x] = 1.0;
            }
        }
        img
    }

    fn ink_rows(img: &[f32], side: usize) -> Vec<usize> {
        (0..side)
            .filter(|y| img[y * side..(y + 1) * side].iter().any(|v| *v > 0.5))
            .collect()
    }

    #[test]
    fn none_is_the_identity() {
        let img = bar(12, 5, 2);
        let out = Augmentation::none().apply(&img, 12, true, &mut SeededRng::new(1));
        assert_eq!(out, img);
    }

    #[test]
    fn four_quarter_turns_are_the_identity_and_one_turns_a_row_into_a_column() {
        let img = bar(10, 3, 1);
        let mut r = img.clone();
        for _ in 0..4 {
            r = rotate90(&r, 10);
        }
        assert_eq!(r, img);
        let once = rotate90(&img, 10);
        assert_eq!(ink_rows(&once, 10).len(), 6, "a vertical bar spans 6 rows");
    }

    #[test]
    fn non_rotatable_class_is_never_turned() {
        let aug = Augmentation {
            max_shift: 0,
            max_skew: 0.0,
            ..Augmentation::none()
        };
        let aug = Augmentation {
            rotate: true,
            ..aug
        };
        let img = bar(16, 7, 1);
        let mut rng = SeededRng::new(5);
        let mut turned = 0;
        for _ in 0..40 {
            assert_eq!(aug.apply(&img, 16, false, &mut rng), img);
            if aug.apply(&img, 16, true, &mut rng) != img {
                turned += 1;
            }
        }
        assert!(
            turned > 10,
            "a rotatable class turns in most draws ({turned}/40)"
        );
    }

    #[test]
    fn shift_moves_ink_by_at_most_max_shift() {
        let aug = Augmentation {
            max_shift: 2,
            ..Augmentation::none()
        };
        let img = bar(16, 7, 1);
        let mut rng = SeededRng::new(2);
        for _ in 0..30 {
            let rows = ink_rows(&aug.apply(&img, 16, false, &mut rng), 16);
            assert_eq!(rows.len(), 1);
            assert!((5..=9).contains(&rows[0]), "{rows:?}");
        }
    }

    #[test]
    fn thinning_keeps_hairlines_and_peels_thick_strokes() {
        let hair = bar(12, 4, 1);
        for dir in 0..4 {
            assert_eq!(ink_rows(&thin(&hair, 12, dir), 12), vec![4]);
        }
        let thick = bar(12, 4, 3);
        assert_eq!(ink_rows(&thin(&thick, 12, 2), 12), vec![5, 6]);
        assert_eq!(ink_rows(&thicken(&thick, 12), 12), vec![3, 4, 5, 6, 7]);
    }

    #[test]
    fn same_seed_same_augmentation_and_values_stay_in_range() {
        let img = bar(20, 8, 2);
        let aug = Augmentation::default();
        let a = aug.apply(&img, 20, true, &mut SeededRng::new(11));
        let b = aug.apply(&img, 20, true, &mut SeededRng::new(11));
        assert_eq!(a, b);
        assert!(a.iter().all(|v| (0.0..=1.0).contains(v)));
    }
}
