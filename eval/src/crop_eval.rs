//! Crop-level evaluation: how well the classifier labels single windows.
//!
//! Input: for each crop its true class index and a row of per-class scores
//! (probabilities; background is one of the classes). The predicted class is
//! the arg-max of the row, ties to the lowest index (numpy's `argmax` rule).
//! Output: the confusion table over all classes, per-class precision, recall
//! and F1 ([`crate::confusion`]), and for each class one-vs-rest: the PR curve
//! of its score column against "is this class", its AP (step sum, all-point,
//! 101-point; [`crate::ap`]) and ROC AUC ([`crate::roc`]).

use crate::ap::ApFigures;
use crate::confusion::{ClassFigures, ConfusionTable, crop_confusion};
use crate::error::{EvalError, Result, in_range};
use crate::pr::{PrCurve, pr_curve};
use crate::roc::roc_curve;
use serde::{Deserialize, Serialize};

/// One-vs-rest figures of one class.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OneVsRest {
    /// Class name.
    pub class: String,
    /// PR curve of this class's score column.
    pub pr: PrCurve,
    /// AP of that curve.
    pub ap: ApFigures,
    /// ROC AUC (`None` when every crop is, or none is, of this class).
    pub roc_auc: Option<f64>,
}

/// Everything measured on a set of crops.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CropEvaluation {
    /// Number of crops.
    pub n_crops: u64,
    /// Confusion table (rows true, columns arg-max prediction).
    pub confusion: ConfusionTable,
    /// Share of crops predicted correctly.
    pub accuracy: Option<f64>,
    /// Precision, recall and F1 per class.
    pub per_class: Vec<ClassFigures>,
    /// One-vs-rest curves per class.
    pub one_vs_rest: Vec<OneVsRest>,
}

/// Arg-max of a row, ties to the lowest index.
pub fn argmax(row: &[f64]) -> usize {
    let mut best = 0;
    for (i, v) in row.iter().enumerate() {
        if *v > row[best] {
            best = i;
        }
    }
    best
}

/// Evaluates crops (see the module comment). Scores must lie in `[0, 1]`.
pub fn evaluate_crops(
    truth: &[usize],
    scores: &[Vec<f64>],
    class_names: &[String],
) -> Result<CropEvaluation> {
    let n = class_names.len();
    if n == 0 {
        return Err(EvalError::Empty {
            what: "class list".into(),
        });
    }
    if truth.len() != scores.len() {
        return Err(EvalError::LengthMismatch {
            what: "score rows (one per crop)".into(),
            expected: truth.len(),
            got: scores.len(),
        });
    }
    for (i, row) in scores.iter().enumerate() {
        if row.len() != n {
            return Err(EvalError::LengthMismatch {
                what: format!("score row of crop #{i} (one per class)"),
                expected: n,
                got: row.len(),
            });
        }
        for (k, v) in row.iter().enumerate() {
            in_range(
                || format!("crop #{i}, score of class {:?}", class_names[k]),
                *v,
                0.0,
                1.0,
            )?;
        }
    }
    let predicted: Vec<usize> = scores.iter().map(|r| argmax(r)).collect();
    let confusion = crop_confusion(truth, &predicted, class_names)?;
    let mut one_vs_rest = Vec::with_capacity(n);
    for (k, name) in class_names.iter().enumerate() {
        let items: Vec<(f64, bool)> = scores
            .iter()
            .zip(truth)
            .map(|(r, &t)| (r[k], t == k))
            .collect();
        let n_pos = truth.iter().filter(|&&t| t == k).count() as u64;
        let pr = pr_curve(&items, n_pos)?;
        one_vs_rest.push(OneVsRest {
            class: name.clone(),
            ap: ApFigures::of(&pr),
            pr,
            roc_auc: roc_curve(&items)?.auc,
        });
    }
    Ok(CropEvaluation {
        n_crops: truth.len() as u64,
        accuracy: confusion.accuracy(),
        per_class: confusion.class_figures(),
        confusion,
        one_vs_rest,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_set_by_hand() {
        let names: Vec<String> = ["background", "valve"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let truth = [0, 1, 1, 0];
        let scores = vec![
            vec![0.8, 0.2],
            vec![0.3, 0.7],
            vec![0.6, 0.4],
            vec![0.5, 0.5],
        ];
        let e = evaluate_crops(&truth, &scores, &names).unwrap();
        // Arg-max: 0, 1, 0, 0 (the 0.5/0.5 tie goes to index 0).
        assert_eq!(e.confusion.counts, vec![vec![2, 0], vec![1, 1]]);
        assert_eq!(e.accuracy, Some(0.75));
        // Valve column 0.2(-) 0.7(+) 0.4(+) 0.5(-): pairs won 3 of 4.
        assert_eq!(e.one_vs_rest[1].roc_auc, Some(0.75));
        assert_eq!(argmax(&[0.1, 0.3, 0.3]), 1);
    }

    #[test]
    fn bad_rows_are_named() {
        let names: Vec<String> = vec!["a".into(), "b".into()];
        let msg = evaluate_crops(&[0, 1], &[vec![0.5, 0.5], vec![0.5]], &names)
            .unwrap_err()
            .to_string();
        assert!(msg.contains("crop #1"), "{msg}");
        let msg = evaluate_crops(&[0], &[vec![0.5, f64::NAN]], &names)
            .unwrap_err()
            .to_string();
        assert!(msg.contains("crop #0") && msg.contains("\"b\""), "{msg}");
        assert!(evaluate_crops(&[2], &[vec![0.5, 0.5]], &names).is_err());
    }
}
