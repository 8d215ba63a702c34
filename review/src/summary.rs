//! The sheet list: each sheet's label progress.
//!
//! A sheet counts as reviewed when no draft is left on it and at least one
//! symbol has been accepted or rejected.

use serde::Serialize;
use std::collections::BTreeSet;
use symtrust_labels::document::{LabelDocument, Origin, ReviewState};
use symtrust_labels::store::LabelStore;

/// Progress of one sheet.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SheetProgress {
    /// Sheet id.
    pub id: String,
    /// Width at the canonical resolution (0 when the document is unreadable).
    pub width: u32,
    /// Height at the canonical resolution.
    pub height: u32,
    /// Revision of the label document.
    pub revision: u64,
    /// Accepted symbols.
    pub accepted: usize,
    /// Draft symbols (hand-drawn or proposed).
    pub draft: usize,
    /// Rejected symbols.
    pub rejected: usize,
    /// Drafts that are model proposals still to decide.
    pub proposals: usize,
    /// True when no draft is left and something was decided.
    pub reviewed: bool,
    /// Classes of the symbols that are not rejected, sorted.
    pub classes: Vec<String>,
    /// Who saved the current revision, and when.
    pub changed_by: String,
    /// When the current revision was saved.
    pub changed_at: String,
    /// Why the document could not be read, when it could not.
    pub error: Option<String>,
}

/// The progress of a readable document.
pub fn progress(doc: &LabelDocument) -> SheetProgress {
    let count = |st: ReviewState| doc.symbols.iter().filter(|s| s.state == st).count();
    let accepted = count(ReviewState::Accepted);
    let draft = count(ReviewState::Draft);
    let rejected = count(ReviewState::Rejected);
    let proposals = doc
        .symbols
        .iter()
        .filter(|s| s.state == ReviewState::Draft && matches!(s.origin, Origin::Proposed { .. }))
        .count();
    let classes: BTreeSet<String> = doc
        .symbols
        .iter()
        .filter(|s| s.state != ReviewState::Rejected)
        .map(|s| s.class.clone())
        .collect();
    SheetProgress {
        id: doc.sheet.id.clone(),
        width: doc.sheet.width,
        height: doc.sheet.height,
        revision: doc.revision,
        accepted,
        draft,
        rejected,
        proposals,
        reviewed: draft == 0 && accepted + rejected > 0,
        classes: classes.into_iter().collect(),
        changed_by: doc.changed_by.clone(),
        changed_at: doc.changed_at.clone(),
        error: None,
    }
}

/// Progress of every sheet of the store; an unreadable document is listed with
/// its error instead of failing the list.
pub fn all_progress(store: &LabelStore) -> symtrust_labels::Result<Vec<SheetProgress>> {
    Ok(store
        .sheet_ids()?
        .into_iter()
        .map(|id| match store.load(&id) {
            Ok(doc) => progress(&doc),
            Err(e) => SheetProgress {
                id,
                width: 0,
                height: 0,
                revision: 0,
                accepted: 0,
                draft: 0,
                rejected: 0,
                proposals: 0,
                reviewed: false,
                classes: Vec::new(),
                changed_by: String::new(),
                changed_at: String::new(),
                error: Some(e.to_string()),
            },
        })
        .collect())
}
