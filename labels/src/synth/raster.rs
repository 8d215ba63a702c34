//! Stroke primitives and their binary rasterisation.
//!
//! Every mark on a synthetic sheet is a curve (segment or circular arc) swept by
//! a disc of radius half the line width, or a filled disc. A pixel is ink when its
//! centre `(i + 0.5, j + 0.5)` lies inside that swept region. Because the region
//! is a Minkowski sum of the curve and a disc, its exact extent is the curve's
//! extent grown by the half width, which is how symbol boxes are computed
//! analytically (see [`Prim::extent`]).

use crate::geometry::BBox;
use std::f64::consts::{FRAC_PI_2, PI, TAU};

/// A point in pixel coordinates (x right, y down).
pub(crate) type Pt = (f64, f64);

/// One drawing primitive, in pixels.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Prim {
    /// A straight stroke with round caps; `r` is half the line width.
    Seg {
        /// Start point.
        a: Pt,
        /// End point.
        b: Pt,
        /// Half line width.
        r: f64,
    },
    /// A circular arc stroke from angle `a0` to `a1` (radians, `a1 > a0`, y-down
    /// angles: `c + rad * (cos t, sin t)`), with round caps; a full circle when
    /// `a1 - a0 >= TAU`.
    Arc {
        /// Centre.
        c: Pt,
        /// Radius of the centre line of the stroke.
        rad: f64,
        /// Start angle.
        a0: f64,
        /// End angle.
        a1: f64,
        /// Half line width.
        r: f64,
    },
    /// A filled disc.
    Disc {
        /// Centre.
        c: Pt,
        /// Radius.
        rad: f64,
    },
    /// Clears a rectangle to paper (used to break a line under an inline symbol).
    Erase(BBox),
}

impl Prim {
    /// The exact extent of the ink region (not the pixel footprint).
    pub(crate) fn extent(&self) -> BBox {
        match *self {
            Prim::Seg { a, b, r } => {
                let x0 = a.0.min(b.0) - r;
                let y0 = a.1.min(b.1) - r;
                BBox::new(x0, y0, a.0.max(b.0) + r - x0, a.1.max(b.1) + r - y0)
            }
            Prim::Arc { c, rad, a0, a1, r } => {
                let mut xs = vec![c.0 + rad * a0.cos(), c.0 + rad * a1.cos()];
                let mut ys = vec![c.1 + rad * a0.sin(), c.1 + rad * a1.sin()];
                // Axis-extreme angles k * pi/2 that fall inside [a0, a1].
                let k0 = (a0 / FRAC_PI_2).ceil() as i64;
                let k1 = (a1 / FRAC_PI_2).floor() as i64;
                for k in k0..=k1.min(k0 + 4) {
                    let t = k as f64 * FRAC_PI_2;
                    xs.push(c.0 + rad * t.cos());
                    ys.push(c.1 + rad * t.sin());
                }
                let (xmin, xmax) = min_max(&xs);
                let (ymin, ymax) = min_max(&ys);
                BBox::new(
                    xmin - r,
                    ymin - r,
                    xmax - xmin + 2.0 * r,
                    ymax - ymin + 2.0 * r,
                )
            }
            Prim::Disc { c, rad } => BBox::new(c.0 - rad, c.1 - rad, 2.0 * rad, 2.0 * rad),
            Prim::Erase(b) => b,
        }
    }

    /// True when the pixel centre `p` is covered.
    fn covers(&self, p: Pt) -> bool {
        match *self {
            Prim::Seg { a, b, r } => dist2_segment(p, a, b) <= r * r,
            Prim::Arc { c, rad, a0, a1, r } => {
                let (dx, dy) = (p.0 - c.0, p.1 - c.1);
                let d = (dx * dx + dy * dy).sqrt();
                if a1 - a0 >= TAU || angle_in(dy.atan2(dx), a0, a1) {
                    (d - rad).abs() <= r
                } else {
                    let e0 = (c.0 + rad * a0.cos(), c.1 + rad * a0.sin());
                    let e1 = (c.0 + rad * a1.cos(), c.1 + rad * a1.sin());
                    dist2(p, e0).min(dist2(p, e1)) <= r * r
                }
            }
            Prim::Disc { c, rad } => dist2(p, c) <= rad * rad,
            Prim::Erase(b) => b.contains_point(p.0, p.1),
        }
    }
}

