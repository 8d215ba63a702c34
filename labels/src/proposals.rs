//! Merging a model's detections into a label document as proposals to review.
//!
//! `symtrust detect --propose` and the review page meet here. A proposal is a
//! symbol in state `draft` whose origin is `{"kind": "proposed", "model": ...,
//! "score": ..., "proposed_class": ..., "proposed_box": ...}`. The merge rules:
//!
//! 1. Only detections of the document's own sheet are used; the others are counted.
//! 2. Work is never overwritten: every symbol that is accepted or rejected, drawn
//!    by hand, imported, proposed by another model, or a proposal of this model
//!    that a person has already corrected (box or class changed) is kept as it is.
//! 3. Undecided, uncorrected drafts of the same model are replaced by the new run.
//! 4. A detection whose centre lies in an ignore region is dropped (the rule the
//!    evaluation uses for ignore regions).
//! 5. A detection that duplicates a symbol kept by rule 2, or a proposal already
//!    added by this merge, is dropped. Duplicate means IoU at or above
//!    [`MergeOptions::duplicate_iou`] (default 0.5, the usual matching threshold
//!    of detection evaluation, common practice), whatever the class and state of
//!    the other symbol: a rejected symbol thereby stops the same proposal from
//!    coming back, and a symbol a person labelled with another class is not
//!    proposed a second time. Detections are taken by descending score, so of two
//!    overlapping detections the stronger one is proposed.
//!
//! The merge is a pure function: the caller saves the result through
//! [`crate::store::LabelStore::save`], whose revision check refuses it when a
//! person saved the sheet in the meantime (merge again from the new revision).

use crate::detections::Detection;
use crate::document::{LabelDocument, Origin, ReviewState, Symbol};
use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use serde::Serialize;
use std::path::Path;

/// Settings of [`merge_proposals`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MergeOptions {
    /// A detection with IoU at or above this against a kept symbol is a duplicate.
    pub duplicate_iou: f64,
}

impl Default for MergeOptions {
    fn default() -> Self {
        Self { duplicate_iou: 0.5 }
    }
}

/// What a merge did, in counts.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct MergeSummary {
    /// Proposals added.
    pub added: usize,
    /// Undecided, uncorrected drafts of the same model removed (replaced by this run).
    pub replaced: usize,
    /// Symbols kept unchanged (decided, corrected, by hand, imported, other models).
    pub kept: usize,
    /// Detections dropped because their centre lies in an ignore region.
    pub in_ignore: usize,
    /// Detections dropped as duplicates of a kept symbol or of a stronger proposal.
    pub duplicates: usize,
    /// Detections of other sheets (not used).
    pub other_sheets: usize,
}

/// How a symbol came to its present state, as the review page and reports show it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Outcome {
    /// Drawn by a person on the review page or by hand in the document.
    DrawnByHand,
    /// Read from an interchange file or the synthetic plant generator.
    Imported,
    /// A model's proposal nobody has decided on yet.
    Proposed,
    /// A proposal accepted with the class and box the model gave.
    AcceptedUnchanged,
    /// A proposal whose class or box a person changed (accepted or still draft).
    Corrected,
    /// A proposal judged not a symbol.
    Rejected,
}

/// True when a proposed symbol's class or box differs from what the model proposed.
/// Documents that did not record the proposal count as unchanged.
pub fn is_corrected(symbol: &Symbol) -> bool {
    match &symbol.origin {
        Origin::Proposed {
            proposed_class,
            proposed_box,
            ..
        } => {
            proposed_class.as_ref().is_some_and(|c| *c != symbol.class)
                || proposed_box.is_some_and(|b| b != symbol.bbox)
        }
        _ => false,
    }
}

