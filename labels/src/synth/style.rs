//! The two drafting standards of the synthetic plant, as nominal numbers.
//!
//! Style A is a heavy, upright standard with 11 mm bubbles and square-cornered
//! boxes; style B is a lighter one with 9.5 mm bubbles, slanted lettering and
//! rounded corners. Every line width is taken from the ISO 128 series and every
//! lettering height from the ISO 3098 series, so drawings look like real ones.

/// Which drafting standard a sheet follows.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum DraftingStyle {
    /// Heavy, upright, square corners, 11 mm bubbles.
    A,
    /// Light, slanted lettering, rounded corners, 9.5 mm bubbles.
    B,
}

impl DraftingStyle {
    /// Lower-case letter used in sheet ids.
    pub fn letter(self) -> char {
        match self {
            DraftingStyle::A => 'a',
            DraftingStyle::B => 'b',
        }
    }

    /// The nominal numbers of this style.
    pub fn spec(self) -> Style {
        match self {
            DraftingStyle::A => Style {
                bubble_diameter_mm: 11.0,
                process_line_mm: 1.0,
                signal_line_mm: 0.35,
                outline_mm: 0.5,
                equipment_mm: 0.7,
                frame_mm: 1.0,
                thin_mm: 0.25,
                tag_text_mm: 2.5,
                text_mm: 3.5,
                title_text_mm: 7.0,
                char_width: 0.62,
                slant_deg: 0.0,
                shared_corner_mm: 0.0,
                title_corner_mm: 0.0,
                valve_length_mm: 8.0,
                valve_height_mm: 4.8,
                actuator_stem_mm: 3.2,
                actuator_width_mm: 5.6,
                pump_diameter_mm: 9.0,
                pump_base: true,
                dash_mm: 4.2,
                gap_mm: 1.05,
            },
            DraftingStyle::B => Style {
                bubble_diameter_mm: 9.5,
                process_line_mm: 0.7,
                signal_line_mm: 0.25,
                outline_mm: 0.35,
                equipment_mm: 0.5,
                frame_mm: 0.7,
                thin_mm: 0.18,
                tag_text_mm: 1.8,
                text_mm: 2.5,
                title_text_mm: 5.0,
                char_width: 0.72,
                slant_deg: 15.0,
                shared_corner_mm: 1.5,
                title_corner_mm: 4.0,
                valve_length_mm: 7.0,
                valve_height_mm: 3.6,
                actuator_stem_mm: 3.6,
                actuator_width_mm: 6.4,
                pump_diameter_mm: 8.0,
                pump_base: false,
                dash_mm: 3.0,
                gap_mm: 0.75,
            },
        }
    }
}

/// Nominal numbers of a drafting style, in millimetres on paper.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Style {
    /// Instrument bubble diameter (centre line of the outline).
    pub bubble_diameter_mm: f64,
    /// Main process lines.
    pub process_line_mm: f64,
    /// Dashed instrument signal lines and instrument process connections.
    pub signal_line_mm: f64,
    /// Outlines of instruments, valves and pumps.
    pub outline_mm: f64,
    /// Outlines of vessels, exchangers and other large equipment.
    pub equipment_mm: f64,
    /// The border frame and title block outline.
    pub frame_mm: f64,
    /// Thin lines: table rules, hatching, leader lines.
    pub thin_mm: f64,
    /// Lettering height of tag numbers inside bubbles.
    pub tag_text_mm: f64,
    /// Lettering height of line numbers, equipment tags and notes.
    pub text_mm: f64,
    /// Lettering height of the drawing title.
    pub title_text_mm: f64,
    /// Character advance as a fraction of the lettering height.
    pub char_width: f64,
    /// Lettering slant from the vertical, degrees (ISO 3098 allows 0 or 15).
    pub slant_deg: f64,
    /// Corner radius of the shared-display square (0 = square corners).
    pub shared_corner_mm: f64,
    /// Corner radius of the title block and legend box.
    pub title_corner_mm: f64,
    /// Length of the control valve body along the pipe.
    pub valve_length_mm: f64,
    /// Height of the bow-tie body across the pipe.
    pub valve_height_mm: f64,
    /// Actuator stem length from the body centre line to the dome base.
    pub actuator_stem_mm: f64,
    /// Width of the diaphragm actuator dome.
    pub actuator_width_mm: f64,
    /// Pump casing diameter.
    pub pump_diameter_mm: f64,
    /// Whether the pump is drawn on a base plate.
    pub pump_base: bool,
    /// Dash length of signal lines.
    pub dash_mm: f64,
    /// Gap length of signal lines.
    pub gap_mm: f64,
}

