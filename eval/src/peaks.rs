//! From score maps to detections.
//!
//! A [`ScoreGrid`] holds, per symbol class, a `rows x cols` plane of window
//! scores: cell `(r, c)` is the window of side `window` whose top-left pixel is
//! `(c * stride, r * stride)`, so its centre is
//! `(c * stride + window / 2, r * stride + window / 2)`.
//!
//! 1. **Peaks**: cell `(r, c)` of a plane is a peak when its score is
//!    `>= min_score`, strictly greater than its 8-neighbours that come before it
//!    in row-major order and `>=` those that come after. On a flat plateau this
//!    keeps the first cell in row-major order, so a plateau yields one peak
//!    rather than all of its cells (deterministic tie rule).
//! 2. **Boxes**: the window itself, or the class's nominal `w x h` centred on
//!    the window centre.
//! 3. **Ignore regions**: a detection whose box centre lies in an ignore box
//!    (legend, title block) is dropped.
//! 4. **NMS** ([`crate::nms`]) per class or across classes.
//!
//! Detections come out in descending score order (ties: class, then row-major).

use crate::error::{EvalError, Result, setting};
use crate::matching::{ScoredBox, outside_ignore};
use crate::nms::{NmsScope, nms};
use serde::{Deserialize, Serialize};
use symtrust_labels::BBox;
use symtrust_labels::detections::Detection;

/// Window scores of one sheet, one plane per symbol class (background planes
/// are left out by the caller).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScoreGrid {
    /// Number of window rows.
    pub rows: usize,
    /// Number of window columns.
    pub cols: usize,
    /// Pixels between neighbouring windows.
    pub stride: u32,
    /// Window side in pixels.
    pub window: u32,
    /// One row-major plane of `rows * cols` scores per class.
    pub planes: Vec<Vec<f32>>,
}

/// How big a detection's box is.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum BoxSize {
    /// The scoring window itself.
    Window,
    /// A nominal `(w, h)` per class, centred on the window centre.
    Nominal(Vec<(f64, f64)>),
}

/// Settings of [`detect`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DetectConfig {
    /// Smallest score a peak may have.
    pub min_score: f64,
    /// NMS suppresses overlaps with IoU above this.
    pub nms_iou: f64,
    /// Per class or across classes.
    pub nms_scope: NmsScope,
    /// Box size of a detection.
    pub box_size: BoxSize,
    /// Regions whose detections are dropped (by box centre).
    pub ignore: Vec<BBox>,
}

impl ScoreGrid {
    /// Checks shape, settings and that every score is finite.
    pub fn validate(&self, n_classes: usize) -> Result<()> {
        if self.stride == 0 {
            return Err(setting("stride", "must be at least 1 pixel"));
        }
        if self.window == 0 {
            return Err(setting("window", "must be at least 1 pixel"));
        }
        if self.planes.len() != n_classes {
            return Err(EvalError::LengthMismatch {
                what: "score planes (one per class)".into(),
                expected: n_classes,
                got: self.planes.len(),
            });
        }
        for (k, p) in self.planes.iter().enumerate() {
            if p.len() != self.rows * self.cols {
                return Err(EvalError::LengthMismatch {
                    what: format!("score plane {k} ({} x {})", self.rows, self.cols),
                    expected: self.rows * self.cols,
                    got: p.len(),
                });
            }
            if let Some(i) = p.iter().position(|s| !s.is_finite()) {
                return Err(EvalError::NonFinite {
                    what: format!(
                        "score plane {k}, cell ({}, {})",
                        i / self.cols,
                        i % self.cols
                    ),
                    value: f64::from(p[i]),
                });
            }
        }
        Ok(())
    }

