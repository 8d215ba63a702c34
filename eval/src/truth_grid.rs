//! A uniform grid over a sheet's ground-truth boxes, so matching looks only at
//! the symbols near a detection instead of every symbol on the sheet.
//!
//! Each truth box is listed in every cell it overlaps. A query returns, in
//! ascending index order and without repeats, a *superset* of the truths that
//! can fit the detection; the caller still applies the criterion to each, so
//! the matching result is the same as a scan over all truths in index order.
//! Why a superset:
//! - IoU: a fit needs `IoU >= min_iou > 0`, so a positive intersection, so
//!   `max(x1, x2) < min(r1, r2)` on each axis. The cell of that point lies in
//!   both boxes' cell ranges because `cell(v) = floor((v - origin) / size)` is
//!   monotone; clamping both ranges into the grid keeps them overlapping.
//! - Centre distance `<= d`: the truth's centre (inside its box, so in its
//!   cells) lies within `d` of the detection's centre on each axis; the query
//!   covers that square widened by one cell each side, far more than rounding.
//!
//! With few truths or detections, any non-finite coordinate or a truth box
//! beyond 1e9 px, the grid is not built and a query returns every truth, the plain scan.

use crate::matching::{ClassedBox, MatchCriterion};
use symtrust_labels::BBox;

/// Below this many truth-detection pairs a plain scan is as fast.
const MIN_PAIRS: usize = 256;

/// The grid (see the module comment).
pub(crate) struct TruthGrid {
    n_truths: usize,
    cells: Option<Cells>,
}

struct Cells {
    origin: (f64, f64),
    size: f64,
    nx: usize,
    ny: usize,
    /// Start of each cell's run in `items` (compressed rows), `nx * ny + 1` entries.
    start: Vec<u32>,
    items: Vec<u32>,
}

impl Cells {
    fn cell(&self, v: f64, origin: f64, n: usize) -> usize {
        let c = ((v - origin) / self.size).floor();
        if c <= 0.0 { 0 } else { (c as usize).min(n - 1) }
    }

    fn range(&self, lo: (f64, f64), hi: (f64, f64), pad: usize) -> (usize, usize, usize, usize) {
        let x0 = self.cell(lo.0, self.origin.0, self.nx).saturating_sub(pad);
        let y0 = self.cell(lo.1, self.origin.1, self.ny).saturating_sub(pad);
        let x1 = (self.cell(hi.0, self.origin.0, self.nx) + pad).min(self.nx - 1);
        let y1 = (self.cell(hi.1, self.origin.1, self.ny) + pad).min(self.ny - 1);
        (x0, x1, y0, y1)
    }
}

impl TruthGrid {
    /// Indexes `truths` for queries by `n_dets` detections.
    pub(crate) fn new(truths: &[ClassedBox], n_dets: usize) -> Self {
        let plain = Self {
            n_truths: truths.len(),
            cells: None,
        };
        if truths.len().saturating_mul(n_dets) < MIN_PAIRS
            || truths.len() >= u32::MAX as usize
            || !truths.iter().all(|t| t.bbox.is_finite())
        {
            return plain;
        }
        let (mut x0, mut y0, mut x1, mut y1) = (f64::MAX, f64::MAX, f64::MIN, f64::MIN);
        let mut extent = 0.0;
        for t in truths {
            x0 = x0.min(t.bbox.x);
            y0 = y0.min(t.bbox.y);
            x1 = x1.max(t.bbox.right());
            y1 = y1.max(t.bbox.bottom());
            extent += t.bbox.w.abs().max(t.bbox.h.abs());
        }
        let (span_x, span_y) = (x1 - x0, y1 - y0);
        // Far from any sheet's size, rounding could exceed a cell: plain scan.
        let far = [x0, y0, x1, y1].iter().any(|v| v.abs() > 1e9);
        if far || !(span_x.is_finite() && span_y.is_finite() && extent.is_finite()) {
            return plain;
        }
        // Cells about the mean symbol size, at most ~4 cells per truth.
        let mut size = (extent / truths.len() as f64).max(1.0);
        let max_cells = (4 * truths.len()).max(64) as f64;
        let cells_at = |s: f64| ((span_x / s).floor() + 1.0) * ((span_y / s).floor() + 1.0);
        if cells_at(size) > max_cells {
            size *= (cells_at(size) / max_cells).sqrt();
        }
        while cells_at(size) > max_cells {
            size *= 1.5;
        }
        let nx = (span_x / size).floor() as usize + 1;
        let ny = (span_y / size).floor() as usize + 1;
        let mut cells = Cells {
            origin: (x0, y0),
            size,
            nx,
            ny,
            start: vec![0; nx * ny + 1],
            items: Vec::new(),
        };
        let ranges: Vec<_> = truths
            .iter()
            .map(|t| cells.range((t.bbox.x, t.bbox.y), (t.bbox.right(), t.bbox.bottom()), 0))
            .collect();
        for &(ax, bx, ay, by) in &ranges {
            for cy in ay..=by {
                for cx in ax..=bx {
                    cells.start[cy * nx + cx + 1] += 1;
                }
            }
        }
        for i in 1..cells.start.len() {
            cells.start[i] += cells.start[i - 1];
        }
        let mut fill = cells.start.clone();
        cells.items = vec![0; cells.start[nx * ny] as usize];
        for (t, &(ax, bx, ay, by)) in ranges.iter().enumerate() {
            for cy in ay..=by {
                for cx in ax..=bx {
                    let c = cy * nx + cx;
                    cells.items[fill[c] as usize] = t as u32;
                    fill[c] += 1;
                }
            }
        }
        Self {
            n_truths: truths.len(),
            cells: Some(cells),
        }
    }

    /// Fills `out` with the candidate truths of `det` under `criterion`, in
    /// ascending order without repeats (see the module comment).
    pub(crate) fn candidates(&self, det: &BBox, criterion: &MatchCriterion, out: &mut Vec<u32>) {
        out.clear();
        let Some(c) = &self.cells else {
            out.extend(0..self.n_truths as u32);
            return;
        };
        let (x0, x1, y0, y1) = match *criterion {
            MatchCriterion::Iou { .. } => c.range((det.x, det.y), (det.right(), det.bottom()), 0),
            MatchCriterion::CentreDistance { max_distance } => {
                let (cx, cy) = det.center();
                let d = max_distance;
                c.range((cx - d, cy - d), (cx + d, cy + d), 1)
            }
        };
        for cy in y0..=y1 {
            let row = cy * c.nx;
            out.extend_from_slice(
                &c.items[c.start[row + x0] as usize..c.start[row + x1 + 1] as usize],
            );
        }
        if y1 > y0 || x1 > x0 {
            out.sort_unstable();
            out.dedup();
        }
    }
}
