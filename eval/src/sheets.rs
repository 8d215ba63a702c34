//! Held-out sheets as evaluation sees them: checking, ignore regions,
//! per-sheet matching, and pooling the matched detections of any multiset of
//! sheets into one ranked list.
//!
//! Matching is done once per sheet, so a bootstrap replicate or a paired
//! comparison only re-pools: for sheets `S` (repeats allowed) and class `k`,
//! the ranked list is the concatenation of each sheet's `(score, is TP)` pairs
//! of class `k`, and the recall denominator is `sum_{s in S} N_k(s)`, the
//! ground truth of class `k` on those sheets. A sheet drawn twice counts twice.
//! Ignore regions act by box centre on ground truth and detections alike.

use crate::error::{EvalError, Result, in_range};
use crate::matching::{ClassedBox, MatchCriterion, ScoredBox, match_sheet, outside_ignore};
use crate::pr::{PrCurve, pr_curve};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::HashSet;
use symtrust_labels::BBox;
use symtrust_labels::detections::Detection;

/// A ground-truth symbol as evaluation needs it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TruthSymbol {
    /// Class name.
    pub class: String,
    /// Box in sheet pixels.
    pub bbox: BBox,
}

/// One held-out sheet: its ground truth, its detections and its ignore regions.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SheetInput {
    /// Sheet id.
    pub sheet: String,
    /// Accepted ground-truth symbols.
    pub truths: Vec<TruthSymbol>,
    /// The detector's output on this sheet.
    pub detections: Vec<Detection>,
    /// Regions (legend, title block) excluded from evaluation.
    pub ignore: Vec<BBox>,
}

/// A sheet after checking, class lookup and ignore filtering.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PreparedSheet {
    /// Sheet id.
    pub sheet: String,
    /// Ground truth outside the ignore regions.
    pub truths: Vec<ClassedBox>,
    /// Detections outside the ignore regions.
    pub dets: Vec<ScoredBox>,
    /// Ground truth dropped by ignore regions.
    pub ignored_truths: u64,
    /// Detections dropped by ignore regions.
    pub ignored_detections: u64,
}

fn class_index(what: impl Fn() -> String, class: &str, names: &[String]) -> Result<usize> {
    names
        .iter()
        .position(|n| n == class)
        .ok_or_else(|| EvalError::UnknownClass {
            what: what(),
            class: class.to_string(),
            known: names.to_vec(),
        })
}

fn check_box(what: &dyn Fn() -> String, b: &BBox) -> Result<()> {
    for v in [b.x, b.y, b.w, b.h] {
        crate::error::finite(what, v)?;
    }
    if b.w <= 0.0 || b.h <= 0.0 {
        return Err(EvalError::OutOfRange {
            what: format!("{}: box size must be positive", what()),
            value: b.w.min(b.h),
            lo: f64::MIN_POSITIVE,
            hi: f64::MAX,
        });
    }
    Ok(())
}

/// Checks every sheet and applies its ignore regions (see the module comment).
pub fn prepare_sheets(sheets: &[SheetInput], class_names: &[String]) -> Result<Vec<PreparedSheet>> {
    if class_names.is_empty() {
        return Err(EvalError::Empty {
            what: "class list".into(),
        });
    }
    let mut seen = HashSet::new();
    for s in sheets {
        if !seen.insert(s.sheet.as_str()) {
            return Err(EvalError::DuplicateSheet {
                sheet: s.sheet.clone(),
            });
        }
    }
    // Sheets are checked in parallel; the error reported is that of the first
    // bad sheet in input order, whatever the thread count.
    let checked: Vec<Result<PreparedSheet>> = sheets
        .par_iter()
        .map(|s| prepare_sheet(s, class_names))
        .collect();
    checked.into_iter().collect()
}

