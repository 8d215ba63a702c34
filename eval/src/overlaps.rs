//! Each detection's overlapping ground truth with its IoU, found once per
//! sheet, so that matching at many IoU thresholds (the main figures, the IoU
//! sweep, the detection confusion table) repeats only the greedy passes, not
//! the geometry.
//!
//! [`SheetOverlaps::outcomes`] at `min_iou` gives exactly what
//! [`crate::sheets::sheet_outcomes`] gives with `MatchCriterion::Iou { min_iou }`,
//! and [`SheetOverlaps::add_to_detection_table`] what
//! [`crate::confusion::add_sheet_to_detection_table`] adds: the same detection
//! order (descending score, ties in input order), the same candidates in
//! ascending truth order (every truth with positive IoU, which includes every
//! one that fits since `min_iou > 0`), the same comparisons on the same IoU
//! values (tested against both). The detections kept at a threshold are a
//! prefix of that order, and a greedy pass over a prefix is the start of the
//! pass over all.

use crate::confusion::ConfusionTable;
use crate::matching::{MatchCriterion, score_order};
use crate::sheets::{Outcome, PreparedSheet, SheetOutcomes};
use crate::truth_grid::TruthGrid;

/// A truth with positive IoU with a detection.
#[derive(Clone, Copy)]
struct Pair {
    truth: u32,
    same_class: bool,
    iou: f64,
}

/// The greedy same-class pass over a prefix of the detections.
struct FirstPass {
    /// Per detection: the truth it found, and whether it is a duplicate.
    det: Vec<(Option<u32>, bool)>,
    truth_taken: Vec<bool>,
}

/// A truth of the detection's own class with positive IoU.
#[derive(Clone, Copy)]
struct SamePair {
    truth: u32,
    iou: f64,
}

/// The overlaps of one sheet (see the module comment).
pub(crate) struct SheetOverlaps {
    order: Vec<u32>,
    /// Start of each detection's run in `pairs`, `n_dets + 1` entries.
    start: Vec<u32>,
    /// Ascending truth within each detection's run.
    pairs: Vec<Pair>,
    /// The same-class pairs alone, detection by detection in score order, so
    /// that the greedy pass repeated at every IoU threshold reads them in
    /// sequence; `same_start[r]` starts the run of the detection ranked `r`.
    same_start: Vec<u32>,
    same: Vec<SamePair>,
    n_truths: usize,
}

impl SheetOverlaps {
    /// Finds the overlaps of a prepared sheet.
    pub(crate) fn new(p: &PreparedSheet) -> Self {
        let grid = TruthGrid::new(&p.truths, p.dets.len());
        let probe = MatchCriterion::Iou { min_iou: 1.0 };
        let mut start = Vec::with_capacity(p.dets.len() + 1);
        let mut pairs = Vec::new();
        let mut cands = Vec::new();
        start.push(0);
        for d in &p.dets {
            grid.candidates(&d.bbox, &probe, &mut cands);
            for &t in &cands {
                let truth = &p.truths[t as usize];
                let iou = d.bbox.iou(&truth.bbox);
                if iou > 0.0 {
                    pairs.push(Pair {
                        truth: t,
                        same_class: truth.class == d.class,
                        iou,
                    });
                }
            }
            start.push(pairs.len() as u32);
        }
        let order: Vec<u32> = score_order(&p.dets).into_iter().map(|d| d as u32).collect();
        let mut same_start = Vec::with_capacity(order.len() + 1);
        let mut same = Vec::with_capacity(pairs.len());
        same_start.push(0);
        for &d in &order {
            let d = d as usize;
            let run = &pairs[start[d] as usize..start[d + 1] as usize];
            same.extend(run.iter().filter(|q| q.same_class).map(|q| SamePair {
                truth: q.truth,
                iou: q.iou,
            }));
            same_start.push(same.len() as u32);
        }
        Self {
            order,
            start,
            pairs,
            same_start,
            same,
            n_truths: p.truths.len(),
        }
    }

    fn run(&self, d: usize) -> &[Pair] {
        &self.pairs[self.start[d] as usize..self.start[d + 1] as usize]
    }

    /// The same-class pass at `min_iou` over the first `prefix` detections in
    /// score order.
    fn first_pass(&self, min_iou: f64, prefix: usize) -> FirstPass {
        let mut f = FirstPass {
            det: vec![(None, false); self.order.len()],
            truth_taken: vec![false; self.n_truths],
        };
        for (r, &d) in self.order[..prefix].iter().enumerate() {
            let d = d as usize;
            let mut best: Option<(u32, f64)> = None;
            let mut fits_taken = false;
            let run = &self.same[self.same_start[r] as usize..self.same_start[r + 1] as usize];
            for q in run {
                if q.iou < min_iou {
                    continue;
                }
                if f.truth_taken[q.truth as usize] {
                    fits_taken = true;
                    continue;
                }
                if best.is_none_or(|(_, b)| q.iou > b) {
                    best = Some((q.truth, q.iou));
                }
            }
            match best {
                Some((t, _)) => {
                    f.truth_taken[t as usize] = true;
                    f.det[d].0 = Some(t);
                }
                None => f.det[d].1 = fits_taken,
            }
        }
        f
    }

