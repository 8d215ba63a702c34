//! Scan realism: the Kanungo document degradation model, blur, skew and paper noise.
//!
//! Kanungo et al. flip each pixel of a clean binary page with probability
//! `alpha0 * exp(-alpha * d^2) + eta` for ink and `beta0 * exp(-beta * d^2) + eta`
//! for paper, `d` the Euclidean distance (pixels) to the nearest pixel of the other
//! colour, then close the result with a `k x k` square. The decay constants are
//! given at 200 dpi and scaled as `alpha_px = alpha_200 * (200 / dpi)^2`, so the
//! degraded band has the same width on paper at every resolution. Distances are
//! needed only up to the point where `exp(-alpha d^2)` is negligible, so the
//! distance transform is exact Euclidean but capped: a column pass (two sweeps)
//! followed by a row pass over the `2 C + 1` neighbouring columns. After that come
//! a Gaussian blur, a rotation about the sheet centre (bilinear) and grey paper
//! with additive noise.

use super::raster::Mask;
use crate::geometry::BBox;
use crate::rng::SeededRng;
use image::GrayImage;
use rayon::prelude::*;

/// Degradation settings (decay constants at 200 dpi).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Degradation {
    /// Ink flip amplitude at the ink edge.
    pub alpha0: f64,
    /// Ink flip decay at 200 dpi (per pixel squared).
    pub alpha: f64,
    /// Paper flip amplitude at the ink edge.
    pub beta0: f64,
    /// Paper flip decay at 200 dpi.
    pub beta: f64,
    /// Flip probability everywhere (salt and pepper).
    pub eta: f64,
    /// Side of the square closing element at 200 dpi (0 or 1 = no closing).
    pub closing: usize,
    /// Gaussian blur sigma in pixels at 200 dpi (0 = none).
    pub blur_sigma: f64,
    /// Largest skew, degrees; each sheet draws its own angle in `[-max, max]`.
    pub max_skew_deg: f64,
    /// Grey level of paper (0-255).
    pub paper_level: f64,
    /// Grey level of ink (0-255).
    pub ink_level: f64,
    /// Standard deviation of the additive grey noise.
    pub noise_sd: f64,
}

impl Default for Degradation {
    /// A fair office scan.
    fn default() -> Self {
        Self {
            alpha0: 0.9,
            alpha: 1.6,
            beta0: 0.9,
            beta: 1.6,
            eta: 0.0003,
            closing: 2,
            blur_sigma: 0.6,
            max_skew_deg: 1.0,
            paper_level: 246.0,
            ink_level: 22.0,
            noise_sd: 4.0,
        }
    }
}

impl Degradation {
    /// No degradation at all: the clean render, paper 255 and ink 0.
    pub fn none() -> Self {
        Self {
            alpha0: 0.0,
            alpha: 1.0,
            beta0: 0.0,
            beta: 1.0,
            eta: 0.0,
            closing: 0,
            blur_sigma: 0.0,
            max_skew_deg: 0.0,
            paper_level: 255.0,
            ink_level: 0.0,
            noise_sd: 0.0,
        }
    }

    /// Only a skew (no flips, blur or noise), for checking box transforms.
    pub fn skew_only(max_skew_deg: f64) -> Self {
        Self {
            max_skew_deg,
            ..Self::none()
        }
    }

    fn flips(&self) -> bool {
        self.alpha0 > 0.0 || self.beta0 > 0.0 || self.eta > 0.0
    }
}

/// Largest distance (pixels) the capped transform resolves for decay `a_px`:
/// beyond it `exp(-a d^2) < 1e-4`.
pub(crate) fn distance_cap(a_px: f64) -> usize {
    ((9.2103 / a_px.max(1e-6)).sqrt().ceil() as usize).clamp(1, 15)
}

/// Scratch buffers for [`distance_row`].
struct RowScratch {
    /// Column distance to the nearest ink, padded by `cap` on both sides.
    to_ink: Vec<u8>,
    /// Column distance to the nearest paper, padded likewise.
    to_paper: Vec<u8>,
    /// Best squared distance to ink / to paper.
    best_ink: Vec<u8>,
    best_paper: Vec<u8>,
}

