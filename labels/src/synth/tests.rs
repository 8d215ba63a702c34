//! Whole-sheet checks of the generator: exact ground truth, skew, degradation,
//! determinism and the ISA-5.1 tag letters.

use super::*;
use crate::synth::symbols::Class;

fn clean(style: DraftingStyle, seed: u64) -> SynthConfig {
    SynthConfig {
        degradation: Degradation::none(),
        ..SynthConfig::new(style, seed)
    }
}

fn grow(b: &BBox, m: f64) -> BBox {
    BBox::new(b.x - m, b.y - m, b.w + 2.0 * m, b.h + 2.0 * m)
}

fn dark_fraction(img: &image::GrayImage) -> f64 {
    img.as_raw().iter().filter(|v| **v < 128).count() as f64 / img.as_raw().len() as f64
}

#[test]
fn boxes_are_the_exact_ink_extent_on_a_clean_render() {
    // Ground truth contract: the box is the extent of the symbol's ink (outline
    // plus half the line width); rasterised by pixel centres, the tight pixel
    // bounds of that ink agree with the box to within 1 px.
    for (style, paper) in [(DraftingStyle::A, Paper::A4), (DraftingStyle::B, Paper::A3)] {
        let cfg = clean(style, 11);
        let (drawing, _, _) = compose(&cfg, 2, paper);
        assert!(
            drawing.symbols.len() >= 5,
            "{style:?}: only {} symbols",
            drawing.symbols.len()
        );
        let only = render(&drawing, true);
        let all = render(&drawing, false);
        for s in &drawing.symbols {
            let ink = only
                .ink_bounds_in(&grow(&s.bbox, 3.0))
                .unwrap_or_else(|| panic!("{:?} at {:?} has no ink", s.class, s.bbox));
            for (a, b) in [
                (ink.x, s.bbox.x),
                (ink.y, s.bbox.y),
                (ink.right(), s.bbox.right()),
                (ink.bottom(), s.bbox.bottom()),
            ] {
                assert!(
                    (a - b).abs() <= 1.0,
                    "{style:?} {:?}: ink {ink:?} box {:?}",
                    s.class,
                    s.bbox
                );
            }
            assert!(all.ink_in(&s.bbox) > 0);
        }
    }
}

#[test]
fn boxes_lie_inside_the_sheet_outside_ignore_areas_and_apart() {
    for style in [DraftingStyle::A, DraftingStyle::B] {
        for (index, paper) in [(0, Paper::A4), (1, Paper::A3)] {
            let sheet = generate_sheet(&SynthConfig::new(style, 5), index, paper);
            let (w, h) = sheet.image.dimensions();
            assert_eq!(sheet.ignore.len(), 2);
            for (k, s) in sheet.symbols.iter().enumerate() {
                assert!(s.bbox.inside_sheet(w, h), "{:?}", s.bbox);
                for ig in &sheet.ignore {
                    assert_eq!(
                        s.bbox.intersection_area(&ig.bbox),
                        0.0,
                        "{} in {}",
                        s.class,
                        ig.reason
                    );
                }
                for t in &sheet.symbols[k + 1..] {
                    assert_eq!(
                        s.bbox.intersection_area(&t.bbox),
                        0.0,
                        "{s:?} overlaps {t:?}"
                    );
                }
            }
        }
    }
}

