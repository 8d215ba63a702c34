//! Confusion tables and the per-class figures read off them.
//!
//! Rows are the true class, columns the predicted class (the layout of
//! scikit-learn's `confusion_matrix`). For class `k` with `TP` on the diagonal,
//! `FP` the rest of column `k` and `FN` the rest of row `k`:
//!
//! ```text
//! precision = TP / (TP + FP)   recall = TP / (TP + FN)   F1 = 2TP / (2TP + FP + FN)
//! ```
//!
//! each `None` when its denominator is 0 (scikit-learn's
//! `precision_recall_fscore_support` with `zero_division=nan`; F1 written this
//! way is the harmonic mean of precision and recall whenever both exist).
//!
//! The **detection confusion table** of a set of sheets at an operating
//! threshold has rows = ground-truth class plus `none` and columns = predicted
//! class plus `missed`. Detections scored `>= threshold` are first matched to
//! their own class ([`match_sheet`]: the diagonal); those left over then take a
//! free symbol of any other class that they fit ([`match_across_classes`]: a
//! class confusion); a detection still left over counts in row `none` (a false
//! alarm on background, or a duplicate), and a symbol still unfound in column
//! `missed`. So each symbol is counted once in its row and each kept detection
//! once in its column.

use crate::error::{EvalError, Result};
use crate::matching::{ClassedBox, MatchCriterion, ScoredBox, match_across_classes, match_sheet};
use serde::{Deserialize, Serialize};

/// Label of the extra detection-table row: detections that found no symbol.
pub const NONE_ROW: &str = "none";
/// Label of the extra detection-table column: symbols no detection found.
pub const MISSED_COLUMN: &str = "missed";

/// A table of counts, `counts[row][column]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConfusionTable {
    /// Row labels (true class).
    pub rows: Vec<String>,
    /// Column labels (predicted class).
    pub columns: Vec<String>,
    /// Counts, one vector per row.
    pub counts: Vec<Vec<u64>>,
}

/// Precision, recall and F1 of one class.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassFigures {
    /// Class name.
    pub class: String,
    /// Items truly of this class.
    pub support: u64,
    /// Items predicted as this class.
    pub predicted: u64,
    /// Items correctly predicted as this class.
    pub tp: u64,
    /// `TP / (TP + FP)`.
    pub precision: Option<f64>,
    /// `TP / (TP + FN)`.
    pub recall: Option<f64>,
    /// `2TP / (2TP + FP + FN)`.
    pub f1: Option<f64>,
}

fn ratio(num: u64, den: u64) -> Option<f64> {
    (den > 0).then(|| num as f64 / den as f64)
}

/// Confusion table of crop decisions: `truth[i]` and `predicted[i]` are class
/// indices into `class_names` (which includes background).
pub fn crop_confusion(
    truth: &[usize],
    predicted: &[usize],
    class_names: &[String],
) -> Result<ConfusionTable> {
    if truth.len() != predicted.len() {
        return Err(EvalError::LengthMismatch {
            what: "predicted classes (one per crop)".into(),
            expected: truth.len(),
            got: predicted.len(),
        });
    }
    let n = class_names.len();
    let mut counts = vec![vec![0u64; n]; n];
    for (i, (&t, &p)) in truth.iter().zip(predicted).enumerate() {
        for (what, k) in [("true class", t), ("predicted class", p)] {
            if k >= n {
                return Err(EvalError::ClassIndexOutOfRange {
                    what: format!("crop #{i}, {what}"),
                    index: k,
                    n_classes: n,
                });
            }
        }
        counts[t][p] += 1;
    }
    Ok(ConfusionTable {
        rows: class_names.to_vec(),
        columns: class_names.to_vec(),
        counts,
    })
}

impl ConfusionTable {
    /// Precision, recall and F1 of every class of a square table.
    pub fn class_figures(&self) -> Vec<ClassFigures> {
        let n = self.rows.len().min(self.columns.len());
        (0..n)
            .map(|k| {
                let tp = self.counts[k][k];
                let support: u64 = self.counts[k].iter().sum();
                let predicted: u64 = self.counts.iter().map(|r| r[k]).sum();
                let (fp, fn_) = (predicted - tp, support - tp);
                ClassFigures {
                    class: self.rows[k].clone(),
                    support,
                    predicted,
                    tp,
                    precision: ratio(tp, predicted),
                    recall: ratio(tp, support),
                    f1: ratio(2 * tp, 2 * tp + fp + fn_),
                }
            })
            .collect()
    }

    /// Share of items on the diagonal; `None` for an empty table.
    pub fn accuracy(&self) -> Option<f64> {
        let total: u64 = self.counts.iter().flatten().sum();
        let diag: u64 = (0..self.rows.len().min(self.columns.len()))
            .map(|k| self.counts[k][k])
            .sum();
        ratio(diag, total)
    }
}