impl RowScratch {
    fn new(w: usize, cap: usize) -> Self {
        Self {
            to_ink: vec![0; w + 2 * cap],
            to_paper: vec![0; w + 2 * cap],
            best_ink: vec![0; w],
            best_paper: vec![0; w],
        }
    }
}

/// Squared distances of row `j` to the nearest other-colour pixel, exact up to
/// `cap` (farther: `u8::MAX`), written into `out`. The column distance of each
/// colour is the smallest `|dy| <= cap` at which that colour occurs; the row
/// pass then takes `min dx^2 + col^2` over `|dx| <= cap` (separable, exact).
fn distance_row(m: &Mask, j: usize, cap: usize, sc: &mut RowScratch, out: &mut [u8]) {
    let (w, h) = (m.width as usize, m.height as usize);
    let far = (cap + 1) as u8;
    sc.to_ink.fill(far);
    sc.to_paper.fill(far);
    for dy in (0..=cap).rev() {
        let d = dy as u8;
        for y in [j.checked_sub(dy), (j + dy < h).then_some(j + dy)]
            .into_iter()
            .flatten()
        {
            let row = &m.data[y * w..(y + 1) * w];
            let ti = &mut sc.to_ink[cap..cap + w];
            let tp = &mut sc.to_paper[cap..cap + w];
            for ((a, b), &v) in ti.iter_mut().zip(tp.iter_mut()).zip(row) {
                let ink = v != 0;
                *a = if ink { (*a).min(d) } else { *a };
                *b = if ink { *b } else { (*b).min(d) };
            }
        }
    }
    let big = u8::MAX;
    sc.best_ink.fill(big);
    sc.best_paper.fill(big);
    for dx in 0..=2 * cap {
        let off = (dx as i64 - cap as i64).unsigned_abs() as u16;
        let dx2 = off * off;
        let ti = &sc.to_ink[dx..dx + w];
        let tp = &sc.to_paper[dx..dx + w];
        for k in 0..w {
            let gi = u16::from(ti[k]);
            let gp = u16::from(tp[k]);
            let ci = if ti[k] < far {
                (dx2 + gi * gi).min(254) as u8
            } else {
                big
            };
            let cp = if tp[k] < far {
                (dx2 + gp * gp).min(254) as u8
            } else {
                big
            };
            sc.best_ink[k] = sc.best_ink[k].min(ci);
            sc.best_paper[k] = sc.best_paper[k].min(cp);
        }
    }
    let cap2 = (cap * cap) as u8;
    let row = &m.data[j * w..(j + 1) * w];
    for k in 0..w {
        let v = if row[k] != 0 {
            sc.best_paper[k]
        } else {
            sc.best_ink[k]
        };
        out[k] = if v <= cap2 { v } else { big };
    }
}

/// Squared distance of every pixel to the nearest pixel of the other colour,
/// exact up to `cap`; farther pixels get `u8::MAX`.
#[cfg(test)]
pub(crate) fn capped_distance_sq(m: &Mask, cap: usize) -> Vec<u8> {
    let w = m.width as usize;
    let mut out = vec![u8::MAX; w * m.height as usize];
    out.par_chunks_mut(w).enumerate().for_each_init(
        || RowScratch::new(w, cap),
        |sc, (j, orow)| distance_row(m, j, cap, sc, orow),
    );
    out
}