    /// Row-major cell indices of the peaks of plane `k` at or above `min_score`.
    pub fn peaks(&self, k: usize, min_score: f64) -> Vec<usize> {
        let p = &self.planes[k];
        let (rows, cols) = (self.rows as i64, self.cols as i64);
        let mut out = Vec::new();
        for r in 0..rows {
            for c in 0..cols {
                let v = p[(r * cols + c) as usize];
                if f64::from(v) < min_score {
                    continue;
                }
                let mut is_peak = true;
                'n: for dr in -1..=1i64 {
                    for dc in -1..=1i64 {
                        let (nr, nc) = (r + dr, c + dc);
                        if (dr == 0 && dc == 0) || nr < 0 || nc < 0 || nr >= rows || nc >= cols {
                            continue;
                        }
                        let n = p[(nr * cols + nc) as usize];
                        let earlier = dr < 0 || (dr == 0 && dc < 0);
                        if n > v || (earlier && n == v) {
                            is_peak = false;
                            break 'n;
                        }
                    }
                }
                if is_peak {
                    out.push((r * cols + c) as usize);
                }
            }
        }
        out
    }

    /// The window of cell `i` (row-major) as a box.
    pub fn window_box(&self, i: usize) -> BBox {
        let (r, c) = (i / self.cols, i % self.cols);
        let s = f64::from(self.stride);
        BBox::new(
            c as f64 * s,
            r as f64 * s,
            f64::from(self.window),
            f64::from(self.window),
        )
    }
}

