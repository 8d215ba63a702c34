//! Matching detections to ground truth on one sheet.
//!
//! Greedy, in descending score order: each detection takes the *unmatched*
//! ground-truth symbol of the same class that it fits best, where "fits" is
//! either `IoU(det, truth) >= min_iou` (best = largest IoU) or
//! `|centre(det) - centre(truth)| <= max_distance` pixels (best = nearest
//! centre). A detection that finds no free symbol is a false positive; when it
//! would have fitted a symbol already taken it is also flagged a duplicate.
//!
//! Tie rules (deterministic): detections with equal scores are taken in their
//! input order (a stable sort); among equally good symbols the one listed first
//! wins. This is the rule of pycocotools' `COCOeval.evaluateImg` (stable
//! mergesort by score, best IoU among unmatched), except that COCOeval lets the
//! later of two exactly equal IoUs win. Ignore regions are applied before
//! matching by [`outside_ignore`]: a box whose centre lies in an ignore region
//! is removed, ground truth and detections alike.

use crate::error::{Result, in_range, setting};
use crate::truth_grid::TruthGrid;
use serde::{Deserialize, Serialize};
use symtrust_labels::BBox;

/// When a detection counts as finding a ground-truth symbol.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MatchCriterion {
    /// Boxes overlap with `IoU >= min_iou`.
    Iou {
        /// Smallest IoU that counts, in `(0, 1]`.
        min_iou: f64,
    },
    /// Box centres lie at most `max_distance` pixels apart.
    CentreDistance {
        /// Largest centre distance in pixels that counts.
        max_distance: f64,
    },
}

impl Default for MatchCriterion {
    /// IoU >= 0.5 (common practice, the Pascal VOC and COCO AP50 threshold).
    fn default() -> Self {
        MatchCriterion::Iou { min_iou: 0.5 }
    }
}

impl MatchCriterion {
    /// Rejects an IoU outside `(0, 1]` or a negative or non-finite distance.
    pub fn validate(&self) -> Result<()> {
        match *self {
            MatchCriterion::Iou { min_iou } => {
                in_range(|| "match criterion min_iou".into(), min_iou, 0.0, 1.0)?;
                if min_iou <= 0.0 {
                    return Err(setting(
                        "min_iou",
                        "must be above 0: at 0 every pair of boxes would match",
                    ));
                }
                Ok(())
            }
            MatchCriterion::CentreDistance { max_distance } => in_range(
                || "match criterion max_distance".into(),
                max_distance,
                0.0,
                f64::MAX,
            ),
        }
    }

    /// How well `det` fits `truth` (larger is better), or `None` when it does not fit.
    pub fn fit(&self, det: &BBox, truth: &BBox) -> Option<f64> {
        match *self {
            MatchCriterion::Iou { min_iou } => {
                let iou = det.iou(truth);
                (iou >= min_iou).then_some(iou)
            }
            MatchCriterion::CentreDistance { max_distance } => {
                let (ax, ay) = det.center();
                let (bx, by) = truth.center();
                let d = ((ax - bx).powi(2) + (ay - by).powi(2)).sqrt();
                (d <= max_distance).then_some(-d)
            }
        }
    }
}

/// A ground-truth symbol: class index and box.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ClassedBox {
    /// Class index.
    pub class: usize,
    /// Box in sheet pixels.
    pub bbox: BBox,
}

/// A detection: class index, score and box.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ScoredBox {
    /// Class index.
    pub class: usize,
    /// Score (higher is more confident).
    pub score: f64,
    /// Box in sheet pixels.
    pub bbox: BBox,
}

/// The outcome of matching one sheet.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Assignment {
    /// For each detection, the ground-truth symbol it found.
    pub det_truth: Vec<Option<usize>>,
    /// For each detection, true when it is a false positive that fitted a symbol
    /// another, higher-scored detection had already taken.
    pub duplicate: Vec<bool>,
    /// For each ground-truth symbol, the detection that found it.
    pub truth_det: Vec<Option<usize>>,
}

/// Detection indices in descending score order, ties in input order.
pub fn score_order(dets: &[ScoredBox]) -> Vec<usize> {
    let mut order: Vec<usize> = (0..dets.len()).collect();
    order.sort_by(|&a, &b| dets[b].score.total_cmp(&dets[a].score));
    order
}