/// The outcome of a symbol (see [`Outcome`]).
pub fn outcome(symbol: &Symbol) -> Outcome {
    match &symbol.origin {
        Origin::Manual => Outcome::DrawnByHand,
        Origin::Imported { .. } => Outcome::Imported,
        Origin::Proposed { .. } => match symbol.state {
            ReviewState::Rejected => Outcome::Rejected,
            _ if is_corrected(symbol) => Outcome::Corrected,
            ReviewState::Accepted => Outcome::AcceptedUnchanged,
            ReviewState::Draft => Outcome::Proposed,
        },
    }
}

/// True for a draft of `model_id` that nobody has decided on or corrected: the
/// only kind of symbol a new merge of the same model may replace.
pub fn is_replaceable_draft(symbol: &Symbol, model_id: &str) -> bool {
    symbol.state == ReviewState::Draft
        && matches!(&symbol.origin, Origin::Proposed { model, .. } if model == model_id)
        && !is_corrected(symbol)
}

/// Merges `detections` of model `model_id` into `doc` as draft proposals,
/// following the rules in the module documentation. `who` and `at` (RFC 3339)
/// are recorded on each added proposal. Returns the merged document (same
/// revision as `doc`, ready for [`crate::store::LabelStore::save`]) and counts.
///
/// Fails, naming the sheet, when `model_id` is empty, the options are out of
/// range, or a detection of this sheet has a non-finite or empty box or a score
/// outside `[0, 1]`.
pub fn merge_proposals(
    doc: &LabelDocument,
    model_id: &str,
    detections: &[Detection],
    options: &MergeOptions,
    who: &str,
    at: &str,
) -> Result<(LabelDocument, MergeSummary)> {
    let path = Path::new("labels").join(format!("{}.json", doc.sheet.id));
    if model_id.is_empty() {
        return Err(LabelError::invalid(
            &path,
            "merging proposals needs a model id",
        ));
    }
    if !(options.duplicate_iou > 0.0 && options.duplicate_iou <= 1.0) {
        return Err(LabelError::invalid(
            &path,
            format!("duplicate IoU {} must lie in (0, 1]", options.duplicate_iou),
        ));
    }
    let mut summary = MergeSummary::default();
    let mut own: Vec<&Detection> = Vec::new();
    for d in detections {
        if d.sheet != doc.sheet.id {
            summary.other_sheets += 1;
            continue;
        }
        let b = d.bbox();
        if !b.is_finite() || b.w <= 0.0 || b.h <= 0.0 || !(0.0..=1.0).contains(&d.score) {
            return Err(LabelError::invalid(
                &path,
                format!(
                    "detection of class {:?} at ({}, {}, {}, {}) with score {} has an invalid box or score",
                    d.class, d.x, d.y, d.w, d.h, d.score
                ),
            ));
        }
        own.push(d);
    }
    // Descending score; ties broken by position and class so the result does not
    // depend on the order of the input file.
    own.sort_by(|a, b| {
        b.score
            .total_cmp(&a.score)
            .then(a.y.total_cmp(&b.y))
            .then(a.x.total_cmp(&b.x))
            .then(a.class.cmp(&b.class))
    });

    let mut out = doc.clone();
    let before = out.symbols.len();
    out.symbols.retain(|s| !is_replaceable_draft(s, model_id));
    summary.replaced = before - out.symbols.len();
    summary.kept = out.symbols.len();

    let mut occupied: Vec<BBox> = out.symbols.iter().map(|s| s.bbox).collect();
    for d in own {
        let b = d.bbox();
        let (cx, cy) = b.center();
        if out.in_ignore(cx, cy) {
            summary.in_ignore += 1;
            continue;
        }
        if occupied.iter().any(|o| o.iou(&b) >= options.duplicate_iou) {
            summary.duplicates += 1;
            continue;
        }
        let id = out.next_symbol_id();
        out.symbols.push(Symbol {
            id,
            class: d.class.clone(),
            bbox: b,
            state: ReviewState::Draft,
            origin: Origin::Proposed {
                model: model_id.to_string(),
                score: d.score,
                proposed_class: Some(d.class.clone()),
                proposed_box: Some(b),
            },
            by: who.to_string(),
            at: at.to_string(),
        });
        occupied.push(b);
        summary.added += 1;
    }
    Ok((out, summary))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::IgnoreRegion;
    use crate::document::tests::sample_sheet;
    use proptest::prelude::*;

    fn det(class: &str, score: f64, x: f64, y: f64, w: f64, h: f64) -> Detection {
        Detection {
            sheet: "s1".into(),
            class: class.into(),
            score,
            x,
            y,
            w,
            h,
        }
    }

    fn sym(id: &str, state: ReviewState, origin: Origin, b: BBox) -> Symbol {
        Symbol {
            id: id.into(),
            class: "pump".into(),
            bbox: b,
            state,
            origin,
            by: "ana".into(),
            at: "2026-12-01T00:00:00Z".into(),
        }
    }

    fn proposed(model: &str, b: BBox) -> Origin {
        Origin::Proposed {
            model: model.into(),
            score: 0.7,
            proposed_class: Some("pump".into()),
            proposed_box: Some(b),
        }
    }

    fn merge(doc: &LabelDocument, d: &[Detection]) -> (LabelDocument, MergeSummary) {
        merge_proposals(
            doc,
            "m2",
            d,
            &MergeOptions::default(),
            "bot",
            "2026-12-02T00:00:00Z",
        )
        .unwrap()
    }

    #[test]
    fn adds_drafts_with_origin_and_score() {
        let doc = LabelDocument::new(sample_sheet("s1"));
        let (out, sum) = merge(&doc, &[det("valve", 0.9, 10.0, 10.0, 50.0, 50.0)]);
        assert_eq!(sum.added, 1);
        let s = &out.symbols[0];
        assert_eq!(s.state, ReviewState::Draft);
        assert_eq!(s.class, "valve");
        assert_eq!(s.by, "bot");
        assert!(
            matches!(&s.origin, Origin::Proposed { model, score, .. } if model == "m2" && *score == 0.9)
        );
        assert_eq!(outcome(s), Outcome::Proposed);
        assert_eq!(out.revision, doc.revision, "the caller saves it");
    }

    #[test]
    fn drops_ignored_and_duplicates_and_keeps_decided_work() {
        let mut doc = LabelDocument::new(sample_sheet("s1"));
        doc.ignore.push(IgnoreRegion {
            id: "ig1".into(),
            bbox: BBox::new(800.0, 600.0, 200.0, 200.0),
            reason: "title block".into(),
        });
        let a = BBox::new(100.0, 100.0, 80.0, 80.0);
        let r = BBox::new(300.0, 100.0, 80.0, 80.0);
        doc.symbols
            .push(sym("s0001", ReviewState::Accepted, Origin::Manual, a));
        doc.symbols
            .push(sym("s0002", ReviewState::Rejected, proposed("m1", r), r));
        let (out, sum) = merge(
            &doc,
            &[
                // IoU with `a`: 70x80 overlap / (2*6400 - 5600) = 5600/7200 = 0.78 -> duplicate.
                det("pump", 0.95, 110.0, 100.0, 80.0, 80.0),
                // Same place as the rejected one (IoU 1) -> duplicate.
                det("pump", 0.9, 300.0, 100.0, 80.0, 80.0),
                // Centre (900, 700) inside the ignore region.
                det("pump", 0.9, 860.0, 660.0, 80.0, 80.0),
                // Free spot.
                det("valve", 0.6, 500.0, 400.0, 40.0, 40.0),
                // Another sheet.
                Detection {
                    sheet: "s9".into(),
                    ..det("pump", 0.9, 0.0, 0.0, 5.0, 5.0)
                },
            ],
        );
        assert_eq!(
            sum,
            MergeSummary {
                added: 1,
                replaced: 0,
                kept: 2,
                in_ignore: 1,
                duplicates: 2,
                other_sheets: 1
            }
        );
        assert_eq!(&out.symbols[..2], &doc.symbols[..]);
        assert_eq!(out.symbols[2].class, "valve");
    }

    #[test]
    fn iou_just_below_threshold_is_not_a_duplicate() {
        // Two 10x10 boxes shifted by 5: IoU = 50 / 150 = 1/3 (hand calculation).
        let mut doc = LabelDocument::new(sample_sheet("s1"));
        doc.symbols.push(sym(
            "s0001",
            ReviewState::Accepted,
            Origin::Manual,
            BBox::new(0.0, 0.0, 10.0, 10.0),
        ));
        let d = [det("pump", 0.5, 5.0, 0.0, 10.0, 10.0)];
        let (_, sum) = merge(&doc, &d);
        assert_eq!(sum.added, 1);
        let (_, sum) = merge_proposals(
            &doc,
            "m2",
            &d,
            &MergeOptions { duplicate_iou: 0.3 },
            "bot",
            "t",
        )
        .unwrap();
        assert_eq!(sum.duplicates, 1);
    }

    #[test]
    fn rerun_replaces_only_undecided_uncorrected_drafts_of_the_same_model() {
        let b = BBox::new(100.0, 100.0, 50.0, 50.0);
        let mut doc = LabelDocument::new(sample_sheet("s1"));
        doc.symbols
            .push(sym("s0001", ReviewState::Draft, proposed("m2", b), b));
        let moved = BBox::new(400.0, 100.0, 50.0, 50.0);
        doc.symbols.push(sym(
            "s0002",
            ReviewState::Draft,
            proposed("m2", BBox::new(390.0, 100.0, 50.0, 50.0)),
            moved,
        ));
        let other = BBox::new(700.0, 100.0, 50.0, 50.0);
        doc.symbols.push(sym(
            "s0003",
            ReviewState::Draft,
            proposed("m1", other),
            other,
        ));
        let (out, sum) = merge(
            &doc,
            &[
                det("pump", 0.8, 102.0, 100.0, 50.0, 50.0),
                det("pump", 0.8, 400.0, 100.0, 50.0, 50.0),
            ],
        );
        assert_eq!(
            (sum.replaced, sum.kept, sum.added, sum.duplicates),
            (1, 2, 1, 1)
        );
        assert!(out.symbol("s0002").is_some_and(is_corrected));
        assert!(out.symbol("s0003").is_some());
        let new: Vec<_> = out.symbols.iter().filter(|s| s.bbox.x == 102.0).collect();
        assert_eq!(new.len(), 1);
    }

    #[test]
    fn outcomes_of_each_path() {
        let b = BBox::new(1.0, 1.0, 5.0, 5.0);
        let mut s = sym("s1", ReviewState::Accepted, proposed("m", b), b);
        assert_eq!(outcome(&s), Outcome::AcceptedUnchanged);
        s.class = "valve".into();
        assert_eq!(outcome(&s), Outcome::Corrected);
        s.state = ReviewState::Rejected;
        assert_eq!(outcome(&s), Outcome::Rejected);
        let m = sym("s2", ReviewState::Accepted, Origin::Manual, b);
        assert_eq!(outcome(&m), Outcome::DrawnByHand);
        // A proposal recorded before the original box was kept counts as unchanged.
        let old = sym(
            "s3",
            ReviewState::Accepted,
            Origin::Proposed {
                model: "m".into(),
                score: 0.5,
                proposed_class: None,
                proposed_box: None,
            },
            b,
        );
        assert_eq!(outcome(&old), Outcome::AcceptedUnchanged);
    }

    #[test]
    fn documents_without_the_new_origin_fields_still_load() {
        let text = r#"{"kind": "proposed", "model": "m1", "score": 0.25}"#;
        let o: Origin = serde_json::from_str(text).unwrap();
        assert_eq!(
            o,
            Origin::Proposed {
                model: "m1".into(),
                score: 0.25,
                proposed_class: None,
                proposed_box: None
            }
        );
        assert_eq!(
            serde_json::to_string(&o).unwrap(),
            r#"{"kind":"proposed","model":"m1","score":0.25}"#
        );
    }

    #[test]
    fn bad_detections_and_options_are_refused_with_the_sheet_named() {
        let doc = LabelDocument::new(sample_sheet("s1"));
        let e = merge_proposals(
            &doc,
            "m",
            &[det("pump", 1.5, 0.0, 0.0, 1.0, 1.0)],
            &MergeOptions::default(),
            "b",
            "t",
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("s1.json") && e.contains("1.5"), "{e}");
        assert!(merge_proposals(&doc, "", &[], &MergeOptions::default(), "b", "t").is_err());
        assert!(
            merge_proposals(
                &doc,
                "m",
                &[],
                &MergeOptions { duplicate_iou: 0.0 },
                "b",
                "t"
            )
            .is_err()
        );
    }

    fn arb_box() -> impl Strategy<Value = BBox> {
        (0.0..900.0f64, 0.0..700.0f64, 1.0..100.0f64, 1.0..100.0f64)
            .prop_map(|(x, y, w, h)| BBox::new(x, y, w, h))
    }

    fn arb_symbol() -> impl Strategy<Value = (u8, u8, BBox, bool)> {
        (0u8..3, 0u8..4, arb_box(), any::<bool>())
    }

    proptest! {
        /// Merging never changes or removes a decided, corrected or foreign label,
        /// never adds a proposal whose centre is in an ignore region, and never adds
        /// one overlapping a kept symbol or another new proposal at IoU >= 0.5.
        #[test]
        fn merge_never_changes_decided_labels(
            existing in proptest::collection::vec(arb_symbol(), 0..12),
            dets in proptest::collection::vec((arb_box(), 0.0..=1.0f64), 0..20),
            ignore in proptest::option::of(arb_box()),
        ) {
            let mut doc = LabelDocument::new(sample_sheet("s1"));
            if let Some(b) = ignore {
                doc.ignore.push(IgnoreRegion { id: "ig1".into(), bbox: b, reason: "legend".into() });
            }
            for (i, (state, origin, b, moved)) in existing.into_iter().enumerate() {
                let state = [ReviewState::Draft, ReviewState::Accepted, ReviewState::Rejected][state as usize];
                let origin = match origin {
                    0 => Origin::Manual,
                    1 => Origin::Imported { source: "x".into() },
                    2 => proposed("m1", b),
                    _ => proposed("m2", if moved { BBox { x: b.x + 1.0, ..b } } else { b }),
                };
                doc.symbols.push(sym(&format!("s{:04}", i + 1), state, origin, b));
            }
            let detections: Vec<Detection> = dets
                .iter()
                .map(|(b, s)| det("pump", *s, b.x, b.y, b.w, b.h))
                .collect();
            let (out, sum) = merge(&doc, &detections);
            for s in &doc.symbols {
                if !is_replaceable_draft(s, "m2") {
                    prop_assert_eq!(out.symbol(&s.id), Some(s));
                }
            }
            let new: Vec<&Symbol> = out.symbols.iter().filter(|s| doc.symbol(&s.id) != Some(*s)).collect();
            prop_assert_eq!(new.len(), sum.added);
            let kept: Vec<&Symbol> = out.symbols.iter().filter(|s| !new.iter().any(|n| n.id == s.id)).collect();
            for n in &new {
                let (cx, cy) = n.bbox.center();
                prop_assert!(!doc.in_ignore(cx, cy));
                for k in &kept {
                    prop_assert!(k.bbox.iou(&n.bbox) < 0.5);
                }
                for m in &new {
                    if m.id != n.id {
                        prop_assert!(m.bbox.iou(&n.bbox) < 0.5);
                    }
                }
            }
            prop_assert!(out.check_structure(Path::new("s1.json")).is_ok());
            prop_assert_eq!(sum.added + sum.in_ignore + sum.duplicates, detections.len());
        }
    }
}
