//! Which sheets' accepted labels changed since the last finished nightly run.
//!
//! A sheet's fingerprint is its document revision plus the SHA-256 of its
//! accepted symbols (id, class and box, in id order, as compact JSON): a save
//! that only touched drafts changes the revision but not the accepted set, and
//! is not a reason to retrain.

use crate::atomic::write_atomic;
use crate::document::LabelDocument;
use crate::error::{LabelError, Result};
use crate::hash::sha256_hex;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::Path;

/// One sheet's accepted labels, summarised.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SheetSeen {
    /// Document revision.
    pub revision: u64,
    /// Number of accepted symbols.
    pub accepted: usize,
    /// SHA-256 of the accepted symbols.
    pub accepted_sha256: String,
}

/// The fingerprint of a document.
pub fn fingerprint(doc: &LabelDocument) -> SheetSeen {
    let mut accepted: Vec<(&str, &str, [f64; 4])> = doc
        .accepted()
        .map(|s| {
            (
                s.id.as_str(),
                s.class.as_str(),
                [s.bbox.x, s.bbox.y, s.bbox.w, s.bbox.h],
            )
        })
        .collect();
    accepted.sort_by(|a, b| a.0.cmp(b.0));
    let bytes = serde_json::to_vec(&accepted).expect("symbols serialise");
    SheetSeen {
        revision: doc.revision,
        accepted: accepted.len(),
        accepted_sha256: sha256_hex(&bytes),
    }
}

/// Fingerprints of all sheets, by sheet id.
pub type LabelsSeen = BTreeMap<String, SheetSeen>;

/// What changed between two fingerprint sets.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct LabelChanges {
    /// Sheets new since the last run.
    pub added: Vec<String>,
    /// Sheets whose accepted labels changed.
    pub changed: Vec<String>,
    /// Sheets gone since the last run.
    pub removed: Vec<String>,
    /// Sheets whose documents were saved but whose accepted labels are the same.
    pub revised_only: Vec<String>,
}

impl LabelChanges {
    /// True when accepted labels differ anywhere.
    pub fn any(&self) -> bool {
        !(self.added.is_empty() && self.changed.is_empty() && self.removed.is_empty())
    }
}

/// Compares the last run's fingerprints with today's.
pub fn compare(before: &LabelsSeen, now: &LabelsSeen) -> LabelChanges {
    let mut c = LabelChanges::default();
    for (id, seen) in now {
        match before.get(id) {
            None => c.added.push(id.clone()),
            Some(b) if b.accepted_sha256 != seen.accepted_sha256 => c.changed.push(id.clone()),
            Some(b) if b.revision != seen.revision => c.revised_only.push(id.clone()),
            Some(_) => {}
        }
    }
    c.removed = before
        .keys()
        .filter(|id| !now.contains_key(*id))
        .cloned()
        .collect();
    c
}

/// Reads the fingerprints of the last finished run (empty when none ran).
pub fn read_seen(path: &Path) -> Result<LabelsSeen> {
    match std::fs::read_to_string(path) {
        Ok(text) => serde_json::from_str(&text).map_err(|e| LabelError::json(path, &e)),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(LabelsSeen::new()),
        Err(e) => Err(LabelError::io(path, e)),
    }
}

/// Writes the fingerprints atomically.
pub fn write_seen(path: &Path, seen: &LabelsSeen) -> Result<()> {
    let mut bytes = serde_json::to_vec_pretty(seen).expect("fingerprints serialise");
    bytes.push(b'\n');
    write_atomic(path, &bytes)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::document::tests::sample_sheet;
    use crate::document::{Origin, ReviewState, Symbol};
    use crate::geometry::BBox;

    fn doc() -> LabelDocument {
        let mut d = LabelDocument::new(sample_sheet("fp-a-0001"));
        for (i, state) in [ReviewState::Accepted, ReviewState::Draft]
            .into_iter()
            .enumerate()
        {
            d.symbols.push(Symbol {
                id: format!("s{i}"),
                class: "pump".into(),
                bbox: BBox::new(10.0 * i as f64, 0.0, 20.0, 20.0),
                state,
                origin: Origin::Manual,
                by: "t".into(),
                at: "2026-12-02T00:00:00Z".into(),
            });
        }
        d
    }

    #[test]
    fn only_accepted_labels_count_as_a_change() {
        let a = doc();
        let mut before = LabelsSeen::new();
        before.insert("fp-a-0001".into(), fingerprint(&a));
        // A draft moved and the document saved: revised, not changed.
        let mut b = a.clone();
        b.revision += 1;
        b.symbols[1].bbox.x += 5.0;
        let mut now = LabelsSeen::new();
        now.insert("fp-a-0001".into(), fingerprint(&b));
        let c = compare(&before, &now);
        assert!(!c.any());
        assert_eq!(c.revised_only, ["fp-a-0001"]);
        // The draft accepted: changed.
        b.symbols[1].state = ReviewState::Accepted;
        now.insert("fp-a-0001".into(), fingerprint(&b));
        let c = compare(&before, &now);
        assert!(c.any());
        assert_eq!(c.changed, ["fp-a-0001"]);
        // A new sheet and a removed one.
        let mut later = now.clone();
        later.insert("fp-a-0002".into(), fingerprint(&a));
        let c = compare(&now, &later);
        assert_eq!(c.added, ["fp-a-0002"]);
        let c = compare(&later, &now);
        assert_eq!(c.removed, ["fp-a-0002"]);
    }
}
