//! The split by sheet, never by crop.
//!
//! Crops from one sheet share its scan, its drafter and its lettering, so a
//! crop-level split lets near-copies of test crops into training and overstates
//! accuracy. symtrust splits whole sheets: held-out sheets are named in
//! `site.toml` and frozen for evaluation; of the rest, a fraction
//! (`validation_fraction`, rounded, at least one sheet when the fraction is
//! positive and two or more sheets remain) is chosen for validation by ordering
//! sheets on a seeded hash of their id, so the choice does not depend on the
//! order sheets were added.

use crate::rng::SeededRng;
use crate::site::SiteConfig;
use serde::Serialize;

/// The role of each sheet.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct SheetSplit {
    /// Sheets used to fit weights.
    pub train: Vec<String>,
    /// Sheets used for early stopping and model selection.
    pub validation: Vec<String>,
    /// Sheets frozen for evaluation (present in the site).
    pub held_out: Vec<String>,
}

/// Splits the given sheet ids by the site's rules.
pub fn split_sheets(config: &SiteConfig, sheet_ids: &[String]) -> SheetSplit {
    let mut split = SheetSplit::default();
    let mut rest: Vec<(u64, String)> = Vec::new();
    for id in sheet_ids {
        if config.held_out.iter().any(|h| h == id) {
            split.held_out.push(id.clone());
        } else {
            rest.push((SeededRng::derive(config.seed, id).next_u64(), id.clone()));
        }
    }
    rest.sort();
    let n = rest.len();
    let mut n_val = (config.validation_fraction * n as f64).round() as usize;
    if config.validation_fraction > 0.0 && n >= 2 {
        n_val = n_val.max(1);
    }
    n_val = n_val.min(n.saturating_sub(1));
    for (i, (_, id)) in rest.into_iter().enumerate() {
        if i < n_val {
            split.validation.push(id);
        } else {
            split.train.push(id);
        }
    }
    split.train.sort();
    split.validation.sort();
    split.held_out.sort();
    split
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::site::{ClassSpec, SiteConfig};
    use proptest::prelude::*;

    fn config(held: &[&str], fraction: f64) -> SiteConfig {
        let mut c = SiteConfig::new(
            "t",
            vec![ClassSpec {
                name: "a".into(),
                description: "a".into(),
                nominal_mm: 10.0,
                rotatable: false,
            }],
        );
        c.held_out = held.iter().map(|s| s.to_string()).collect();
        c.validation_fraction = fraction;
        c
    }

    fn ids(n: usize) -> Vec<String> {
        (0..n).map(|i| format!("sheet-{i:03}")).collect()
    }

    #[test]
    fn held_out_sheets_never_train() {
        let s = split_sheets(&config(&["sheet-003", "sheet-007"], 0.2), &ids(10));
        assert_eq!(s.held_out, vec!["sheet-003", "sheet-007"]);
        assert_eq!(s.validation.len(), 2);
        assert_eq!(s.train.len(), 6);
    }

    #[test]
    fn order_of_ids_does_not_matter() {
        let mut rev = ids(12);
        rev.reverse();
        let c = config(&[], 0.25);
        assert_eq!(split_sheets(&c, &ids(12)), split_sheets(&c, &rev));
    }

    proptest! {
        #[test]
        fn every_sheet_in_exactly_one_part(n in 0usize..40, frac in 0.0..0.9f64, held in 0usize..5) {
            let all = ids(n);
            let held_ids: Vec<&str> = all.iter().take(held.min(n)).map(String::as_str).collect();
            let s = split_sheets(&config(&held_ids, frac), &all);
            let mut joined: Vec<String> = s.train.iter().chain(&s.validation).chain(&s.held_out).cloned().collect();
            joined.sort();
            prop_assert_eq!(joined, all);
            prop_assert!(s.held_out.iter().all(|h| !s.train.contains(h) && !s.validation.contains(h)));
            if n - held.min(n) >= 1 { prop_assert!(!s.train.is_empty()); }
        }
    }
}