    /// For each detection: (found a symbol, duplicate), matching at `min_iou`.
    fn assign(&self, min_iou: f64) -> Vec<(bool, bool)> {
        self.first_pass(min_iou, self.order.len())
            .det
            .into_iter()
            .map(|(t, dup)| (t.is_some(), dup))
            .collect()
    }

    /// Adds the sheet at `threshold` to a detection confusion table, matching
    /// at `min_iou`: the rule of [`crate::confusion`].
    pub(crate) fn add_to_detection_table(
        &self,
        p: &PreparedSheet,
        min_iou: f64,
        threshold: f64,
        table: &mut ConfusionTable,
    ) {
        let n = table.rows.len() - 1;
        let prefix = self
            .order
            .iter()
            .take_while(|&&d| p.dets[d as usize].score >= threshold)
            .count();
        let mut f = self.first_pass(min_iou, prefix);
        let mut det_used: Vec<bool> = f.det.iter().map(|(t, _)| t.is_some()).collect();
        let mut truth_found = f.truth_taken.clone();
        for &d in &self.order[..prefix] {
            let d = d as usize;
            if let Some(t) = f.det[d].0 {
                table.counts[p.truths[t as usize].class][p.dets[d].class] += 1;
                continue;
            }
            let mut best: Option<(u32, f64)> = None;
            for q in self.run(d) {
                if f.truth_taken[q.truth as usize] {
                    continue;
                }
                if q.iou >= min_iou && best.is_none_or(|(_, b)| q.iou > b) {
                    best = Some((q.truth, q.iou));
                }
            }
            if let Some((t, _)) = best {
                f.truth_taken[t as usize] = true;
                table.counts[p.truths[t as usize].class][p.dets[d].class] += 1;
                truth_found[t as usize] = true;
                det_used[d] = true;
            }
        }
        for &d in &self.order[..prefix] {
            if !det_used[d as usize] {
                table.counts[n][p.dets[d as usize].class] += 1;
            }
        }
        for (t, found) in truth_found.iter().enumerate() {
            if !found {
                table.counts[p.truths[t].class][n] += 1;
            }
        }
    }

    /// True-positive flags at `min_iou`, appended to `flat` in detection order.
    pub(crate) fn push_true_positives(&self, min_iou: f64, flat: &mut Vec<bool>) {
        flat.extend(self.assign(min_iou).into_iter().map(|(tp, _)| tp));
    }

    /// The outcomes of the sheet matched at `min_iou`.
    pub(crate) fn outcomes(
        &self,
        p: &PreparedSheet,
        n_classes: usize,
        min_iou: f64,
    ) -> SheetOutcomes {
        let mut truths_per_class = vec![0; n_classes];
        for t in &p.truths {
            truths_per_class[t.class] += 1;
        }
        let a = self.assign(min_iou);
        SheetOutcomes {
            sheet: p.sheet.clone(),
            truths_per_class,
            outcomes: p
                .dets
                .iter()
                .zip(a)
                .map(|(d, (true_positive, duplicate))| Outcome {
                    class: d.class,
                    score: d.score,
                    true_positive,
                    duplicate,
                })
                .collect(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::confusion::{add_sheet_to_detection_table, empty_detection_table};
    use crate::matching::{ClassedBox, ScoredBox};
    use crate::sheets::sheet_outcomes;
    use proptest::prelude::*;
    use symtrust_labels::BBox;

    proptest! {
        #[test]
        fn same_outcomes_as_matching(
            truths in prop::collection::vec((0usize..2, 0u8..30, 0u8..30, 1u8..4), 0..40),
            dets in prop::collection::vec((0usize..2, 0u8..5, 0u8..30, 0u8..30, 1u8..4), 0..60),
            min_iou in prop::sample::select(vec![0.1, 0.2, 0.3, 0.5, 0.7, 0.9, 1.0]),
        ) {
            // Boxes on a coarse grid: equal IoUs, equal scores and exact fits are common.
            let b = |x: u8, y: u8, s: u8| BBox::new(f64::from(x) * 2.0, f64::from(y) * 2.0, f64::from(s) * 4.0, 8.0);
            let p = PreparedSheet {
                sheet: "s".into(),
                truths: truths.iter().map(|&(c, x, y, s)| ClassedBox { class: c, bbox: b(x, y, s) }).collect(),
                dets: dets.iter().map(|&(c, sc, x, y, s)| ScoredBox { class: c, score: f64::from(sc) / 4.0, bbox: b(x, y, s) }).collect(),
                ignored_truths: 0,
                ignored_detections: 0,
            };
            let o = SheetOverlaps::new(&p);
            let crit = MatchCriterion::Iou { min_iou };
            prop_assert_eq!(o.outcomes(&p, 2, min_iou), sheet_outcomes(&p, 2, &crit));
            let names = ["valve".to_string(), "pump".to_string()];
            for threshold in [0.0, 0.25, 0.5, 1.0, 1.5] {
                let mut got = empty_detection_table(&names);
                o.add_to_detection_table(&p, min_iou, threshold, &mut got);
                let mut want = empty_detection_table(&names);
                add_sheet_to_detection_table(&mut want, &p.truths, &p.dets, &crit, threshold);
                prop_assert_eq!(got, want);
            }
        }
    }
}