/// Kanungo flips of a binary mask, closing excluded. Pixels far from any edge
/// flip with probability `eta` only; the gaps between such flips are drawn as
/// geometric jumps, so the random stream is spent on edge pixels.
fn kanungo_flip(m: &Mask, d: &Degradation, dpi: f64, seed: u64) -> Mask {
    let scale = (200.0 / dpi).powi(2);
    let (a_px, b_px) = (d.alpha * scale, d.beta * scale);
    let cap = distance_cap(a_px.min(b_px));
    let table = |amp: f64, decay: f64| -> Vec<f64> {
        (0..=cap * cap)
            .map(|k| amp * (-decay * k as f64).exp() + d.eta)
            .collect()
    };
    let (p_ink, p_paper) = (table(d.alpha0, a_px), table(d.beta0, b_px));
    let w = m.width as usize;
    let log_keep = (1.0 - d.eta).ln();
    let mut out = m.clone();
    out.data.par_chunks_mut(w).enumerate().for_each_init(
        || (RowScratch::new(w, cap), vec![0u8; w]),
        |(sc, d2), (j, row)| {
            distance_row(m, j, cap, sc, d2);
            let mut rng = SeededRng::derive(seed, &format!("kanungo/{j}"));
            let gap = |rng: &mut SeededRng| -> u64 {
                if d.eta <= 0.0 {
                    u64::MAX
                } else {
                    ((1.0 - rng.uniform()).ln() / log_keep).floor().min(1e18) as u64
                }
            };
            let mut skip = gap(&mut rng);
            for (v, &dd) in row.iter_mut().zip(d2.iter()) {
                if dd == u8::MAX {
                    if skip == 0 {
                        *v ^= 1;
                        skip = gap(&mut rng);
                    } else {
                        skip -= 1;
                    }
                } else {
                    let p = if *v != 0 {
                        p_ink[dd as usize]
                    } else {
                        p_paper[dd as usize]
                    };
                    if rng.uniform() < p {
                        *v ^= 1;
                    }
                }
            }
        },
    );
    out
}

/// Binary closing with a `k x k` square (dilation over offsets `0..k` backwards,
/// then erosion over offsets `0..k` forwards), so the result does not shift.
pub(crate) fn closing(m: &Mask, k: usize) -> Mask {
    if k <= 1 {
        return m.clone();
    }
    let dil = pass(m, k, true);
    pass(&dil, k, false)
}

/// One separable max (dilate) or min (erode) pass.
fn pass(m: &Mask, k: usize, dilate: bool) -> Mask {
    let (w, h) = (m.width as usize, m.height as usize);
    let window = |x: usize, n: usize| -> (usize, usize) {
        if dilate {
            (x.saturating_sub(k - 1), x)
        } else {
            (x, (x + k - 1).min(n - 1))
        }
    };
    let mut horiz = m.data.clone();
    horiz.par_chunks_mut(w).enumerate().for_each(|(j, out)| {
        let row = &m.data[j * w..(j + 1) * w];
        for a in 1..k.min(w) {
            if dilate {
                for (o, s) in out[a..].iter_mut().zip(&row[..w - a]) {
                    *o = (*o).max(*s);
                }
            } else {
                for (o, s) in out[..w - a].iter_mut().zip(&row[a..]) {
                    *o = (*o).min(*s);
                }
            }
        }
    });
    let mut data = vec![0u8; w * h];
    data.par_chunks_mut(w).enumerate().for_each(|(j, out)| {
        let (a, b) = window(j, h);
        out.copy_from_slice(&horiz[a * w..(a + 1) * w]);
        for r in a + 1..=b {
            let src = &horiz[r * w..(r + 1) * w];
            for (o, s) in out.iter_mut().zip(src) {
                *o = if dilate { (*o).max(*s) } else { (*o).min(*s) };
            }
        }
    });
    Mask {
        width: m.width,
        height: m.height,
        data,
    }
}