/// Same-class greedy matching of one sheet (see the module comment). Only the
/// symbols near each detection are looked at ([`crate::truth_grid`]); the
/// result is that of a scan over all symbols in index order.
pub fn match_sheet(
    truths: &[ClassedBox],
    dets: &[ScoredBox],
    criterion: &MatchCriterion,
) -> Assignment {
    let mut a = Assignment {
        det_truth: vec![None; dets.len()],
        duplicate: vec![false; dets.len()],
        truth_det: vec![None; truths.len()],
    };
    let grid = TruthGrid::new(truths, dets.len());
    let mut cands = Vec::new();
    for d in score_order(dets) {
        let det = &dets[d];
        let mut best: Option<(usize, f64)> = None;
        let mut fits_taken = false;
        grid.candidates(&det.bbox, criterion, &mut cands);
        for &t in &cands {
            let (t, truth) = (t as usize, &truths[t as usize]);
            if truth.class != det.class {
                continue;
            }
            let Some(fit) = criterion.fit(&det.bbox, &truth.bbox) else {
                continue;
            };
            if a.truth_det[t].is_some() {
                fits_taken = true;
                continue;
            }
            if best.is_none_or(|(_, f)| fit > f) {
                best = Some((t, fit));
            }
        }
        match best {
            Some((t, _)) => {
                a.det_truth[d] = Some(t);
                a.truth_det[t] = Some(d);
            }
            None => a.duplicate[d] = fits_taken,
        }
    }
    a
}

/// Second pass for the detection confusion table: detections still unmatched
/// after [`match_sheet`] take, in score order, the best-fitting still-unmatched
/// symbol of *any* class. Returns `(detection, truth)` pairs.
pub fn match_across_classes(
    truths: &[ClassedBox],
    dets: &[ScoredBox],
    criterion: &MatchCriterion,
    first_pass: &Assignment,
) -> Vec<(usize, usize)> {
    let mut taken: Vec<bool> = first_pass.truth_det.iter().map(Option::is_some).collect();
    let mut pairs = Vec::new();
    let grid = TruthGrid::new(truths, dets.len());
    let mut cands = Vec::new();
    for d in score_order(dets) {
        if first_pass.det_truth[d].is_some() {
            continue;
        }
        let mut best: Option<(usize, f64)> = None;
        grid.candidates(&dets[d].bbox, criterion, &mut cands);
        for &t in &cands {
            let (t, truth) = (t as usize, &truths[t as usize]);
            if taken[t] {
                continue;
            }
            if let Some(fit) = criterion.fit(&dets[d].bbox, &truth.bbox)
                && best.is_none_or(|(_, f)| fit > f)
            {
                best = Some((t, fit));
            }
        }
        if let Some((t, _)) = best {
            taken[t] = true;
            pairs.push((d, t));
        }
    }
    pairs
}