#[test]
fn skew_moves_box_centres_as_the_rotation_predicts() {
    let cfg_clean = clean(DraftingStyle::A, 21);
    let cfg_skew = SynthConfig {
        degradation: Degradation::skew_only(1.0),
        ..cfg_clean
    };
    let flat = generate_sheet(&cfg_clean, 4, Paper::A4);
    let skewed = generate_sheet(&cfg_skew, 4, Paper::A4);
    assert!(
        skewed.skew_deg.abs() > 0.05 && skewed.skew_deg.abs() <= 1.0,
        "{}",
        skewed.skew_deg
    );
    let (w, h) = flat.image.dimensions();
    let (cx, cy) = (f64::from(w) / 2.0, f64::from(h) / 2.0);
    // Rotation about the sheet centre, clockwise on screen with y down:
    // x' = cx + cos t (x - cx) - sin t (y - cy), y' = cy + sin t (x - cx) + cos t (y - cy).
    let t = skewed.skew_deg.to_radians();
    for (a, b) in flat.symbols.iter().zip(&skewed.symbols) {
        let (x, y) = a.bbox.center();
        let xp = cx + t.cos() * (x - cx) - t.sin() * (y - cy);
        let yp = cy + t.sin() * (x - cx) + t.cos() * (y - cy);
        let (bx, by) = b.bbox.center();
        assert!((bx - xp).abs() < 1e-6 && (by - yp).abs() < 1e-6);
    }
    // The rotated symbol ink sits in its box, centred on it within 1 px.
    let (drawing, rng, _) = compose(&cfg_skew, 4, Paper::A4);
    let only = render(&drawing, true);
    let (img, theta) = degrade::degrade(&only, &cfg_skew.degradation, 200.0, &mut rng.clone());
    assert!((theta.to_degrees() - skewed.skew_deg).abs() < 1e-12);
    let mut m = Mask::new(w, h);
    for (d, v) in m.data.iter_mut().zip(img.as_raw()) {
        *d = u8::from(*v < 128);
    }
    for s in &skewed.symbols {
        let ink = m.ink_bounds_in(&grow(&s.bbox, 3.0)).expect("ink");
        assert!(
            grow(&s.bbox, 1.0).contains_box(&ink),
            "{ink:?} not in {:?}",
            s.bbox
        );
        let (ix, iy) = ink.center();
        let (bx, by) = s.bbox.center();
        assert!(
            (ix - bx).abs() <= 1.0 && (iy - by).abs() <= 1.0,
            "{:?}: {ink:?} vs {:?}",
            s.class,
            s.bbox
        );
    }
}

#[test]
fn degradation_keeps_ink_fraction_and_changes_pixels() {
    // Stated tolerance: the dark-pixel fraction of the scan is within a relative
    // 25% of the clean render (Kanungo flips act on edges and closing refills).
    let cfg = SynthConfig::new(DraftingStyle::B, 3);
    let scanned = generate_sheet(&cfg, 1, Paper::A3);
    let clean_sheet = generate_sheet(&clean(DraftingStyle::B, 3), 1, Paper::A3);
    let (fc, fd) = (
        dark_fraction(&clean_sheet.image),
        dark_fraction(&scanned.image),
    );
    assert!((fd - fc).abs() / fc < 0.25, "clean {fc} degraded {fd}");
    // A plausible drawing: a few percent ink (common practice for line drawings).
    assert!((0.01..0.15).contains(&fc), "{fc}");
    let changed = clean_sheet
        .image
        .as_raw()
        .iter()
        .zip(scanned.image.as_raw())
        .filter(|(a, b)| (**a < 128) != (**b < 128))
        .count();
    let ink = clean_sheet
        .image
        .as_raw()
        .iter()
        .filter(|v| **v < 128)
        .count();
    assert!(
        changed as f64 > 0.05 * ink as f64,
        "only {changed} of {ink} changed"
    );
    // Paper is grey and noisy, not pure white.
    let paper_px: Vec<u8> = scanned
        .image
        .as_raw()
        .iter()
        .copied()
        .filter(|v| *v > 200)
        .take(50_000)
        .collect();
    let mean = paper_px.iter().map(|v| f64::from(*v)).sum::<f64>() / paper_px.len() as f64;
    assert!((mean - 246.0).abs() < 2.0, "{mean}");
    assert!(paper_px.iter().any(|v| *v != paper_px[0]));
}

#[test]
fn same_inputs_same_pixels_and_different_seeds_differ() {
    let cfg = SynthConfig::new(DraftingStyle::A, 9);
    let a = generate_sheet(&cfg, 2, Paper::A4);
    let b = generate_sheet(&cfg, 2, Paper::A4);
    assert_eq!(a.image.as_raw(), b.image.as_raw());
    assert_eq!(a.symbols, b.symbols);
    let c = generate_sheet(&SynthConfig::new(DraftingStyle::A, 10), 2, Paper::A4);
    assert_ne!(a.image.as_raw(), c.image.as_raw());
    // A sheet does not depend on the sheets generated before it.
    let alone = generate_sheet(&cfg, 3, Paper::A4);
    let _ = generate_sheet(&cfg, 0, Paper::A4);
    let after = generate_sheet(&cfg, 3, Paper::A4);
    assert_eq!(alone.image.as_raw(), after.image.as_raw());
    assert_eq!(a.id, "fp-a-0002");
}