/// Checks and filters one sheet (see [`prepare_sheets`]).
fn prepare_sheet(s: &SheetInput, class_names: &[String]) -> Result<PreparedSheet> {
    for (i, r) in s.ignore.iter().enumerate() {
        check_box(&|| format!("sheet {:?}, ignore region #{i}", s.sheet), r)?;
    }
    let mut p = PreparedSheet {
        sheet: s.sheet.clone(),
        truths: Vec::with_capacity(s.truths.len()),
        dets: Vec::with_capacity(s.detections.len()),
        ignored_truths: 0,
        ignored_detections: 0,
    };
    for (i, t) in s.truths.iter().enumerate() {
        let what = || format!("sheet {:?}, ground-truth symbol #{i}", s.sheet);
        check_box(&what, &t.bbox)?;
        let class = class_index(what, &t.class, class_names)?;
        if outside_ignore(&t.bbox, &s.ignore) {
            p.truths.push(ClassedBox {
                class,
                bbox: t.bbox,
            });
        } else {
            p.ignored_truths += 1;
        }
    }
    for (i, d) in s.detections.iter().enumerate() {
        if d.sheet != s.sheet {
            return Err(EvalError::WrongSheet {
                sheet: s.sheet.clone(),
                index: i,
                found: d.sheet.clone(),
            });
        }
        let what = || format!("sheet {:?}, detection #{i}", s.sheet);
        check_box(&what, &d.bbox())?;
        in_range(
            || format!("sheet {:?}, detection #{i}, score", s.sheet),
            d.score,
            0.0,
            1.0,
        )?;
        let class = class_index(what, &d.class, class_names)?;
        if outside_ignore(&d.bbox(), &s.ignore) {
            p.dets.push(ScoredBox {
                class,
                score: d.score,
                bbox: d.bbox(),
            });
        } else {
            p.ignored_detections += 1;
        }
    }
    Ok(p)
}

/// One matched detection.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Outcome {
    /// Class index.
    pub class: usize,
    /// Score.
    pub score: f64,
    /// Found a symbol of its class.
    pub true_positive: bool,
    /// A false positive on a symbol already found.
    pub duplicate: bool,
}

/// The matching result of one sheet, all a metric needs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SheetOutcomes {
    /// Sheet id.
    pub sheet: String,
    /// Ground-truth count per class.
    pub truths_per_class: Vec<u64>,
    /// One entry per detection.
    pub outcomes: Vec<Outcome>,
}

/// Matches one prepared sheet.
pub fn sheet_outcomes(
    p: &PreparedSheet,
    n_classes: usize,
    criterion: &MatchCriterion,
) -> SheetOutcomes {
    let a = match_sheet(&p.truths, &p.dets, criterion);
    let mut truths_per_class = vec![0; n_classes];
    for t in &p.truths {
        truths_per_class[t.class] += 1;
    }
    let outcomes = p
        .dets
        .iter()
        .enumerate()
        .map(|(i, d)| Outcome {
            class: d.class,
            score: d.score,
            true_positive: a.det_truth[i].is_some(),
            duplicate: a.duplicate[i],
        })
        .collect();
    SheetOutcomes {
        sheet: p.sheet.clone(),
        truths_per_class,
        outcomes,
    }
}

/// Checks, filters and matches every sheet: the per-sheet input of
/// [`pooled_curve`] and of the paired comparison in [`crate::compare`].
pub fn outcomes_of(
    sheets: &[SheetInput],
    class_names: &[String],
    criterion: &MatchCriterion,
) -> Result<Vec<SheetOutcomes>> {
    criterion.validate()?;
    Ok(prepare_sheets(sheets, class_names)?
        .iter()
        .map(|p| sheet_outcomes(p, class_names.len(), criterion))
        .collect())
}

/// The pooled PR curve of the sheets `idx` (repeats count again) for one class,
/// or for all classes (micro) when `class` is `None`.
pub fn pooled_curve(sheets: &[SheetOutcomes], idx: &[usize], class: Option<usize>) -> PrCurve {
    let mut items = Vec::new();
    let mut n_pos = 0;
    for &i in idx {
        let s = &sheets[i];
        n_pos += match class {
            Some(k) => s.truths_per_class[k],
            None => s.truths_per_class.iter().sum(),
        };
        items.extend(
            s.outcomes
                .iter()
                .filter(|o| class.is_none_or(|k| o.class == k))
                .map(|o| (o.score, o.true_positive)),
        );
    }
    pr_curve(&items, n_pos)
        .expect("scores were checked and true positives never exceed ground truth")
}
