//! One ranking of every detection of the evaluated sheets, sorted once, from
//! which the pooled PR curve of any class and any multiset of sheets is read
//! in a single pass.
//!
//! [`crate::sheets::pooled_curve`] concatenates the chosen sheets' detections
//! and sorts them; a bootstrap replicate or an IoU-sweep row would repeat that
//! sort. Here the detections are sorted once (descending score by
//! `f64::total_cmp`, stable); a multiset of sheets is given as a weight per
//! sheet (how often it was drawn), and the walk adds each detection's weight
//! to the true- or false-positive count, skipping sheets of weight 0. The
//! sequence of scores met is that of the sorted concatenation, tied scores
//! are grouped by `==` in the same way, and the counts are the same integers,
//! so the curve is identical, point for point, to `pooled_curve` on the
//! multiset (tested against it).

use crate::ap::{all_point_of, envelope_in_place, points_101_of};
use crate::pr::{PrCurve, PrPoint};
use crate::sheets::SheetOutcomes;
use rayon::prelude::*;

#[derive(Clone, Copy)]
struct Entry {
    score: f64,
    sheet: u32,
    /// Index into the flat (sheet by sheet) list of detections.
    flat: u32,
}

/// Each detection's outcome in the order of a [`Ranking`]'s lists, packed
/// with its sheet and whether it ends a run of equal scores:
/// `sheet << 2 | true_positive << 1 | ends_run`. Four bytes a detection, so
/// a bootstrap replicate streams little memory.
pub(crate) struct RankedFlags {
    all: Vec<u32>,
    by_class: Vec<Vec<u32>>,
}

/// Reused buffers of [`Ranking::ap_into`].
#[derive(Default)]
pub(crate) struct ApScratch {
    precision: Vec<f64>,
    recall: Vec<f64>,
}

/// The sorted detections of a set of sheets (see the module comment).
pub(crate) struct Ranking {
    all: Vec<Entry>,
    by_class: Vec<Vec<Entry>>,
    /// Ground truth per sheet and class.
    truths: Vec<Vec<u64>>,
}

impl Ranking {
    /// Ranks the detections of `sheets` (`n_classes` classes).
    pub(crate) fn new(sheets: &[SheetOutcomes], n_classes: usize) -> Self {
        let mut all = Vec::with_capacity(sheets.iter().map(|s| s.outcomes.len()).sum());
        let mut classes = Vec::with_capacity(all.capacity());
        for (i, s) in sheets.iter().enumerate() {
            for o in &s.outcomes {
                all.push(Entry {
                    score: o.score,
                    sheet: i as u32,
                    flat: all.len() as u32,
                });
                classes.push(o.class);
            }
        }
        // Descending `total_cmp` order, ties in flat order: the order of a
        // stable sort, by an unstable sort on a total key (faster).
        all.par_sort_unstable_by_key(|e| (std::cmp::Reverse(total_order_key(e.score)), e.flat));
        let mut by_class = vec![Vec::new(); n_classes];
        for e in &all {
            by_class[classes[e.flat as usize]].push(*e);
        }
        Self {
            all,
            by_class,
            truths: sheets.iter().map(|s| s.truths_per_class.clone()).collect(),
        }
    }

    /// Number of detections ranked.
    pub(crate) fn len(&self) -> usize {
        self.all.len()
    }

    /// The outcomes `true_positive` (one per detection, in flat order) laid
    /// out in ranking order, so that a walk reads them in sequence.
    pub(crate) fn flags(&self, true_positive: &[bool]) -> RankedFlags {
        let gather = |list: &Vec<Entry>| -> Vec<u32> {
            (0..list.len())
                .map(|i| {
                    let e = list[i];
                    let ends = list.get(i + 1).is_none_or(|n| n.score != e.score);
                    e.sheet << 2 | u32::from(true_positive[e.flat as usize]) << 1 | u32::from(ends)
                })
                .collect()
        };
        let (all, by_class) = rayon::join(
            || gather(&self.all),
            || self.by_class.par_iter().map(gather).collect(),
        );
        RankedFlags { all, by_class }
    }