/// Lettering stroke width for a lettering height: `h / 10` (ISO 3098 type B).
pub fn lettering_width_mm(height_mm: f64) -> f64 {
    height_mm / 10.0
}

impl Style {
    /// Every line width this style draws with, lettering included.
    pub fn all_line_widths_mm(&self) -> Vec<f64> {
        vec![
            self.process_line_mm,
            self.signal_line_mm,
            self.outline_mm,
            self.equipment_mm,
            self.frame_mm,
            self.thin_mm,
            lettering_width_mm(self.tag_text_mm),
            lettering_width_mm(self.text_mm),
            lettering_width_mm(self.title_text_mm),
        ]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const STYLES: [DraftingStyle; 2] = [DraftingStyle::A, DraftingStyle::B];

    #[test]
    fn every_line_width_is_in_the_iso_128_series() {
        // ISO 128-20:1996, 4.2 (from memory): line widths 0.13, 0.18, 0.25, 0.35,
        // 0.5, 0.7, 1, 1.4, 2 mm, each the previous times sqrt(2).
        let series = [0.13, 0.18, 0.25, 0.35, 0.5, 0.7, 1.0, 1.4, 2.0];
        for k in 1..series.len() {
            let ratio: f64 = series[k] / series[k - 1];
            assert!((ratio - 2f64.sqrt()).abs() < 0.05, "step {k}: {ratio}");
        }
        for s in STYLES {
            for w in s.spec().all_line_widths_mm() {
                assert!(
                    series.iter().any(|x| (x - w).abs() < 1e-9),
                    "{s:?}: width {w} mm is not in the ISO 128 series"
                );
            }
        }
    }

    #[test]
    fn process_lines_are_at_least_twice_signal_and_thin_lines() {
        // ISO 128-20:1996, 4.2 (from memory): wide lines are at least twice the
        // width of narrow lines in the same drawing.
        for s in STYLES {
            let st = s.spec();
            assert!(st.process_line_mm >= 2.0 * st.signal_line_mm, "{s:?}");
            assert!(st.process_line_mm >= 2.0 * st.thin_mm, "{s:?}");
        }
    }

    #[test]
    fn lettering_heights_are_in_the_iso_3098_series() {
        // ISO 3098-1 (from memory): nominal heights 1.8, 2.5, 3.5, 5, 7, 10, 14, 20 mm;
        // type B line width h/10.
        let series = [1.8, 2.5, 3.5, 5.0, 7.0, 10.0, 14.0, 20.0];
        for s in STYLES {
            let st = s.spec();
            for h in [st.tag_text_mm, st.text_mm, st.title_text_mm] {
                assert!(series.iter().any(|x| (x - h).abs() < 1e-9), "{s:?}: {h} mm");
            }
            assert!((lettering_width_mm(3.5) - 0.35).abs() < 1e-12);
            // ISO 3098-1 (from memory): slanted lettering is at 15 degrees.
            assert!(st.slant_deg == 0.0 || st.slant_deg == 15.0);
        }
    }

    #[test]
    fn bubble_is_about_seven_sixteenths_inch() {
        // ISA-5.1 (from memory, the symbol figures) draws bubbles of about
        // 7/16 inch = 11.11 mm; style A uses 11 mm, style B a smaller 9.5 mm.
        let seven_sixteenths_mm = 7.0 / 16.0 * 25.4;
        let a = DraftingStyle::A.spec().bubble_diameter_mm;
        assert!((a - seven_sixteenths_mm).abs() < 0.2, "{a}");
        // At 200 dpi: 11 mm / 25.4 * 200 = 86.61 px (hand calculation).
        let px = crate::synth::paper::mm_to_px(a, 200.0);
        assert!((px - 86.61).abs() < 0.01, "{px}");
        let b = crate::synth::paper::mm_to_px(DraftingStyle::B.spec().bubble_diameter_mm, 200.0);
        assert!((b - 74.80).abs() < 0.01, "{b}");
    }

    #[test]
    fn styles_differ_as_real_standards_do() {
        let (a, b) = (DraftingStyle::A.spec(), DraftingStyle::B.spec());
        assert_ne!(a.bubble_diameter_mm, b.bubble_diameter_mm);
        assert_ne!(a.process_line_mm, b.process_line_mm);
        assert_ne!(a.shared_corner_mm > 0.0, b.shared_corner_mm > 0.0);
        assert_ne!(a.slant_deg, b.slant_deg);
        assert_ne!(
            a.valve_height_mm / a.valve_length_mm,
            b.valve_height_mm / b.valve_length_mm
        );
    }
}
