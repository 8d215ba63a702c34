//! Axis-aligned boxes in sheet pixel coordinates.
//!
//! Convention used everywhere in symtrust: pixel `(i, j)` covers the half-open
//! square `[i, i + 1) x [j, j + 1)`, so a box `(x, y, w, h)` covers
//! `[x, x + w) x [y, y + h)` and its centre is `(x + w / 2, y + h / 2)`. A box
//! with `x = 0, w = sheet width` therefore touches both sheet edges exactly.

use serde::{Deserialize, Serialize};

/// A box in pixels: top-left corner `(x, y)`, width `w`, height `h`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BBox {
    /// Left edge in pixels.
    pub x: f64,
    /// Top edge in pixels.
    pub y: f64,
    /// Width in pixels.
    pub w: f64,
    /// Height in pixels.
    pub h: f64,
}

impl BBox {
    /// Builds a box from its top-left corner and size.
    pub fn new(x: f64, y: f64, w: f64, h: f64) -> Self {
        Self { x, y, w, h }
    }

    /// Builds a box of size `w x h` centred on `(cx, cy)`.
    pub fn centered(cx: f64, cy: f64, w: f64, h: f64) -> Self {
        Self::new(cx - w / 2.0, cy - h / 2.0, w, h)
    }

    /// Right edge (exclusive).
    pub fn right(&self) -> f64 {
        self.x + self.w
    }

    /// Bottom edge (exclusive).
    pub fn bottom(&self) -> f64 {
        self.y + self.h
    }

    /// Centre point.
    pub fn center(&self) -> (f64, f64) {
        (self.x + self.w / 2.0, self.y + self.h / 2.0)
    }

    /// Area; zero for empty or inverted boxes.
    pub fn area(&self) -> f64 {
        if self.w > 0.0 && self.h > 0.0 {
            self.w * self.h
        } else {
            0.0
        }
    }

    /// True when all four numbers are finite.
    pub fn is_finite(&self) -> bool {
        self.x.is_finite() && self.y.is_finite() && self.w.is_finite() && self.h.is_finite()
    }

    /// Area of the overlap of two boxes (zero when they do not overlap).
    pub fn intersection_area(&self, other: &BBox) -> f64 {
        let w = self.right().min(other.right()) - self.x.max(other.x);
        let h = self.bottom().min(other.bottom()) - self.y.max(other.y);
        if w > 0.0 && h > 0.0 { w * h } else { 0.0 }
    }

    /// Intersection over union, in `[0, 1]`; zero when either box is empty.
    pub fn iou(&self, other: &BBox) -> f64 {
        let inter = self.intersection_area(other);
        if inter <= 0.0 {
            return 0.0;
        }
        let union = self.area() + other.area() - inter;
        if union <= 0.0 { 0.0 } else { inter / union }
    }

    /// True when the point lies inside the box (left/top inclusive, right/bottom exclusive).
    pub fn contains_point(&self, px: f64, py: f64) -> bool {
        px >= self.x && px < self.right() && py >= self.y && py < self.bottom()
    }

    /// True when `other` lies entirely inside this box.
    pub fn contains_box(&self, other: &BBox) -> bool {
        other.x >= self.x
            && other.y >= self.y
            && other.right() <= self.right()
            && other.bottom() <= self.bottom()
    }

    /// True when the box lies inside a `width x height` sheet.
    pub fn inside_sheet(&self, width: u32, height: u32) -> bool {
        self.x >= 0.0
            && self.y >= 0.0
            && self.right() <= f64::from(width)
            && self.bottom() <= f64::from(height)
    }

    /// The same box scaled by `factor` about the origin (used when a sheet is resampled).
    pub fn scaled(&self, factor: f64) -> BBox {
        BBox::new(
            self.x * factor,
            self.y * factor,
            self.w * factor,
            self.h * factor,
        )
    }
}

/// An integer window of `size x size` pixels whose top-left corner is `(left, top)`.
///
/// The window centred on a point `(cx, cy)` starts at
/// `left = round(cx - size / 2)` (ties away from zero, `f64::round`), so for an
/// even size the centre pixel boundary sits exactly at the middle of the window.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Window {
    /// Left column (may be negative when the window hangs over the sheet edge).
    pub left: i64,
    /// Top row (may be negative).
    pub top: i64,
    /// Side length in pixels.
    pub size: u32,
}

impl Window {
    /// The window of side `size` centred on `(cx, cy)`.
    pub fn centered_on(cx: f64, cy: f64, size: u32) -> Self {
        let half = f64::from(size) / 2.0;
        Self {
            left: (cx - half).round() as i64,
            top: (cy - half).round() as i64,
            size,
        }
    }

    /// The window as a box.
    pub fn bbox(&self) -> BBox {
        BBox::new(
            self.left as f64,
            self.top as f64,
            f64::from(self.size),
            f64::from(self.size),
        )
    }

    /// True when the window lies fully inside a `width x height` sheet.
    pub fn inside_sheet(&self, width: u32, height: u32) -> bool {
        self.left >= 0
            && self.top >= 0
            && self.left + i64::from(self.size) <= i64::from(width)
            && self.top + i64::from(self.size) <= i64::from(height)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn iou_of_half_overlap_is_one_third() {
        // Two 10x10 boxes shifted by 5: intersection 50, union 150 (hand calculation).
        let a = BBox::new(0.0, 0.0, 10.0, 10.0);
        let b = BBox::new(5.0, 0.0, 10.0, 10.0);
        assert!((a.iou(&b) - 1.0 / 3.0).abs() < 1e-12);
    }

    #[test]
    fn touching_boxes_do_not_overlap() {
        let a = BBox::new(0.0, 0.0, 10.0, 10.0);
        let b = BBox::new(10.0, 0.0, 10.0, 10.0);
        assert_eq!(a.iou(&b), 0.0);
    }

    #[test]
    fn window_centred_on_symbol_centre() {
        let w = Window::centered_on(150.0, 80.0, 100);
        assert_eq!((w.left, w.top), (100, 30));
        assert_eq!(w.bbox().center(), (150.0, 80.0));
    }

    fn arb_box() -> impl Strategy<Value = BBox> {
        (-50.0..50.0f64, -50.0..50.0f64, 0.0..60.0f64, 0.0..60.0f64)
            .prop_map(|(x, y, w, h)| BBox::new(x, y, w, h))
    }

    proptest! {
        #[test]
        fn iou_is_symmetric_and_bounded(a in arb_box(), b in arb_box()) {
            let ab = a.iou(&b);
            prop_assert!((ab - b.iou(&a)).abs() < 1e-12);
            prop_assert!((0.0..=1.0 + 1e-12).contains(&ab));
        }

        #[test]
        fn iou_with_itself_is_one(a in arb_box()) {
            prop_assume!(a.area() > 1e-6);
            prop_assert!((a.iou(&a) - 1.0).abs() < 1e-9);
        }

        #[test]
        fn intersection_never_exceeds_either_area(a in arb_box(), b in arb_box()) {
            let i = a.intersection_area(&b);
            prop_assert!(i <= a.area() + 1e-9 && i <= b.area() + 1e-9);
        }

        #[test]
        fn centred_window_contains_centre(cx in -100.0..1000.0f64, cy in -100.0..1000.0f64, size in 2u32..200) {
            let w = Window::centered_on(cx, cy, size);
            let (wx, wy) = w.bbox().center();
            prop_assert!((wx - cx).abs() <= 0.5 + 1e-9 && (wy - cy).abs() <= 0.5 + 1e-9);
        }
    }
}