/// Turns the score grid of `sheet` into detections (see the module comment).
pub fn detect(
    sheet: &str,
    grid: &ScoreGrid,
    class_names: &[String],
    cfg: &DetectConfig,
) -> Result<Vec<Detection>> {
    grid.validate(class_names.len())?;
    crate::error::finite(|| "min_score".into(), cfg.min_score)?;
    if let BoxSize::Nominal(sizes) = &cfg.box_size {
        if sizes.len() != class_names.len() {
            return Err(EvalError::LengthMismatch {
                what: "nominal box sizes (one per class)".into(),
                expected: class_names.len(),
                got: sizes.len(),
            });
        }
        if let Some(k) = sizes
            .iter()
            .position(|(w, h)| !(w.is_finite() && h.is_finite() && *w > 0.0 && *h > 0.0))
        {
            return Err(setting(
                "nominal box size",
                format!(
                    "class {:?} has size {:?}; both sides must be positive",
                    class_names[k], sizes[k]
                ),
            ));
        }
    }
    let mut cands = Vec::new();
    for k in 0..class_names.len() {
        for i in grid.peaks(k, cfg.min_score) {
            let win = grid.window_box(i);
            let bbox = match &cfg.box_size {
                BoxSize::Window => win,
                BoxSize::Nominal(sizes) => {
                    let (cx, cy) = win.center();
                    BBox::centered(cx, cy, sizes[k].0, sizes[k].1)
                }
            };
            if outside_ignore(&bbox, &cfg.ignore) {
                cands.push(ScoredBox {
                    class: k,
                    score: f64::from(grid.planes[k][i]),
                    bbox,
                });
            }
        }
    }
    let kept = nms(&cands, cfg.nms_iou, cfg.nms_scope)?;
    Ok(kept
        .into_iter()
        .map(|i| {
            let c = &cands[i];
            Detection {
                sheet: sheet.to_string(),
                class: class_names[c.class].clone(),
                score: c.score,
                x: c.bbox.x,
                y: c.bbox.y,
                w: c.bbox.w,
                h: c.bbox.h,
            }
        })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid_with(
        rows: usize,
        cols: usize,
        bumps: &[(usize, usize, usize, f32)],
        n: usize,
    ) -> ScoreGrid {
        let mut planes = vec![vec![0.0f32; rows * cols]; n];
        for &(k, r, c, v) in bumps {
            planes[k][r * cols + c] = v;
        }
        ScoreGrid {
            rows,
            cols,
            stride: 8,
            window: 32,
            planes,
        }
    }

    fn cfg() -> DetectConfig {
        DetectConfig {
            min_score: 0.5,
            nms_iou: 0.3,
            nms_scope: NmsScope::PerClass,
            box_size: BoxSize::Window,
            ignore: vec![],
        }
    }

    fn names() -> Vec<String> {
        vec!["valve".into(), "pump".into()]
    }

    #[test]
    fn peak_maps_to_window_and_nominal_box() {
        // Cell (2, 3): window top-left (24, 16), centre (40, 32).
        let g = grid_with(6, 6, &[(0, 2, 3, 0.9), (0, 2, 2, 0.6)], 2);
        let d = detect("s1", &g, &names(), &cfg()).unwrap();
        assert_eq!(d.len(), 1);
        assert_eq!((d[0].x, d[0].y, d[0].w, d[0].h), (24.0, 16.0, 32.0, 32.0));
        assert_eq!(
            (d[0].class.as_str(), d[0].score),
            ("valve", f64::from(0.9f32))
        );
        let nominal = DetectConfig {
            box_size: BoxSize::Nominal(vec![(20.0, 10.0), (5.0, 5.0)]),
            ..cfg()
        };
        let d = detect("s1", &g, &names(), &nominal).unwrap();
        assert_eq!((d[0].x, d[0].y, d[0].w, d[0].h), (30.0, 27.0, 20.0, 10.0));
    }

    #[test]
    fn plateau_gives_one_peak_and_nms_merges_close_peaks() {
        // A flat 2x2 plateau: only its first cell in row-major order is a peak.
        let g = grid_with(
            5,
            5,
            &[
                (1, 1, 1, 0.7),
                (1, 1, 2, 0.7),
                (1, 2, 1, 0.7),
                (1, 2, 2, 0.7),
            ],
            2,
        );
        assert_eq!(g.peaks(1, 0.5), vec![6]);
        // Two separate peaks two cells apart (16 px, IoU of 32-px windows = 1/3 > 0.3).
        let g = grid_with(5, 5, &[(0, 2, 0, 0.8), (0, 2, 2, 0.9)], 2);
        assert_eq!(g.peaks(0, 0.5).len(), 2);
        let d = detect("s1", &g, &names(), &cfg()).unwrap();
        assert_eq!(d.len(), 1);
        assert_eq!(d[0].score, f64::from(0.9f32));
        let loose = DetectConfig {
            nms_iou: 0.5,
            ..cfg()
        };
        assert_eq!(detect("s1", &g, &names(), &loose).unwrap().len(), 2);
    }

    #[test]
    fn ignore_regions_and_min_score() {
        let g = grid_with(6, 6, &[(0, 0, 0, 0.9), (1, 4, 4, 0.95), (0, 4, 0, 0.4)], 2);
        // Window of (0,0) has centre (16, 16): inside the ignore box.
        let c = DetectConfig {
            ignore: vec![BBox::new(0.0, 0.0, 20.0, 20.0)],
            ..cfg()
        };
        let d = detect("s1", &g, &names(), &c).unwrap();
        assert_eq!(d.len(), 1);
        assert_eq!(d[0].class, "pump");
    }

    #[test]
    fn bad_grids_are_refused() {
        let mut g = grid_with(3, 3, &[], 2);
        assert!(detect("s1", &g, &names()[..1], &cfg()).is_err());
        g.planes[1][4] = f32::NAN;
        let msg = detect("s1", &g, &names(), &cfg()).unwrap_err().to_string();
        assert!(msg.contains("plane 1, cell (1, 1)"), "{msg}");
        let mut g = grid_with(3, 3, &[], 2);
        g.stride = 0;
        assert!(detect("s1", &g, &names(), &cfg()).is_err());
        let g = grid_with(3, 3, &[], 2);
        let bad = DetectConfig {
            box_size: BoxSize::Nominal(vec![(0.0, 3.0), (1.0, 1.0)]),
            ..cfg()
        };
        assert!(detect("s1", &g, &names(), &bad).is_err());
    }
}
