//! Non-maximum suppression.
//!
//! Greedy, in descending score order (ties in input order): a candidate is kept
//! unless an already kept box overlaps it with `IoU > iou_threshold` (strictly
//! greater, so at threshold 1 nothing is suppressed and at 0 any overlap is);
//! with [`NmsScope::PerClass`] only kept boxes of the same class count, with
//! [`NmsScope::AcrossClasses`] all do. This is the textbook rule (common
//! practice).
//!
//! Speed: kept boxes are filed in a uniform grid whose cell side is the largest
//! box side, so two boxes that overlap share a cell and each candidate is
//! compared only with kept boxes filed in the (at most 2 x 2 for equal-sized
//! boxes) cells it covers, instead of with every kept box. The tests check it
//! against the plain O(n^2) loop.

use crate::error::{Result, in_range};
use crate::matching::{ScoredBox, score_order};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// Which kept boxes may suppress a candidate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum NmsScope {
    /// Only kept boxes of the candidate's class.
    #[default]
    PerClass,
    /// Kept boxes of any class (one symbol, one label).
    AcrossClasses,
}

/// Indices of the candidates kept by NMS, in descending score order.
pub fn nms(cands: &[ScoredBox], iou_threshold: f64, scope: NmsScope) -> Result<Vec<usize>> {
    in_range(|| "NMS IoU threshold".into(), iou_threshold, 0.0, 1.0)?;
    for (i, c) in cands.iter().enumerate() {
        crate::error::finite(|| format!("NMS candidate #{i}, score"), c.score)?;
        for v in [c.bbox.x, c.bbox.y, c.bbox.w, c.bbox.h] {
            crate::error::finite(|| format!("NMS candidate #{i}, box"), v)?;
        }
    }
    let cell = cands
        .iter()
        .map(|c| c.bbox.w.max(c.bbox.h))
        .fold(1.0f64, f64::max);
    let span = |lo: f64, len: f64| {
        let a = (lo / cell).floor() as i64;
        let b = ((lo + len.max(0.0)) / cell).floor() as i64;
        a..=b
    };
    let mut grid: HashMap<(i64, i64), Vec<usize>> = HashMap::new();
    let mut kept = Vec::new();
    for i in score_order(cands) {
        let c = &cands[i];
        let suppressed = span(c.bbox.y, c.bbox.h).any(|gy| {
            span(c.bbox.x, c.bbox.w).any(|gx| {
                grid.get(&(gx, gy)).is_some_and(|ks| {
                    ks.iter().any(|&k| {
                        (scope == NmsScope::AcrossClasses || cands[k].class == c.class)
                            && cands[k].bbox.iou(&c.bbox) > iou_threshold
                    })
                })
            })
        });
        if !suppressed {
            for gy in span(c.bbox.y, c.bbox.h) {
                for gx in span(c.bbox.x, c.bbox.w) {
                    grid.entry((gx, gy)).or_default().push(i);
                }
            }
            kept.push(i);
        }
    }
    Ok(kept)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use symtrust_labels::BBox;

    /// Naive twin: compare each candidate with every kept box.
    fn nms_naive(cands: &[ScoredBox], thr: f64, scope: NmsScope) -> Vec<usize> {
        let mut kept: Vec<usize> = Vec::new();
        for i in score_order(cands) {
            let hit = kept.iter().any(|&k| {
                (scope == NmsScope::AcrossClasses || cands[k].class == cands[i].class)
                    && cands[k].bbox.iou(&cands[i].bbox) > thr
            });
            if !hit {
                kept.push(i);
            }
        }
        kept
    }

    fn sb(class: usize, score: f64, x: f64, y: f64, w: f64, h: f64) -> ScoredBox {
        ScoredBox {
            class,
            score,
            bbox: BBox::new(x, y, w, h),
        }
    }

    #[test]
    fn by_hand() {
        let c = [
            sb(0, 0.9, 0.0, 0.0, 10.0, 10.0),
            sb(0, 0.8, 2.0, 0.0, 10.0, 10.0), // IoU 80/120 = 0.667 with the first
            sb(1, 0.7, 1.0, 0.0, 10.0, 10.0), // other class
            sb(0, 0.6, 50.0, 0.0, 10.0, 10.0),
        ];
        assert_eq!(nms(&c, 0.5, NmsScope::PerClass).unwrap(), vec![0, 2, 3]);
        assert_eq!(nms(&c, 0.5, NmsScope::AcrossClasses).unwrap(), vec![0, 3]);
        assert_eq!(nms(&c, 0.7, NmsScope::PerClass).unwrap(), vec![0, 1, 2, 3]);
        assert_eq!(nms(&c, 1.0, NmsScope::AcrossClasses).unwrap().len(), 4);
        assert!(nms(&c, 1.5, NmsScope::PerClass).is_err());
    }

    proptest! {
        #[test]
        fn fast_equals_naive(
            raw in prop::collection::vec((0usize..3, 0u8..10, -40.0..200.0f64, -40.0..200.0f64, 0.0..60.0f64, 0.0..60.0f64), 0..80),
            thr in 0.0..1.0f64,
            across in any::<bool>(),
        ) {
            let cands: Vec<ScoredBox> = raw.iter().map(|&(c, s, x, y, w, h)| sb(c, f64::from(s) / 10.0, x, y, w, h)).collect();
            let scope = if across { NmsScope::AcrossClasses } else { NmsScope::PerClass };
            prop_assert_eq!(nms(&cands, thr, scope).unwrap(), nms_naive(&cands, thr, scope));
        }
    }
}
