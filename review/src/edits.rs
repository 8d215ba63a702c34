//! Accepting a document sent by the page: what a person may change, and the
//! record of who changed what and when.
//!
//! The page sends the whole document it holds after each action, with the
//! revision it read. Against the document on disk at that revision:
//!
//! - the sheet record and the schema version cannot change;
//! - a new symbol must be drawn by hand (`origin` manual): the page cannot invent
//!   proposals or imports;
//! - an existing symbol keeps its origin (so a proposal stays a proposal, and
//!   whether it was accepted unchanged or corrected is read off the proposed
//!   class and box the origin keeps, see `symtrust_labels::proposals::outcome`);
//! - a new or changed symbol needs a site class and a finite, non-empty box
//!   inside the sheet; its `by` and `at` become the server's user and clock, while
//!   an unchanged symbol keeps its own, whatever the page sent.
//!
//! Ignore regions may be added, moved and removed freely; the structural check
//! of the label store applies to them.

use std::path::Path;
use symtrust_labels::document::{LabelDocument, Origin, Symbol};

/// Checks `incoming` against `on_disk` and stamps changed symbols with `who` and
/// `now`. Returns the document to save, or what is wrong in words.
pub fn accept_page_edit(
    on_disk: &LabelDocument,
    mut incoming: LabelDocument,
    classes: &[String],
    who: &str,
    now: &str,
) -> Result<LabelDocument, String> {
    if incoming.schema_version != on_disk.schema_version {
        return Err(format!(
            "schema_version {} differs from the document's {}",
            incoming.schema_version, on_disk.schema_version
        ));
    }
    if incoming.sheet != on_disk.sheet {
        return Err("the sheet record cannot be changed from the review page".to_string());
    }
    incoming.changed_by = on_disk.changed_by.clone();
    incoming.changed_at = on_disk.changed_at.clone();
    for s in &mut incoming.symbols {
        match on_disk.symbol(&s.id) {
            None => {
                if s.origin != Origin::Manual {
                    return Err(format!(
                        "new symbol {} must have origin manual; the page draws, it does not propose or import",
                        s.id
                    ));
                }
                check_symbol(s, on_disk, classes)?;
                s.by = who.to_string();
                s.at = now.to_string();
            }
            Some(old) => {
                if s.origin != old.origin {
                    return Err(format!("the origin of symbol {} cannot be changed", s.id));
                }
                if s.class != old.class || s.bbox != old.bbox || s.state != old.state {
                    if s.class != old.class || s.bbox != old.bbox {
                        check_symbol(s, on_disk, classes)?;
                    }
                    s.by = who.to_string();
                    s.at = now.to_string();
                } else {
                    s.by = old.by.clone();
                    s.at = old.at.clone();
                }
            }
        }
    }
    for r in &incoming.ignore {
        if r.id.is_empty() {
            return Err("an ignore region has an empty id".to_string());
        }
    }
    incoming
        .check_structure(Path::new(&format!("labels/{}.json", on_disk.sheet.id)))
        .map_err(|e| e.to_string())?;
    Ok(incoming)
}

/// Longest reviewer name accepted, in characters.
pub const MAX_REVIEWER_CHARS: usize = 64;

/// The reviewer named by the page (percent-encoded UTF-8, as a header carries
/// it): trimmed, 1 to [`MAX_REVIEWER_CHARS`] characters, no control characters.
pub fn reviewer_name(encoded: &str) -> Result<String, String> {
    let decoded = percent_encoding::percent_decode_str(encoded)
        .decode_utf8()
        .map_err(|_| "the reviewer name is not valid UTF-8".to_string())?;
    let name = decoded.trim();
    if name.is_empty() {
        return Err(
            "the reviewer name is empty; type your name in the page's Reviewer field".into(),
        );
    }
    if name.chars().count() > MAX_REVIEWER_CHARS {
        return Err(format!(
            "the reviewer name is longer than {MAX_REVIEWER_CHARS} characters"
        ));
    }
    if name.chars().any(char::is_control) {
        return Err("the reviewer name contains control characters".into());
    }
    Ok(name.to_string())
}