    /// Writes into `out` the PR curve of class `class` (all classes when
    /// `None`) over the sheets with their `weights`, with the detections'
    /// outcomes `flags`.
    pub(crate) fn curve_into(
        &self,
        class: Option<usize>,
        flags: &RankedFlags,
        weights: &[u32],
        out: &mut PrCurve,
    ) {
        let n_positives = self.positives(class, weights);
        let (list, tps) = match class {
            Some(k) => (&self.by_class[k], &flags.by_class[k]),
            None => (&self.all, &flags.all),
        };
        out.n_positives = n_positives;
        out.points.clear();
        let (mut tp, mut fp) = (0u64, 0u64);
        let mut i = 0;
        while i < list.len() {
            if weights[list[i].sheet as usize] == 0 {
                i += 1;
                continue;
            }
            let t = list[i].score;
            while i < list.len() && list[i].score == t {
                let w = u64::from(weights[list[i].sheet as usize]);
                if tps[i] & 2 != 0 {
                    tp += w;
                } else {
                    fp += w;
                }
                i += 1;
            }
            out.points.push(PrPoint {
                threshold: t,
                tp,
                fp,
                precision: tp as f64 / (tp + fp) as f64,
                recall: if n_positives == 0 {
                    0.0
                } else {
                    tp as f64 / n_positives as f64
                },
            });
        }
    }

    /// All-point and 101-point AP of the curve [`Self::curve_into`] would
    /// write, without writing it: only each point's precision and recall are
    /// kept, and the AP arithmetic is that of [`crate::ap`] (tested equal).
    pub(crate) fn ap_into(
        &self,
        class: Option<usize>,
        flags: &RankedFlags,
        weights: &[u32],
        s: &mut ApScratch,
    ) -> (Option<f64>, Option<f64>) {
        let n_positives = self.positives(class, weights);
        if n_positives == 0 {
            return (None, None);
        }
        let packed = match class {
            Some(k) => &flags.by_class[k],
            None => &flags.all,
        };
        if s.precision.len() < packed.len() {
            s.precision.resize(packed.len(), 0.0);
            s.recall.resize(packed.len(), 0.0);
        }
        let (mut tp, mut fp, mut in_run) = (0u64, 0u64, 0u64);
        let mut len = 0;
        if weights.iter().all(|&w| w == 1) {
            // Every sheet once (the main figures and the IoU sweep): the same
            // counts without reading a weight per detection.
            for &p in packed {
                let hit = u64::from(p >> 1 & 1);
                tp += hit;
                fp += 1 - hit;
                if p & 1 != 0 {
                    s.precision[len] = tp as f64 / (tp + fp) as f64;
                    s.recall[len] = tp as f64 / n_positives as f64;
                    len += 1;
                }
            }
        } else {
            for &p in packed {
                let w = u64::from(weights[(p >> 2) as usize]);
                let hit = u64::from(p >> 1 & 1);
                tp += w * hit;
                fp += w * (1 - hit);
                in_run += w;
                if p & 1 != 0 {
                    // A run of equal scores ends: a point when any of it was drawn.
                    if in_run > 0 {
                        s.precision[len] = tp as f64 / (tp + fp) as f64;
                        s.recall[len] = tp as f64 / n_positives as f64;
                        len += 1;
                    }
                    in_run = 0;
                }
            }
        }
        let env = &mut s.precision[..len];
        envelope_in_place(env);
        let recall = &s.recall[..len];
        (
            Some(all_point_of(recall, env)),
            Some(points_101_of(recall, env)),
        )
    }

    fn positives(&self, class: Option<usize>, weights: &[u32]) -> u64 {
        self.truths
            .iter()
            .zip(weights)
            .map(|(t, &w)| {
                u64::from(w)
                    * match class {
                        Some(k) => t[k],
                        None => t.iter().sum(),
                    }
            })
            .sum()
    }

    /// The PR curve of `class` over the sheets with their `weights`.
    pub(crate) fn curve(
        &self,
        class: Option<usize>,
        flags: &RankedFlags,
        weights: &[u32],
    ) -> PrCurve {
        let mut out = PrCurve {
            n_positives: 0,
            points: Vec::new(),
        };
        self.curve_into(class, flags, weights, &mut out);
        out
    }
}