/// The union of the extents of ink primitives (erasers are skipped).
pub(crate) fn union_extent(prims: &[Prim]) -> Option<BBox> {
    let mut acc: Option<BBox> = None;
    for p in prims.iter().filter(|p| !matches!(p, Prim::Erase(_))) {
        let e = p.extent();
        acc = Some(match acc {
            None => e,
            Some(a) => union(&a, &e),
        });
    }
    acc
}

/// The smallest box holding both boxes.
pub(crate) fn union(a: &BBox, b: &BBox) -> BBox {
    let x0 = a.x.min(b.x);
    let y0 = a.y.min(b.y);
    BBox::new(
        x0,
        y0,
        a.right().max(b.right()) - x0,
        a.bottom().max(b.bottom()) - y0,
    )
}

fn min_max(v: &[f64]) -> (f64, f64) {
    v.iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &x| {
            (lo.min(x), hi.max(x))
        })
}

/// True when angle `t` (any branch) lies in `[a0, a1]`.
fn angle_in(t: f64, a0: f64, a1: f64) -> bool {
    let mut u = t;
    while u < a0 {
        u += TAU;
    }
    while u >= a0 + TAU {
        u -= TAU;
    }
    u <= a1
}

fn dist2(p: Pt, q: Pt) -> f64 {
    (p.0 - q.0).powi(2) + (p.1 - q.1).powi(2)
}