/// Separable Gaussian blur of a grey buffer (fixed-point weights).
fn blur(img: &mut [u8], w: usize, h: usize, sigma: f64) {
    if sigma <= 0.0 {
        return;
    }
    let rad = (3.0 * sigma).ceil() as usize;
    let raw: Vec<f64> = (0..=2 * rad)
        .map(|k| {
            let x = k as f64 - rad as f64;
            (-x * x / (2.0 * sigma * sigma)).exp()
        })
        .collect();
    let sum: f64 = raw.iter().sum();
    let wts: Vec<u32> = raw
        .iter()
        .map(|v| (v / sum * 4096.0).round() as u32)
        .collect();
    let norm: u32 = wts.iter().sum();
    let mut tmp = vec![0u8; w * h];
    tmp.par_chunks_mut(w).enumerate().for_each_init(
        || (vec![0u8; w + 2 * rad], vec![0u32; w]),
        |(pad, acc), (j, out)| {
            let row = &img[j * w..(j + 1) * w];
            pad[..rad].fill(row[0]);
            pad[rad..rad + w].copy_from_slice(row);
            pad[rad + w..].fill(row[w - 1]);
            acc.fill(0);
            for (k, wt) in wts.iter().enumerate() {
                for (a, p) in acc.iter_mut().zip(&pad[k..k + w]) {
                    *a += wt * u32::from(*p);
                }
            }
            for (o, a) in out.iter_mut().zip(acc.iter()) {
                *o = ((a + norm / 2) / norm) as u8;
            }
        },
    );
    img.par_chunks_mut(w).enumerate().for_each(|(j, out)| {
        let mut acc = vec![0u32; w];
        for (k, wt) in wts.iter().enumerate() {
            let y = (j + k).saturating_sub(rad).min(h - 1);
            for (a, s) in acc.iter_mut().zip(&tmp[y * w..(y + 1) * w]) {
                *a += wt * u32::from(*s);
            }
        }
        for (o, a) in out.iter_mut().zip(acc) {
            *o = ((a + norm / 2) / norm) as u8;
        }
    });
}

/// Rotation of a point about `(cx, cy)` by `theta` radians (clockwise on screen,
/// y down): the place where content at `p` lands after the skew.
pub(crate) fn rotate_point(p: (f64, f64), theta: f64, c: (f64, f64)) -> (f64, f64) {
    let (s, co) = theta.sin_cos();
    let (dx, dy) = (p.0 - c.0, p.1 - c.1);
    (c.0 + co * dx - s * dy, c.1 + s * dx + co * dy)
}

/// The axis-aligned bounds of a box's four corners after the rotation.
pub(crate) fn rotate_box(b: &BBox, theta: f64, c: (f64, f64)) -> BBox {
    let corners = [
        (b.x, b.y),
        (b.right(), b.y),
        (b.x, b.bottom()),
        (b.right(), b.bottom()),
    ];
    let pts: Vec<(f64, f64)> = corners.iter().map(|p| rotate_point(*p, theta, c)).collect();
    let x0 = pts.iter().map(|p| p.0).fold(f64::INFINITY, f64::min);
    let x1 = pts.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
    let y0 = pts.iter().map(|p| p.1).fold(f64::INFINITY, f64::min);
    let y1 = pts.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max);
    BBox::new(x0, y0, x1 - x0, y1 - y0)
}

/// Bilinear rotation of a grey buffer about its centre; outside is paper (255).
/// Source coordinates advance by a constant step along a row, in fixed point
/// with 24 fractional bits (drift under 0.001 px across an A0 row).
fn rotate(img: &[u8], w: usize, h: usize, theta: f64) -> Vec<u8> {
    const BITS: i64 = 24;
    const ONE: i64 = 1 << BITS;
    let c = (w as f64 / 2.0, h as f64 / 2.0);
    let (s, co) = (-theta).sin_cos();
    let mut out = vec![255u8; w * h];
    out.par_chunks_mut(w).enumerate().for_each(|(j, orow)| {
        let py = j as f64 + 0.5 - c.1;
        let px0 = 0.5 - c.0;
        let mut sx = ((c.0 + co * px0 - s * py - 0.5) * ONE as f64).round() as i64;
        let mut sy = ((c.1 + s * px0 + co * py - 0.5) * ONE as f64).round() as i64;
        let (stx, sty) = (
            (co * ONE as f64).round() as i64,
            (s * ONE as f64).round() as i64,
        );
        let get = |x: i64, y: i64| -> i64 {
            if x < 0 || y < 0 || x >= w as i64 || y >= h as i64 {
                255
            } else {
                i64::from(img[y as usize * w + x as usize])
            }
        };
        for o in orow.iter_mut() {
            let (x0, y0) = (sx >> BITS, sy >> BITS);
            let (fx, fy) = (sx & (ONE - 1), sy & (ONE - 1));
            let (p00, p10, p01, p11) =
                if x0 >= 0 && y0 >= 0 && x0 + 1 < w as i64 && y0 + 1 < h as i64 {
                    let k = y0 as usize * w + x0 as usize;
                    (
                        i64::from(img[k]),
                        i64::from(img[k + 1]),
                        i64::from(img[k + w]),
                        i64::from(img[k + w + 1]),
                    )
                } else {
                    (
                        get(x0, y0),
                        get(x0 + 1, y0),
                        get(x0, y0 + 1),
                        get(x0 + 1, y0 + 1),
                    )
                };
            let top = p00 * (ONE - fx) + p10 * fx;
            let bot = p01 * (ONE - fx) + p11 * fx;
            let v = (top * (ONE - fy) + bot * fy + (1 << (2 * BITS - 1))) >> (2 * BITS);
            *o = v.clamp(0, 255) as u8;
            sx += stx;
            sy += sty;
        }
    });
    out
}