/// Adds one sheet to a detection confusion table built by
/// [`empty_detection_table`] (see the module comment for the rule).
pub fn add_sheet_to_detection_table(
    table: &mut ConfusionTable,
    truths: &[ClassedBox],
    dets: &[ScoredBox],
    criterion: &MatchCriterion,
    threshold: f64,
) {
    let n = table.rows.len() - 1;
    let kept: Vec<ScoredBox> = dets
        .iter()
        .filter(|d| d.score >= threshold)
        .copied()
        .collect();
    let first = match_sheet(truths, &kept, criterion);
    let cross = match_across_classes(truths, &kept, criterion, &first);
    let mut truth_found = first
        .truth_det
        .iter()
        .map(Option::is_some)
        .collect::<Vec<_>>();
    let mut det_used = first
        .det_truth
        .iter()
        .map(Option::is_some)
        .collect::<Vec<_>>();
    for (d, t) in first
        .det_truth
        .iter()
        .enumerate()
        .filter_map(|(d, t)| t.map(|t| (d, t)))
    {
        table.counts[truths[t].class][kept[d].class] += 1;
    }
    for &(d, t) in &cross {
        table.counts[truths[t].class][kept[d].class] += 1;
        truth_found[t] = true;
        det_used[d] = true;
    }
    for (d, used) in det_used.iter().enumerate() {
        if !used {
            table.counts[n][kept[d].class] += 1;
        }
    }
    for (t, found) in truth_found.iter().enumerate() {
        if !found {
            table.counts[truths[t].class][n] += 1;
        }
    }
}

/// An all-zero detection confusion table for `class_names`.
pub fn empty_detection_table(class_names: &[String]) -> ConfusionTable {
    let n = class_names.len();
    let mut rows = class_names.to_vec();
    rows.push(NONE_ROW.into());
    let mut columns = class_names.to_vec();
    columns.push(MISSED_COLUMN.into());
    ConfusionTable {
        rows,
        columns,
        counts: vec![vec![0; n + 1]; n + 1],
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use symtrust_labels::BBox;

    fn names(n: usize) -> Vec<String> {
        (0..n).map(|i| format!("c{i}")).collect()
    }

    #[test]
    fn crop_table_by_hand() {
        // truth 0 0 1 1 2, predicted 0 1 1 1 0.
        let t = crop_confusion(&[0, 0, 1, 1, 2], &[0, 1, 1, 1, 0], &names(3)).unwrap();
        assert_eq!(t.counts, vec![vec![1, 1, 0], vec![0, 2, 0], vec![1, 0, 0]]);
        let f = t.class_figures();
        // Class 0: TP 1, FP 1, FN 1 -> P = R = F1 = 0.5. Class 2: never predicted.
        assert_eq!(
            (f[0].precision, f[0].recall, f[0].f1),
            (Some(0.5), Some(0.5), Some(0.5))
        );
        assert_eq!(
            (f[2].precision, f[2].recall, f[2].f1),
            (None, Some(0.0), Some(0.0))
        );
        assert_eq!(t.accuracy(), Some(0.6));
        assert!(crop_confusion(&[0, 3], &[0, 0], &names(3)).is_err());
        assert!(crop_confusion(&[0], &[0, 0], &names(3)).is_err());
    }

    #[test]
    fn detection_table_by_hand() {
        let b = |x: f64| BBox::new(x, 0.0, 10.0, 10.0);
        let truths = [
            ClassedBox {
                class: 0,
                bbox: b(0.0),
            },
            ClassedBox {
                class: 1,
                bbox: b(100.0),
            },
            ClassedBox {
                class: 1,
                bbox: b(200.0),
            },
        ];
        let dets = [
            ScoredBox {
                class: 0,
                score: 0.9,
                bbox: b(0.0),
            }, // right
            ScoredBox {
                class: 0,
                score: 0.8,
                bbox: b(1.0),
            }, // duplicate -> none
            ScoredBox {
                class: 0,
                score: 0.7,
                bbox: b(100.0),
            }, // class 1 seen as 0
            ScoredBox {
                class: 1,
                score: 0.6,
                bbox: b(500.0),
            }, // background
            ScoredBox {
                class: 1,
                score: 0.1,
                bbox: b(200.0),
            }, // below threshold
        ];
        let mut t = empty_detection_table(&names(2));
        add_sheet_to_detection_table(&mut t, &truths, &dets, &MatchCriterion::default(), 0.5);
        assert_eq!(t.counts, vec![vec![1, 0, 0], vec![1, 0, 1], vec![1, 1, 0]]);
        assert_eq!(t.rows.last().unwrap(), NONE_ROW);
        assert_eq!(t.columns.last().unwrap(), MISSED_COLUMN);
    }

    proptest! {
        #[test]
        fn detection_table_counts_each_item_once(
            truths in prop::collection::vec((0usize..3, 0u8..12, 0u8..12), 0..10),
            dets in prop::collection::vec((0usize..3, 0u8..10, 0u8..12, 0u8..12), 0..14),
            threshold in 0u8..10,
        ) {
            let b = |x: u8, y: u8| BBox::new(f64::from(x) * 4.0, f64::from(y) * 4.0, 10.0, 10.0);
            let truths: Vec<ClassedBox> = truths.iter().map(|&(c, x, y)| ClassedBox { class: c, bbox: b(x, y) }).collect();
            let dets: Vec<ScoredBox> = dets.iter().map(|&(c, s, x, y)| ScoredBox { class: c, score: f64::from(s) / 10.0, bbox: b(x, y) }).collect();
            let thr = f64::from(threshold) / 10.0;
            let mut t = empty_detection_table(&names(3));
            add_sheet_to_detection_table(&mut t, &truths, &dets, &MatchCriterion::default(), thr);
            for k in 0..3 {
                let row: u64 = t.counts[k].iter().sum();
                prop_assert_eq!(row, truths.iter().filter(|x| x.class == k).count() as u64);
                let col: u64 = t.counts.iter().map(|r| r[k]).sum();
                prop_assert_eq!(col, dets.iter().filter(|d| d.class == k && d.score >= thr).count() as u64);
            }
            prop_assert_eq!(t.counts[3][3], 0);
        }
    }
}