/// A key whose integer order is the order of `f64::total_cmp` (the mapping
/// in the standard library's `total_cmp`).
fn total_order_key(x: f64) -> i64 {
    let mut bits = x.to_bits() as i64;
    bits ^= (((bits >> 63) as u64) >> 1) as i64;
    bits
}

/// Each detection's true-positive flag, sheet by sheet in flat order.
pub(crate) fn flat_true_positives(sheets: &[SheetOutcomes]) -> Vec<bool> {
    sheets
        .iter()
        .flat_map(|s| s.outcomes.iter().map(|o| o.true_positive))
        .collect()
}

/// How often each of `n_sheets` sheets occurs in `idx`.
pub(crate) fn weights_of(idx: &[usize], n_sheets: usize) -> Vec<u32> {
    let mut w = vec![0u32; n_sheets];
    for &i in idx {
        w[i] += 1;
    }
    w
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sheets::{Outcome, pooled_curve};
    use proptest::prelude::*;

    fn sheet(name: usize, outcomes: &[(usize, u8, bool)], truths: [u64; 2]) -> SheetOutcomes {
        SheetOutcomes {
            sheet: format!("s{name}"),
            truths_per_class: truths.to_vec(),
            outcomes: outcomes
                .iter()
                .map(|&(class, s, tp)| Outcome {
                    class,
                    // Coarse scores so ties across sheets are frequent; 0 gives
                    // both signs of zero, which compare equal but sort apart.
                    score: if s == 0 && tp {
                        -0.0
                    } else {
                        f64::from(s) / 8.0
                    },
                    true_positive: tp,
                    duplicate: false,
                })
                .collect(),
        }
    }

    proptest! {
        #[test]
        fn same_curve_as_pooling_and_sorting(
            sheets in prop::collection::vec(
                (prop::collection::vec((0usize..2, 0u8..9, any::<bool>()), 0..12), 0u64..4, 0u64..4),
                1..6,
            ),
            idx_seed in prop::collection::vec(0usize..100, 0..10),
        ) {
            let sheets: Vec<SheetOutcomes> = sheets
                .iter()
                .enumerate()
                .map(|(i, (o, a, b))| {
                    let tp = |k: usize| o.iter().filter(|x| x.0 == k && x.2).count() as u64;
                    sheet(i, o, [tp(0) + a, tp(1) + b])
                })
                .collect();
            let n = sheets.len();
            let idx: Vec<usize> = idx_seed.iter().map(|i| i % n).collect();
            let r = Ranking::new(&sheets, 2);
            let tp = r.flags(&flat_true_positives(&sheets));
            let w = weights_of(&idx, n);
            // Every sheet once takes the unweighted path of `ap_into`.
            let all: Vec<usize> = (0..n).collect();
            let ones = weights_of(&all, n);
            for class in [None, Some(0), Some(1)] {
                let want = pooled_curve(&sheets, &all, class);
                let (a, p) = r.ap_into(class, &tp, &ones, &mut ApScratch::default());
                let exact = |x: Option<f64>| x.map(f64::to_bits);
                prop_assert_eq!(exact(a), exact(crate::ap::ap_all_point(&want)));
                prop_assert_eq!(exact(p), exact(crate::ap::ap_101(&want)));
            }
            for class in [None, Some(0), Some(1)] {
                let got = r.curve(class, &tp, &w);
                let want = pooled_curve(&sheets, &idx, class);
                // Equal as values, and thresholds equal bit for bit (the sign of zero).
                let bits = |c: &PrCurve| c.points.iter().map(|p| p.threshold.to_bits()).collect::<Vec<_>>();
                prop_assert_eq!(bits(&got), bits(&want));
                let (a, p) = r.ap_into(class, &tp, &w, &mut ApScratch::default());
                let exact = |x: Option<f64>| x.map(f64::to_bits);
                prop_assert_eq!(exact(a), exact(crate::ap::ap_all_point(&want)));
                prop_assert_eq!(exact(p), exact(crate::ap::ap_101(&want)));
                prop_assert_eq!(got, want);
            }
        }
    }
}