/// True when the centre of `b` lies in none of the ignore regions.
pub fn outside_ignore(b: &BBox, ignore: &[BBox]) -> bool {
    let (cx, cy) = b.center();
    !ignore.iter().any(|r| r.contains_point(cx, cy))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(class: usize, x: f64, y: f64) -> ClassedBox {
        ClassedBox {
            class,
            bbox: BBox::new(x, y, 10.0, 10.0),
        }
    }
    fn d(class: usize, score: f64, x: f64, y: f64) -> ScoredBox {
        ScoredBox {
            class,
            score,
            bbox: BBox::new(x, y, 10.0, 10.0),
        }
    }

    #[test]
    fn duplicates_are_false_positives() {
        let truths = [t(0, 0.0, 0.0)];
        let dets = [d(0, 0.6, 1.0, 0.0), d(0, 0.9, 0.0, 0.0)];
        let a = match_sheet(&truths, &dets, &MatchCriterion::default());
        // The higher score takes the symbol even though it is listed second.
        assert_eq!(a.det_truth, vec![None, Some(0)]);
        assert_eq!(a.duplicate, vec![true, false]);
        assert_eq!(a.truth_det, vec![Some(1)]);
    }

    #[test]
    fn class_must_agree_and_iou_threshold_is_inclusive() {
        // A 10x5 box inside a 10x10 box: intersection 50, union 100, IoU exactly 0.5.
        let truths = [t(0, 0.0, 0.0), t(1, 100.0, 0.0)];
        let half = ScoredBox {
            class: 0,
            score: 0.8,
            bbox: BBox::new(0.0, 0.0, 10.0, 5.0),
        };
        let dets = [d(1, 0.9, 0.0, 0.0), half];
        let a = match_sheet(&truths, &dets, &MatchCriterion::Iou { min_iou: 0.5 });
        assert_eq!(a.det_truth, vec![None, Some(0)]);
        assert!(!a.duplicate[0]);
        let a = match_sheet(&truths, &dets, &MatchCriterion::Iou { min_iou: 0.500001 });
        assert_eq!(a.det_truth, vec![None, None]);
        // Across classes, the class-1 detection on top of the class-0 symbol is a confusion.
        let pairs = match_across_classes(&truths, &dets, &MatchCriterion::Iou { min_iou: 0.5 }, &a);
        assert_eq!(pairs, vec![(0, 0)]);
    }

    #[test]
    fn best_fit_among_free_symbols_and_tie_rules() {
        // Two symbols; the first detection overlaps the second better.
        let truths = [t(0, 0.0, 0.0), t(0, 4.0, 0.0)];
        let dets = [d(0, 0.9, 5.0, 0.0), d(0, 0.9, 2.0, 0.0)];
        let a = match_sheet(&truths, &dets, &MatchCriterion::Iou { min_iou: 0.3 });
        // Equal scores: detection 0 goes first (input order) and takes symbol 1.
        assert_eq!(a.det_truth, vec![Some(1), Some(0)]);
        // Equally good symbols: the one listed first wins.
        let truths = [t(0, 0.0, 0.0), t(0, 4.0, 0.0)];
        let a = match_sheet(
            &truths,
            &[d(0, 0.5, 2.0, 0.0)],
            &MatchCriterion::Iou { min_iou: 0.3 },
        );
        assert_eq!(a.det_truth, vec![Some(0)]);
    }

    #[test]
    fn centre_distance_option() {
        let truths = [t(0, 0.0, 0.0)];
        let dets = [ScoredBox {
            class: 0,
            score: 0.5,
            bbox: BBox::centered(8.0, 5.0, 30.0, 30.0),
        }];
        let c = MatchCriterion::CentreDistance { max_distance: 3.0 };
        assert_eq!(match_sheet(&truths, &dets, &c).det_truth, vec![Some(0)]);
        // The same pair has IoU 100/900, far below 0.5.
        assert_eq!(
            match_sheet(&truths, &dets, &MatchCriterion::default()).det_truth,
            vec![None]
        );
        let c = MatchCriterion::CentreDistance { max_distance: 2.9 };
        assert_eq!(match_sheet(&truths, &dets, &c).det_truth, vec![None]);
    }

    #[test]
    fn ignore_uses_centre() {
        let ignore = [BBox::new(0.0, 0.0, 50.0, 50.0)];
        assert!(!outside_ignore(&BBox::new(40.0, 40.0, 18.0, 18.0), &ignore));
        assert!(outside_ignore(&BBox::new(40.0, 40.0, 22.0, 22.0), &ignore));
    }

    proptest::proptest! {
        #[test]
        fn greedy_matching_invariants(
            truths in proptest::collection::vec((0usize..2, 0u8..10, 0u8..10), 0..10),
            dets in proptest::collection::vec((0usize..2, 0u8..6, 0u8..10, 0u8..10), 0..14),
            min_iou in 0.1..0.9f64,
        ) {
            let b = |x: u8, y: u8| BBox::new(f64::from(x) * 3.0, f64::from(y) * 3.0, 10.0, 10.0);
            let truths: Vec<ClassedBox> = truths.iter().map(|&(c, x, y)| ClassedBox { class: c, bbox: b(x, y) }).collect();
            let dets: Vec<ScoredBox> = dets.iter().map(|&(c, s, x, y)| ScoredBox { class: c, score: f64::from(s) / 6.0, bbox: b(x, y) }).collect();
            let crit = MatchCriterion::Iou { min_iou };
            let a = match_sheet(&truths, &dets, &crit);
            let order = score_order(&dets);
            let rank = |d: usize| order.iter().position(|&o| o == d).unwrap();
            for (d, t) in a.det_truth.iter().enumerate() {
                match t {
                    Some(t) => {
                        // A match is mutual, of the same class and fits.
                        proptest::prop_assert_eq!(a.truth_det[*t], Some(d));
                        proptest::prop_assert_eq!(truths[*t].class, dets[d].class);
                        proptest::prop_assert!(crit.fit(&dets[d].bbox, &truths[*t].bbox).is_some());
                    }
                    None => {
                        // Every fitting same-class symbol was taken by a detection ranked earlier,
                        // and the duplicate flag says whether there was one.
                        let fitting: Vec<usize> = (0..truths.len())
                            .filter(|&t| truths[t].class == dets[d].class && crit.fit(&dets[d].bbox, &truths[t].bbox).is_some())
                            .collect();
                        for &t in &fitting {
                            let by = a.truth_det[t];
                            proptest::prop_assert!(by.is_some_and(|o| rank(o) < rank(d)));
                        }
                        proptest::prop_assert_eq!(a.duplicate[d], !fitting.is_empty());
                    }
                }
            }
        }
    }

    /// The plain scan over every symbol that the grid must reproduce.
    fn scan_all(truths: &[ClassedBox], dets: &[ScoredBox], crit: &MatchCriterion) -> Assignment {
        let mut a = Assignment {
            det_truth: vec![None; dets.len()],
            duplicate: vec![false; dets.len()],
            truth_det: vec![None; truths.len()],
        };
        for d in score_order(dets) {
            let mut best: Option<(usize, f64)> = None;
            let mut fits_taken = false;
            for (t, truth) in truths.iter().enumerate() {
                if truth.class != dets[d].class {
                    continue;
                }
                let Some(fit) = crit.fit(&dets[d].bbox, &truth.bbox) else {
                    continue;
                };
                if a.truth_det[t].is_some() {
                    fits_taken = true;
                } else if best.is_none_or(|(_, f)| fit > f) {
                    best = Some((t, fit));
                }
            }
            match best {
                Some((t, _)) => {
                    a.det_truth[d] = Some(t);
                    a.truth_det[t] = Some(d);
                }
                None => a.duplicate[d] = fits_taken,
            }
        }
        a
    }

    fn scan_across(
        truths: &[ClassedBox],
        dets: &[ScoredBox],
        crit: &MatchCriterion,
        first: &Assignment,
    ) -> Vec<(usize, usize)> {
        let mut taken: Vec<bool> = first.truth_det.iter().map(Option::is_some).collect();
        let mut pairs = Vec::new();
        for d in score_order(dets) {
            if first.det_truth[d].is_some() {
                continue;
            }
            let mut best: Option<(usize, f64)> = None;
            for (t, truth) in truths.iter().enumerate() {
                if let Some(fit) = crit.fit(&dets[d].bbox, &truth.bbox)
                    && !taken[t]
                    && best.is_none_or(|(_, f)| fit > f)
                {
                    best = Some((t, fit));
                }
            }
            if let Some((t, _)) = best {
                taken[t] = true;
                pairs.push((d, t));
            }
        }
        pairs
    }

    proptest::proptest! {
        #[test]
        fn grid_gives_the_plain_scan(
            truths in proptest::collection::vec((0usize..3, -5i16..200, -5i16..120, 1u8..12, 1u8..12), 20..90),
            dets in proptest::collection::vec((0usize..3, 0u8..6, -8i16..205, -8i16..125, 1u8..12, 1u8..12), 15..120),
            min_iou in proptest::sample::select(vec![0.05, 0.3, 0.5, 0.8, 1.0]),
            distance in proptest::sample::select(vec![0.0, 2.0, 5.5, 16.0, 400.0]),
        ) {
            // Sizes and positions on a coarse lattice: exact fits, equal fits and
            // boxes on cell edges are common; a few boxes lie off the sheet.
            let b = |x: i16, y: i16, w: u8, h: u8| BBox::new(f64::from(x) * 1.5, f64::from(y) * 1.5, f64::from(w) * 3.0, f64::from(h) * 3.0);
            let truths: Vec<ClassedBox> = truths.iter().map(|&(c, x, y, w, h)| ClassedBox { class: c, bbox: b(x, y, w, h) }).collect();
            let dets: Vec<ScoredBox> = dets.iter().map(|&(c, s, x, y, w, h)| ScoredBox { class: c, score: f64::from(s) / 6.0, bbox: b(x, y, w, h) }).collect();
            for crit in [MatchCriterion::Iou { min_iou }, MatchCriterion::CentreDistance { max_distance: distance }] {
                let a = match_sheet(&truths, &dets, &crit);
                let want = scan_all(&truths, &dets, &crit);
                proptest::prop_assert_eq!(&a, &want);
                proptest::prop_assert_eq!(
                    match_across_classes(&truths, &dets, &crit, &a),
                    scan_across(&truths, &dets, &crit, &want)
                );
            }
        }
    }

    #[test]
    fn settings_are_checked() {
        assert!(MatchCriterion::Iou { min_iou: 0.0 }.validate().is_err());
        assert!(MatchCriterion::Iou { min_iou: 1.2 }.validate().is_err());
        assert!(
            MatchCriterion::CentreDistance { max_distance: -1.0 }
                .validate()
                .is_err()
        );
        assert!(MatchCriterion::default().validate().is_ok());
    }
}
