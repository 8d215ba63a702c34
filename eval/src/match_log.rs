//! The fate of every detection and every ground-truth symbol of an evaluation,
//! for the error galleries, the overlays and an auditor's spot checks.
//!
//! Each detection outside the ignore regions gets one [`MatchKind`], decided
//! over the full ranked list (no threshold):
//! - **hit**: it found a symbol of its own class (same-class greedy matching,
//!   [`crate::matching::match_sheet`]);
//! - **duplicate**: it fitted a symbol of its class that a higher-scored
//!   detection had already found;
//! - **wrong class**: in the second, any-class pass
//!   ([`crate::matching::match_across_classes`]) it took a still-unfound symbol
//!   of another class;
//! - **background**: it fitted no symbol at all.
//!
//! Each ground-truth symbol records the score of the detection that found it,
//! if any; at threshold `t` it is a miss when that score is absent or below
//! `t`. Both lists carry the sheet and the box, so a report can cut the crop.

use crate::matching::{MatchCriterion, match_across_classes, match_sheet};
use crate::sheets::PreparedSheet;
use serde::{Deserialize, Serialize};
use symtrust_labels::BBox;

/// What one detection turned out to be.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MatchKind {
    /// Found a symbol of its class.
    Hit,
    /// A second detection of a symbol already found.
    Duplicate,
    /// Sits on a symbol of another class.
    WrongClass,
    /// Sits on no symbol.
    Background,
}

impl MatchKind {
    /// Short name used in CSV tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Hit => "hit",
            Self::Duplicate => "duplicate",
            Self::WrongClass => "wrong_class",
            Self::Background => "background",
        }
    }
}

/// One detection and its fate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DetectionMatch {
    /// Sheet id.
    pub sheet: String,
    /// Predicted class.
    pub class: String,
    /// Score.
    pub score: f64,
    /// Box in sheet pixels.
    pub bbox: BBox,
    /// What it was.
    pub kind: MatchKind,
    /// The ground-truth symbol it matched (its own class for a hit or a
    /// duplicate, the other class for a wrong-class detection): index into the
    /// sheet's evaluated truths.
    pub truth: Option<usize>,
    /// Class of that symbol.
    pub truth_class: Option<String>,
}

/// One ground-truth symbol and whether it was found.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TruthMatch {
    /// Sheet id.
    pub sheet: String,
    /// Index among the sheet's evaluated truths.
    pub index: usize,
    /// Class.
    pub class: String,
    /// Box in sheet pixels.
    pub bbox: BBox,
    /// Score of the same-class detection that found it, if one did.
    pub found_by_score: Option<f64>,
}

impl TruthMatch {
    /// True when no kept detection at threshold `t` found it.
    pub fn missed_at(&self, t: f64) -> bool {
        self.found_by_score.is_none_or(|s| s < t)
    }
}

/// The matches of a set of sheets.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct MatchLog {
    /// Every detection outside the ignore regions.
    pub detections: Vec<DetectionMatch>,
    /// Every ground-truth symbol outside the ignore regions.
    pub truths: Vec<TruthMatch>,
}

/// Builds the match log of prepared sheets (see the module comment).
pub fn match_log(
    sheets: &[PreparedSheet],
    class_names: &[String],
    criterion: &MatchCriterion,
) -> MatchLog {
    let mut log = MatchLog::default();
    for p in sheets {
        let first = match_sheet(&p.truths, &p.dets, criterion);
        let mut other: Vec<Option<usize>> = vec![None; p.dets.len()];
        for (d, t) in match_across_classes(&p.truths, &p.dets, criterion, &first) {
            other[d] = Some(t);
        }
        for (d, det) in p.dets.iter().enumerate() {
            let (kind, truth) = match first.det_truth[d] {
                Some(t) => (MatchKind::Hit, Some(t)),
                None if first.duplicate[d] => (MatchKind::Duplicate, None),
                None => match other[d] {
                    Some(t) => (MatchKind::WrongClass, Some(t)),
                    None => (MatchKind::Background, None),
                },
            };
            log.detections.push(DetectionMatch {
                sheet: p.sheet.clone(),
                class: class_names[det.class].clone(),
                score: det.score,
                bbox: det.bbox,
                kind,
                truth,
                truth_class: truth.map(|t| class_names[p.truths[t].class].clone()),
            });
        }
        for (t, truth) in p.truths.iter().enumerate() {
            log.truths.push(TruthMatch {
                sheet: p.sheet.clone(),
                index: t,
                class: class_names[truth.class].clone(),
                bbox: truth.bbox,
                found_by_score: first.truth_det[t].map(|d| p.dets[d].score),
            });
        }
    }
    log
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sheets::{SheetInput, TruthSymbol, prepare_sheets};
    use symtrust_labels::detections::Detection;

    fn det(class: &str, score: f64, x: f64) -> Detection {
        Detection {
            sheet: "s".into(),
            class: class.into(),
            score,
            x,
            y: 0.0,
            w: 10.0,
            h: 10.0,
        }
    }

    #[test]
    fn every_kind_by_hand() {
        let names: Vec<String> = vec!["valve".into(), "pump".into()];
        let sheet = SheetInput {
            sheet: "s".into(),
            truths: vec![
                TruthSymbol {
                    class: "valve".into(),
                    bbox: BBox::new(0.0, 0.0, 10.0, 10.0),
                },
                TruthSymbol {
                    class: "pump".into(),
                    bbox: BBox::new(100.0, 0.0, 10.0, 10.0),
                },
                TruthSymbol {
                    class: "pump".into(),
                    bbox: BBox::new(300.0, 0.0, 10.0, 10.0),
                },
            ],
            detections: vec![
                det("valve", 0.9, 0.0),   // hit on the valve
                det("valve", 0.8, 1.0),   // duplicate of the valve
                det("valve", 0.7, 100.0), // on the first pump: wrong class
                det("pump", 0.6, 200.0),  // on nothing: background
            ],
            ignore: vec![],
        };
        let prepared = prepare_sheets(&[sheet], &names).unwrap();
        let log = match_log(&prepared, &names, &MatchCriterion::default());
        let kinds: Vec<MatchKind> = log.detections.iter().map(|d| d.kind).collect();
        assert_eq!(
            kinds,
            [
                MatchKind::Hit,
                MatchKind::Duplicate,
                MatchKind::WrongClass,
                MatchKind::Background
            ]
        );
        assert_eq!(log.detections[2].truth_class.as_deref(), Some("pump"));
        assert_eq!(log.truths[0].found_by_score, Some(0.9));
        assert!(!log.truths[0].missed_at(0.9) && log.truths[0].missed_at(0.95));
        assert!(log.truths[1].missed_at(0.0) && log.truths[2].missed_at(0.0));
    }
}