#[test]
fn styles_differ_in_bubble_pixel_diameter() {
    // Box side = (D + w) mm at 200 / 25.4 px per mm: A (11 + 0.5) -> 90.55 px,
    // B (9.5 + 0.35) -> 77.56 px (hand calculation).
    let side = |style: DraftingStyle| -> f64 {
        let sheet = generate_sheet(&clean(style, 1), 0, Paper::A3);
        let s = sheet
            .symbols
            .iter()
            .find(|s| s.class == "bubble_field")
            .expect("a field bubble");
        assert!((s.bbox.w - s.bbox.h).abs() < 1e-9);
        s.bbox.w
    };
    let (a, b) = (side(DraftingStyle::A), side(DraftingStyle::B));
    assert!((a - 90.55).abs() < 0.01, "{a}");
    assert!((b - 77.56).abs() < 0.01, "{b}");
}

#[test]
fn tags_use_isa_letters_and_every_class_appears() {
    // ISA-5.1 identification letters (from memory, table 1): first letters
    // A analysis, F flow, L level, P pressure, T temperature; succeeding letters
    // A alarm, C control, G glass/gauge, H high, I indicate, L low, R record,
    // S switch, T transmit.
    let first = ['A', 'F', 'L', 'P', 'T'];
    let succeeding = ['A', 'C', 'G', 'H', 'I', 'L', 'R', 'S', 'T'];
    let mut seen = std::collections::HashSet::new();
    for index in 0..3 {
        let (drawing, _, _) = compose(&clean(DraftingStyle::A, 77), index, Paper::A3);
        for s in &drawing.symbols {
            seen.insert(s.class);
            let is_bubble = matches!(
                s.class,
                Class::BubbleField | Class::BubbleShared | Class::BubbleBoard
            );
            assert_eq!(s.tag.is_some(), is_bubble, "{:?}", s.class);
            if let Some(tag) = &s.tag {
                let (letters, number) = tag.split_once('-').expect("LETTERS-NUMBER");
                let mut cs = letters.chars();
                assert!(first.contains(&cs.next().expect("a letter")), "{tag}");
                assert!(cs.all(|c| succeeding.contains(&c)), "{tag}");
                assert!(
                    number.len() == 3 && number.chars().all(|c| c.is_ascii_digit()),
                    "{tag}"
                );
            }
        }
    }
    for c in Class::ALL {
        assert!(seen.contains(&c), "{c:?} never drawn");
    }
}

#[test]
fn one_a1_sheet_has_the_iso_size_and_many_symbols() {
    let sheet = generate_sheet(&SynthConfig::new(DraftingStyle::A, 2), 3, default_paper(3));
    assert_eq!(sheet.paper, Paper::A1);
    // ISO 216 A1 841 x 594 mm at 200 dpi -> 6622 x 4677 px (hand calculation).
    assert_eq!(sheet.image.dimensions(), (6622, 4677));
    assert!(sheet.symbols.len() >= 40, "{}", sheet.symbols.len());
    for s in &sheet.symbols {
        assert!(s.bbox.inside_sheet(6622, 4677));
        assert!(s.bbox.w <= 100.0 && s.bbox.h <= 100.0, "{s:?}");
    }
}

#[test]
fn bad_settings_are_refused_with_the_setting_named() {
    let mut cfg = SynthConfig::new(DraftingStyle::A, 1);
    cfg.dpi = 0.0;
    let e = cfg.validate().unwrap_err().to_string();
    assert!(e.contains("dpi 0"), "{e}");
    cfg.dpi = 200.0;
    cfg.degradation.eta = 1.5;
    let e = cfg.validate().unwrap_err().to_string();
    assert!(e.contains("eta"), "{e}");
    assert!(SynthConfig::default().validate().is_ok());
}