/// Maps 0..255 onto ink..paper levels and adds grey noise.
fn paper_and_noise(img: &mut [u8], w: usize, d: &Degradation, seed: u64) {
    let span = (d.paper_level - d.ink_level) / 255.0;
    let level: Vec<f32> = (0..256)
        .map(|v| (d.ink_level + span * f64::from(v)) as f32)
        .collect();
    // Irwin-Hall: the sum of four uniform 16-bit words, standardised
    // (mean 4 * 65535 / 2, standard deviation 65536 * sqrt(4 / 12)).
    let k = (d.noise_sd / 37_837.0) as f32;
    img.par_chunks_mut(w).enumerate().for_each(|(j, row)| {
        let mut rng = SeededRng::derive(seed, &format!("paper/{j}"));
        for v in row.iter_mut() {
            let n = if d.noise_sd > 0.0 {
                let r = rng.next_u64();
                let sum = (r & 0xffff) + ((r >> 16) & 0xffff) + ((r >> 32) & 0xffff) + (r >> 48);
                (sum as f32 - 131_070.0) * k
            } else {
                0.0
            };
            *v = (level[*v as usize] + n).round().clamp(0.0, 255.0) as u8;
        }
    });
}

/// Degrades a clean mask into a grey scan; returns the image and the skew (radians).
pub(crate) fn degrade(
    mask: &Mask,
    d: &Degradation,
    dpi: f64,
    rng: &mut SeededRng,
) -> (GrayImage, f64) {
    let flip_seed = rng.next_u64();
    let noise_seed = rng.next_u64();
    let theta = if d.max_skew_deg > 0.0 {
        rng.range_f64(-d.max_skew_deg, d.max_skew_deg).to_radians()
    } else {
        0.0
    };
    let (w, h) = (mask.width as usize, mask.height as usize);
    let mut m = if d.flips() {
        kanungo_flip(mask, d, dpi, flip_seed)
    } else {
        mask.clone()
    };
    let k = ((d.closing as f64) * dpi / 200.0).round() as usize;
    if k > 1 {
        m = closing(&m, k);
    }
    let mut grey: Vec<u8> = m
        .data
        .iter()
        .map(|v| if *v != 0 { 0 } else { 255 })
        .collect();
    blur(&mut grey, w, h, d.blur_sigma * dpi / 200.0);
    if theta != 0.0 {
        grey = rotate(&grey, w, h, theta);
    }
    if d.ink_level != 0.0 || d.paper_level != 255.0 || d.noise_sd > 0.0 {
        paper_and_noise(&mut grey, w, d, noise_seed);
    }
    let img = GrayImage::from_raw(mask.width, mask.height, grey).expect("buffer matches size");
    (img, theta)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn random_mask(w: u32, h: u32, bits: &[bool]) -> Mask {
        let mut m = Mask::new(w, h);
        for (v, b) in m.data.iter_mut().zip(bits) {
            *v = u8::from(*b);
        }
        m
    }

    /// Naive twin: brute-force search of the nearest other-colour pixel.
    fn naive_distance_sq(m: &Mask, cap: usize) -> Vec<u8> {
        let (w, h) = (m.width as i64, m.height as i64);
        let mut out = vec![u8::MAX; (w * h) as usize];
        for j in 0..h {
            for i in 0..w {
                let c = m.data[(j * w + i) as usize];
                let mut best = i64::MAX;
                for y in 0..h {
                    for x in 0..w {
                        if m.data[(y * w + x) as usize] != c {
                            best = best.min((x - i).pow(2) + (y - j).pow(2));
                        }
                    }
                }
                if best <= (cap * cap) as i64 {
                    out[(j * w + i) as usize] = best as u8;
                }
            }
        }
        out
    }

    /// Naive twin: closing straight from the definition.
    fn naive_closing(m: &Mask, k: usize) -> Mask {
        let (w, h) = (m.width as i64, m.height as i64);
        let at = |d: &[u8], x: i64, y: i64| d[(y * w + x) as usize];
        let mut dil = vec![0u8; (w * h) as usize];
        for y in 0..h {
            for x in 0..w {
                let mut v = 0;
                for b in 0..k as i64 {
                    for a in 0..k as i64 {
                        let (sx, sy) = (x - a, y - b);
                        if sx >= 0 && sy >= 0 {
                            v = v.max(at(&m.data, sx, sy));
                        }
                    }
                }
                dil[(y * w + x) as usize] = v;
            }
        }
        let mut ero = vec![0u8; (w * h) as usize];
        for y in 0..h {
            for x in 0..w {
                let mut v = 1;
                for b in 0..k as i64 {
                    for a in 0..k as i64 {
                        let (sx, sy) = ((x + a).min(w - 1), (y + b).min(h - 1));
                        v = v.min(at(&dil, sx, sy));
                    }
                }
                ero[(y * w + x) as usize] = v;
            }
        }
        Mask {
            width: m.width,
            height: m.height,
            data: ero,
        }
    }

    proptest! {
        #[test]
        fn capped_distance_matches_brute_force(bits in proptest::collection::vec(proptest::bool::weighted(0.15), 24 * 19), cap in 1usize..5) {
            let m = random_mask(24, 19, &bits);
            prop_assert_eq!(capped_distance_sq(&m, cap), naive_distance_sq(&m, cap));
        }

        #[test]
        fn closing_matches_definition(bits in proptest::collection::vec(proptest::bool::weighted(0.4), 17 * 13), k in 2usize..4) {
            let m = random_mask(17, 13, &bits);
            prop_assert_eq!(closing(&m, k), naive_closing(&m, k));
        }
    }

    #[test]
    fn decay_scales_with_resolution() {
        // alpha_px = alpha_200 * (200 / dpi)^2: at 400 dpi the decay is a quarter,
        // so the cap (where exp(-a d^2) < 1e-4) doubles (hand calculation).
        let c200 = distance_cap(1.6);
        let c400 = distance_cap(1.6 * 0.25);
        assert_eq!(c200, 3); // sqrt(9.21 / 1.6) = 2.40 -> 3
        assert_eq!(c400, 5); // sqrt(9.21 / 0.4) = 4.80 -> 5
    }

    #[test]
    fn rotation_of_a_point_by_ninety_degrees() {
        // Clockwise on screen (y down): (1, 0) from the centre goes to (0, 1).
        let p = rotate_point((11.0, 10.0), std::f64::consts::FRAC_PI_2, (10.0, 10.0));
        assert!((p.0 - 10.0).abs() < 1e-12 && (p.1 - 11.0).abs() < 1e-12);
    }

    #[test]
    fn rotated_image_moves_a_dot_where_rotate_point_says() {
        let (w, h) = (200usize, 160usize);
        let mut img = vec![255u8; w * h];
        for y in 40..44 {
            for x in 150..154 {
                img[y * w + x] = 0;
            }
        }
        let theta = 3f64.to_radians();
        let out = rotate(&img, w, h, theta);
        let (mut sx, mut sy, mut n) = (0.0, 0.0, 0.0);
        for y in 0..h {
            for x in 0..w {
                let ink = 255.0 - f64::from(out[y * w + x]);
                sx += ink * (x as f64 + 0.5);
                sy += ink * (y as f64 + 0.5);
                n += ink;
            }
        }
        let want = rotate_point((152.0, 42.0), theta, (100.0, 80.0));
        assert!((sx / n - want.0).abs() < 0.2 && (sy / n - want.1).abs() < 0.2);
    }
}