fn dist2_segment(p: Pt, a: Pt, b: Pt) -> f64 {
    let (vx, vy) = (b.0 - a.0, b.1 - a.1);
    let len2 = vx * vx + vy * vy;
    let t = if len2 > 0.0 {
        (((p.0 - a.0) * vx + (p.1 - a.1) * vy) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    dist2(p, (a.0 + t * vx, a.1 + t * vy))
}

/// A binary ink mask: 1 = ink, 0 = paper.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Mask {
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    /// Row-major pixels.
    pub data: Vec<u8>,
}

impl Mask {
    /// An all-paper mask.
    pub(crate) fn new(width: u32, height: u32) -> Self {
        Self {
            width,
            height,
            data: vec![0; width as usize * height as usize],
        }
    }

    /// Draws one primitive.
    pub(crate) fn draw(&mut self, prim: &Prim) {
        let e = prim.extent();
        let (w, h) = (self.width as i64, self.height as i64);
        let i0 = ((e.x - 0.5).floor() as i64).max(0);
        let j0 = ((e.y - 0.5).floor() as i64).max(0);
        let i1 = ((e.right() - 0.5).ceil() as i64).min(w - 1);
        let j1 = ((e.bottom() - 0.5).ceil() as i64).min(h - 1);
        let value = if matches!(prim, Prim::Erase(_)) { 0 } else { 1 };
        for j in j0..=j1 {
            let row = j as usize * self.width as usize;
            for i in i0..=i1 {
                if prim.covers((i as f64 + 0.5, j as f64 + 0.5)) {
                    self.data[row + i as usize] = value;
                }
            }
        }
    }

    /// Number of ink pixels inside `[x0, x1) x [y0, y1)` (clipped to the mask).
    #[cfg(test)]
    pub(crate) fn ink_in(&self, b: &BBox) -> usize {
        let (i0, j0, i1, j1) = self.clip(b);
        (j0..j1)
            .map(|j| {
                let row = &self.data[j * self.width as usize..(j + 1) * self.width as usize];
                row[i0..i1].iter().filter(|v| **v != 0).count()
            })
            .sum()
    }

    /// The tight pixel bounds of the ink inside a box, as a box.
    #[cfg(test)]
    pub(crate) fn ink_bounds_in(&self, b: &BBox) -> Option<BBox> {
        let (i0, j0, i1, j1) = self.clip(b);
        let (mut x0, mut y0, mut x1, mut y1) = (usize::MAX, usize::MAX, 0, 0);
        for j in j0..j1 {
            for i in i0..i1 {
                if self.data[j * self.width as usize + i] != 0 {
                    x0 = x0.min(i);
                    y0 = y0.min(j);
                    x1 = x1.max(i + 1);
                    y1 = y1.max(j + 1);
                }
            }
        }
        (x0 != usize::MAX)
            .then(|| BBox::new(x0 as f64, y0 as f64, (x1 - x0) as f64, (y1 - y0) as f64))
    }

    #[cfg(test)]
    fn clip(&self, b: &BBox) -> (usize, usize, usize, usize) {
        let cl = |v: f64, hi: u32| v.floor().clamp(0.0, f64::from(hi)) as usize;
        let cu = |v: f64, hi: u32| v.ceil().clamp(0.0, f64::from(hi)) as usize;
        (
            cl(b.x, self.width),
            cl(b.y, self.height),
            cu(b.right(), self.width),
            cu(b.bottom(), self.height),
        )
    }
}

/// A similarity placement of a symbol drawn in local millimetres: local `(u, v)`
/// is mirrored (optional), turned by `quarter_turns * 90` degrees clockwise on
/// screen, scaled to pixels and moved to `origin` (pixels).
#[derive(Debug, Clone, Copy)]
pub(crate) struct Place {
    /// Where local (0, 0) lands, in pixels.
    pub origin: Pt,
    /// Pixels per millimetre.
    pub scale: f64,
    /// Clockwise quarter turns (0-3).
    pub quarter_turns: u8,
    /// Mirror the local u axis first.
    pub mirror: bool,
}

impl Place {
    /// A plain placement: no turn, no mirror.
    pub(crate) fn at(origin: Pt, scale: f64) -> Self {
        Self {
            origin,
            scale,
            quarter_turns: 0,
            mirror: false,
        }
    }

    /// Maps a local point (mm) to pixels.
    pub(crate) fn pt(&self, u: f64, v: f64) -> Pt {
        let (mut x, mut y) = (if self.mirror { -u } else { u }, v);
        for _ in 0..self.quarter_turns % 4 {
            (x, y) = (-y, x);
        }
        (
            self.origin.0 + x * self.scale,
            self.origin.1 + y * self.scale,
        )
    }

    /// Maps a local angle range to pixel-space angles.
    fn angles(&self, a0: f64, a1: f64) -> (f64, f64) {
        let (mut b0, mut b1) = if self.mirror {
            (PI - a1, PI - a0)
        } else {
            (a0, a1)
        };
        let turn = f64::from(self.quarter_turns % 4) * FRAC_PI_2;
        b0 += turn;
        b1 += turn;
        (b0, b1)
    }

    /// A segment of line width `lw_mm`.
    pub(crate) fn seg(&self, a: (f64, f64), b: (f64, f64), lw_mm: f64) -> Prim {
        Prim::Seg {
            a: self.pt(a.0, a.1),
            b: self.pt(b.0, b.1),
            r: lw_mm * self.scale / 2.0,
        }
    }

    /// A circle of radius `rad_mm`.
    pub(crate) fn circle(&self, c: (f64, f64), rad_mm: f64, lw_mm: f64) -> Prim {
        self.arc(c, rad_mm, 0.0, TAU, lw_mm)
    }

    /// An arc of radius `rad_mm` from local angle `a0` to `a1`.
    pub(crate) fn arc(&self, c: (f64, f64), rad_mm: f64, a0: f64, a1: f64, lw_mm: f64) -> Prim {
        let (b0, b1) = self.angles(a0, a1);
        Prim::Arc {
            c: self.pt(c.0, c.1),
            rad: rad_mm * self.scale,
            a0: b0,
            a1: b1,
            r: lw_mm * self.scale / 2.0,
        }
    }

    /// A filled disc.
    pub(crate) fn disc(&self, c: (f64, f64), rad_mm: f64) -> Prim {
        Prim::Disc {
            c: self.pt(c.0, c.1),
            rad: rad_mm * self.scale,
        }
    }

    /// A closed polyline.
    pub(crate) fn polygon(&self, pts: &[(f64, f64)], lw_mm: f64, out: &mut Vec<Prim>) {
        for k in 0..pts.len() {
            out.push(self.seg(pts[k], pts[(k + 1) % pts.len()], lw_mm));
        }
    }

    /// An open polyline.
    pub(crate) fn polyline(&self, pts: &[(f64, f64)], lw_mm: f64, out: &mut Vec<Prim>) {
        for k in 1..pts.len() {
            out.push(self.seg(pts[k - 1], pts[k], lw_mm));
        }
    }

    /// A rectangle outline centred on `c`, `w x h` mm, with corner radius `rc`.
    pub(crate) fn rect(
        &self,
        c: (f64, f64),
        w: f64,
        h: f64,
        rc: f64,
        lw: f64,
        out: &mut Vec<Prim>,
    ) {
        let (hx, hy) = (w / 2.0, h / 2.0);
        let rc = rc.min(hx).min(hy).max(0.0);
        let (x0, x1, y0, y1) = (c.0 - hx, c.0 + hx, c.1 - hy, c.1 + hy);
        out.push(self.seg((x0 + rc, y0), (x1 - rc, y0), lw));
        out.push(self.seg((x1, y0 + rc), (x1, y1 - rc), lw));
        out.push(self.seg((x1 - rc, y1), (x0 + rc, y1), lw));
        out.push(self.seg((x0, y1 - rc), (x0, y0 + rc), lw));
        if rc > 0.0 {
            out.push(self.arc((x1 - rc, y0 + rc), rc, -FRAC_PI_2, 0.0, lw));
            out.push(self.arc((x1 - rc, y1 - rc), rc, 0.0, FRAC_PI_2, lw));
            out.push(self.arc((x0 + rc, y1 - rc), rc, FRAC_PI_2, PI, lw));
            out.push(self.arc((x0 + rc, y0 + rc), rc, PI, 1.5 * PI, lw));
        }
    }

    /// An ellipse outline approximated by `n` chords.
    pub(crate) fn ellipse(&self, c: (f64, f64), rx: f64, ry: f64, lw: f64, out: &mut Vec<Prim>) {
        let n = 48;
        let pts: Vec<(f64, f64)> = (0..n)
            .map(|k| {
                let t = TAU * k as f64 / n as f64;
                (c.0 + rx * t.cos(), c.1 + ry * t.sin())
            })
            .collect();
        self.polygon(&pts, lw, out);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Naive twin of the rasteriser: pixels whose centre is within `r` of the
    /// densely sampled curve (a worst-case sampling error far below a pixel).
    fn naive_arc_ink(c: Pt, rad: f64, a0: f64, a1: f64, r: f64, w: u32, h: u32) -> Mask {
        let mut m = Mask::new(w, h);
        let n = 1500;
        let pts: Vec<Pt> = (0..=n)
            .map(|k| {
                let t = a0 + (a1 - a0) * k as f64 / n as f64;
                (c.0 + rad * t.cos(), c.1 + rad * t.sin())
            })
            .collect();
        for j in 0..h {
            for i in 0..w {
                let p = (f64::from(i) + 0.5, f64::from(j) + 0.5);
                if pts.iter().any(|q| dist2(p, *q) <= r * r) {
                    m.data[(j * w + i) as usize] = 1;
                }
            }
        }
        m
    }

    #[test]
    fn circle_extent_is_radius_plus_half_width() {
        // Hand calculation: a circle of radius 10 drawn 2 wide spans 22 x 22.
        let p = Prim::Arc {
            c: (20.0, 20.0),
            rad: 10.0,
            a0: 0.0,
            a1: TAU,
            r: 1.0,
        };
        assert_eq!(p.extent(), BBox::new(9.0, 9.0, 22.0, 22.0));
    }

    #[test]
    fn place_quarter_turn_maps_right_to_down() {
        let pl = Place {
            origin: (0.0, 0.0),
            scale: 1.0,
            quarter_turns: 1,
            mirror: false,
        };
        let (x, y) = pl.pt(1.0, 0.0);
        assert!(x.abs() < 1e-12 && (y - 1.0).abs() < 1e-12);
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn arc_raster_matches_naive_twin(
            a0 in -3.0..3.0f64, span in 0.3..6.0f64, rad in 3.0..12.0f64, r in 0.6..2.5f64
        ) {
            let c = (15.3, 14.7);
            let mut fast = Mask::new(32, 32);
            fast.draw(&Prim::Arc { c, rad, a0, a1: a0 + span, r });
            let naive = naive_arc_ink(c, rad, a0, a0 + span, r, 32, 32);
            // Pixels may differ only where the centre sits within sampling error
            // of the stroke edge; allow a handful.
            let diff = fast.data.iter().zip(&naive.data).filter(|(a, b)| a != b).count();
            prop_assert!(diff <= 3, "{diff} pixels differ");
        }

        #[test]
        fn ink_lies_inside_analytic_extent(
            ax in 2.0..40.0f64, ay in 2.0..40.0f64, bx in 2.0..40.0f64, by in 2.0..40.0f64, r in 0.5..3.0f64
        ) {
            let p = Prim::Seg { a: (ax, ay), b: (bx, by), r };
            let mut m = Mask::new(48, 48);
            m.draw(&p);
            let e = p.extent();
            let ink = m.ink_bounds_in(&BBox::new(0.0, 0.0, 48.0, 48.0)).unwrap();
            prop_assert!(ink.x >= e.x - 0.5 && ink.right() <= e.right() + 0.5);
            prop_assert!(ink.y >= e.y - 0.5 && ink.bottom() <= e.bottom() + 0.5);
            prop_assert!((ink.x - e.x).abs() <= 1.0 && (ink.right() - e.right()).abs() <= 1.0);
        }
    }
}
