//! Static checks of the page built into the binary: state colours and outside
//! references.

use symtrust_review::server::PAGE_HTML;

/// Relative luminance of an sRGB colour `#rrggbb`, by the WCAG 2.x definition
/// (sRGB channel linearised with the 0.03928 threshold, weights 0.2126, 0.7152,
/// 0.0722).
fn luminance(hex: &str) -> f64 {
    let h = hex.trim_start_matches('#');
    let ch = |i: usize| {
        let c = f64::from(u8::from_str_radix(&h[i..i + 2], 16).unwrap()) / 255.0;
        if c <= 0.03928 {
            c / 12.92
        } else {
            ((c + 0.055) / 1.055).powf(2.4)
        }
    };
    0.2126 * ch(0) + 0.7152 * ch(2) + 0.0722 * ch(4)
}

/// WCAG 2.x contrast ratio `(L1 + 0.05) / (L2 + 0.05)`, lighter over darker.
fn contrast(a: &str, b: &str) -> f64 {
    let (la, lb) = (luminance(a), luminance(b));
    (la.max(lb) + 0.05) / (la.min(lb) + 0.05)
}

#[test]
fn contrast_formula_matches_known_values() {
    // Black on white is 21:1 by the WCAG definition; #767676 on white is the
    // commonly quoted lightest grey that reaches 4.5:1 (about 4.54:1, from memory).
    assert!((contrast("#000000", "#ffffff") - 21.0).abs() < 1e-9);
    let grey = contrast("#767676", "#ffffff");
    assert!((4.5..4.6).contains(&grey), "{grey}");
}

#[test]
fn state_colours_reach_three_to_one_on_white_paper() {
    // WCAG 2.1 success criterion 1.4.11 (non-text contrast) asks 3:1 for the
    // parts of graphics needed to understand them.
    for name in [
        "accepted", "draft", "proposal", "rejected", "ignore", "selected",
    ] {
        let key = format!("--{name}: ");
        let at = PAGE_HTML
            .find(&key)
            .unwrap_or_else(|| panic!("colour {name} missing"));
        let hex = &PAGE_HTML[at + key.len()..at + key.len() + 7];
        let ratio = contrast(hex, "#ffffff");
        assert!(ratio >= 3.0, "{name} {hex}: {ratio:.2}:1");
    }
}

#[test]
fn the_page_references_nothing_outside_the_server() {
    for needle in [
        "http://",
        "https://",
        "src=\"//",
        "href=\"//",
        "@import",
        "url(",
    ] {
        assert!(!PAGE_HTML.contains(needle), "the page contains {needle:?}");
    }
}