fn check_symbol(s: &Symbol, doc: &LabelDocument, classes: &[String]) -> Result<(), String> {
    let b = &s.bbox;
    if !b.is_finite() || b.w <= 0.0 || b.h <= 0.0 {
        return Err(format!("symbol {} has a non-finite or empty box", s.id));
    }
    if !b.inside_sheet(doc.sheet.width, doc.sheet.height) {
        return Err(format!(
            "symbol {} lies partly outside the {} x {} sheet",
            s.id, doc.sheet.width, doc.sheet.height
        ));
    }
    if !classes.contains(&s.class) {
        return Err(format!(
            "symbol {} has class {:?}, which site.toml does not define",
            s.id, s.class
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use symtrust_labels::BBox;
    use symtrust_labels::document::{DpiSource, ReviewState, SheetRecord};

    fn doc() -> LabelDocument {
        let mut d = LabelDocument::new(SheetRecord {
            id: "s1".into(),
            file: "sheets/s1.png".into(),
            sha256: "0".repeat(64),
            source_width: 100,
            source_height: 100,
            source_dpi: 200.0,
            dpi_source: DpiSource::FileMetadata,
            width: 100,
            height: 100,
            dpi: 200.0,
        });
        d.revision = 3;
        d.symbols.push(Symbol {
            id: "p1".into(),
            class: "pump".into(),
            bbox: BBox::new(10.0, 10.0, 20.0, 20.0),
            state: ReviewState::Draft,
            origin: Origin::Proposed {
                model: "m".into(),
                score: 0.8,
                proposed_class: Some("pump".into()),
                proposed_box: Some(BBox::new(10.0, 10.0, 20.0, 20.0)),
            },
            by: "bot".into(),
            at: "t0".into(),
        });
        d
    }

    fn classes() -> Vec<String> {
        vec!["pump".into(), "valve".into()]
    }

    #[test]
    fn changed_symbols_get_who_and_when_unchanged_keep_theirs() {
        let disk = doc();
        let mut page = disk.clone();
        page.symbols[0].state = ReviewState::Accepted;
        page.symbols[0].by = "forged".into();
        page.symbols.push(Symbol {
            id: "h1".into(),
            class: "valve".into(),
            bbox: BBox::new(50.0, 50.0, 10.0, 10.0),
            state: ReviewState::Accepted,
            origin: Origin::Manual,
            by: String::new(),
            at: String::new(),
        });
        let out = accept_page_edit(&disk, page.clone(), &classes(), "ana", "t1").unwrap();
        assert_eq!(
            (out.symbols[0].by.as_str(), out.symbols[0].at.as_str()),
            ("ana", "t1")
        );
        assert_eq!(out.symbols[1].by, "ana");
        let mut same = disk.clone();
        same.symbols[0].by = "forged".into();
        let out = accept_page_edit(&disk, same, &classes(), "ana", "t1").unwrap();
        assert_eq!(out.symbols[0].by, "bot");
    }

    #[test]
    fn reviewer_names_are_decoded_trimmed_and_bounded() {
        assert_eq!(reviewer_name("Ana%20Ruiz").unwrap(), "Ana Ruiz");
        // "Zoë" in UTF-8 is 5a 6f c3 ab.
        assert_eq!(reviewer_name("Zo%C3%AB").unwrap(), "Zoë");
        assert_eq!(reviewer_name("  lee ").unwrap(), "lee");
        assert_eq!(reviewer_name(&"é".repeat(64)).unwrap().chars().count(), 64);
        assert!(reviewer_name(&"x".repeat(65)).is_err());
        for bad in ["", "%20%20", "a%0Ab", "a%00", "%FF%FE"] {
            assert!(reviewer_name(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn the_page_cannot_forge_origins_sheets_or_bad_boxes() {
        let disk = doc();
        let mut p = disk.clone();
        p.symbols[0].origin = Origin::Manual;
        assert!(accept_page_edit(&disk, p, &classes(), "a", "t").is_err());
        let mut p = disk.clone();
        let mut s = p.symbols[0].clone();
        s.id = "new".into();
        p.symbols.push(s);
        assert!(
            accept_page_edit(&disk, p, &classes(), "a", "t")
                .unwrap_err()
                .contains("manual")
        );
        let mut p = disk.clone();
        p.sheet.width = 5000;
        assert!(accept_page_edit(&disk, p, &classes(), "a", "t").is_err());
        let mut p = disk.clone();
        p.symbols[0].bbox.x = 95.0;
        assert!(
            accept_page_edit(&disk, p, &classes(), "a", "t")
                .unwrap_err()
                .contains("outside")
        );
        let mut p = disk.clone();
        p.symbols[0].class = "crane".into();
        assert!(accept_page_edit(&disk, p, &classes(), "a", "t").is_err());
        let mut p = disk.clone();
        p.symbols[0].bbox.w = f64::NAN;
        assert!(accept_page_edit(&disk, p, &classes(), "a", "t").is_err());
    }
}
