//! The labelled symbol classes and the unlabelled shapes drawn around them.
//!
//! Every drawing function takes a [`Place`] (where local millimetre `(0, 0)` is
//! put, turned and mirrored) and appends its strokes. Labelled symbols are drawn
//! about their own centre so their box is the analytic extent of their strokes.

use super::font::{Anchor, text};
use super::raster::{Place, Prim};
use super::style::{DraftingStyle, Style};
use std::f64::consts::{PI, TAU};

/// One labelled symbol class.
#[derive(Debug, Clone, PartialEq)]
pub struct ClassSpec {
    /// Class name, snake_case.
    pub name: String,
    /// What the class means on a drawing.
    pub description: String,
    /// Nominal size on paper (diameter or body length), millimetres.
    pub nominal_mm: f64,
    /// Whether the symbol is drawn turned by quarter turns on sheets.
    pub rotatable: bool,
}

/// The labelled classes, in a fixed order.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub(crate) enum Class {
    /// Discrete instrument, field mounted: plain circle.
    BubbleField,
    /// Shared display / shared control: circle in a square.
    BubbleShared,
    /// Located in a main control room: circle with a bar.
    BubbleBoard,
    /// Control valve: bow-tie body with a diaphragm actuator.
    ControlValve,
    /// Centrifugal pump: circle with a tangential outlet.
    Pump,
}

impl Class {
    /// All classes in their fixed order.
    pub(crate) const ALL: [Class; 5] = [
        Class::BubbleField,
        Class::BubbleShared,
        Class::BubbleBoard,
        Class::ControlValve,
        Class::Pump,
    ];

    /// The class name.
    pub(crate) fn name(self) -> &'static str {
        match self {
            Class::BubbleField => "bubble_field",
            Class::BubbleShared => "bubble_shared",
            Class::BubbleBoard => "bubble_board",
            Class::ControlValve => "control_valve",
            Class::Pump => "pump",
        }
    }
}

/// The labelled symbol classes of a style, in a fixed order.
pub fn classes(style: DraftingStyle) -> Vec<ClassSpec> {
    let st = style.spec();
    Class::ALL
        .iter()
        .map(|c| {
            let (description, nominal_mm, rotatable) = match c {
                Class::BubbleField => (
                    "instrument bubble, plain circle: discrete instrument, field mounted",
                    st.bubble_diameter_mm,
                    false,
                ),
                Class::BubbleShared => (
                    "instrument bubble, circle in a square: shared display or shared control",
                    st.bubble_diameter_mm,
                    false,
                ),
                Class::BubbleBoard => (
                    "instrument bubble, circle with a horizontal bar: located in a main control room",
                    st.bubble_diameter_mm,
                    false,
                ),
                Class::ControlValve => (
                    "control valve: bow-tie body with a diaphragm actuator",
                    st.valve_length_mm,
                    true,
                ),
                Class::Pump => (
                    "centrifugal pump: circle with a tangential outlet",
                    st.pump_diameter_mm,
                    true,
                ),
            };
            ClassSpec {
                name: c.name().to_string(),
                description: description.to_string(),
                nominal_mm,
                rotatable,
            }
        })
        .collect()
}

/// An instrument bubble with its tag (letters over loop number).
pub(crate) fn bubble(
    pl: &Place,
    class: Class,
    st: &Style,
    tag: Option<(&str, &str)>,
    out: &mut Vec<Prim>,
) {
    let r = st.bubble_diameter_mm / 2.0;
    out.push(pl.circle((0.0, 0.0), r, st.outline_mm));
    match class {
        Class::BubbleShared => pl.rect(
            (0.0, 0.0),
            2.0 * r,
            2.0 * r,
            st.shared_corner_mm,
            st.outline_mm,
            out,
        ),
        Class::BubbleBoard => out.push(pl.seg((-r, 0.0), (r, 0.0), st.outline_mm)),
        _ => {}
    }
    if let Some((letters, number)) = tag {
        let h = st.tag_text_mm;
        let gap = 0.08 * st.bubble_diameter_mm;
        text(pl, letters, 0.0, -gap, h, Anchor::Centre, st, out);
        text(pl, number, 0.0, gap + h, h, Anchor::Centre, st, out);
    }
}

/// The bow-tie body of a valve along the local u axis.
pub(crate) fn bow_tie(pl: &Place, st: &Style, out: &mut Vec<Prim>) {
    let (hl, hh) = (st.valve_length_mm / 2.0, st.valve_height_mm / 2.0);
    pl.polygon(
        &[(-hl, -hh), (hl, hh), (hl, -hh), (-hl, hh)],
        st.outline_mm,
        out,
    );
}

/// A control valve: bow-tie body, stem and diaphragm dome (towards local -v).
pub(crate) fn control_valve(pl: &Place, st: &Style, out: &mut Vec<Prim>) {
    bow_tie(pl, st, out);
    let s = st.actuator_stem_mm;
    let rd = st.actuator_width_mm / 2.0;
    out.push(pl.seg((0.0, 0.0), (0.0, -s), st.outline_mm));
    out.push(pl.seg((-rd, -s), (rd, -s), st.outline_mm));
    out.push(pl.arc((0.0, -s), rd, PI, TAU, st.outline_mm));
}

/// Nozzle geometry of the pump: (nozzle end u, nozzle depth).
fn pump_nozzle(st: &Style) -> (f64, f64) {
    let r = st.pump_diameter_mm / 2.0;
    (1.15 * r, 0.4 * r)
}

/// Local suction and discharge points of the pump (suction on -u, discharge on +u).
pub(crate) fn pump_ports(st: &Style) -> ((f64, f64), (f64, f64)) {
    let r = st.pump_diameter_mm / 2.0;
    let (xe, hn) = pump_nozzle(st);
    ((-r, 0.0), (xe, -r + hn / 2.0))
}

/// A centrifugal pump: casing circle, tangential discharge nozzle on +u, base (style).
pub(crate) fn pump(pl: &Place, st: &Style, out: &mut Vec<Prim>) {
    let r = st.pump_diameter_mm / 2.0;
    let lw = st.outline_mm;
    let (xe, hn) = pump_nozzle(st);
    out.push(pl.circle((0.0, 0.0), r, lw));
    let xi = (r * r - (r - hn) * (r - hn)).sqrt();
    out.push(pl.seg((0.0, -r), (xe, -r), lw));
    out.push(pl.seg((xi, -r + hn), (xe, -r + hn), lw));
    out.push(pl.seg((xe, -r), (xe, -r + hn), lw));
    if st.pump_base {
        let yb = r + 0.9;
        pl.polyline(
            &[
                (-0.6 * r, 0.8 * r),
                (-0.9 * r, yb),
                (0.9 * r, yb),
                (0.6 * r, 0.8 * r),
            ],
            lw,
            out,
        );
    }
}

/// Draws a labelled symbol of `class` at `pl`.
pub(crate) fn draw_class(
    pl: &Place,
    class: Class,
    st: &Style,
    tag: Option<(&str, &str)>,
    out: &mut Vec<Prim>,
) {
    match class {
        Class::BubbleField | Class::BubbleShared | Class::BubbleBoard => {
            bubble(pl, class, st, tag, out)
        }
        Class::ControlValve => control_valve(pl, st, out),
        Class::Pump => pump(pl, st, out),
    }
}

/// A hand valve (gate): bow-tie with no actuator. Unlabelled look-alike.
pub(crate) fn hand_valve(pl: &Place, st: &Style, out: &mut Vec<Prim>) {
    bow_tie(pl, st, out);
}

/// A ball valve: bow-tie with a ball. Unlabelled look-alike.
pub(crate) fn ball_valve(pl: &Place, st: &Style, out: &mut Vec<Prim>) {
    bow_tie(pl, st, out);
    out.push(pl.disc((0.0, 0.0), st.valve_height_mm * 0.22));
}

/// A concentric reducer along local u.
pub(crate) fn reducer(pl: &Place, st: &Style, out: &mut Vec<Prim>) {
    let (l, a, b) = (4.5, st.valve_height_mm * 0.45, st.valve_height_mm * 0.25);
    pl.polygon(
        &[(-l / 2.0, -a), (l / 2.0, -b), (l / 2.0, b), (-l / 2.0, a)],
        st.outline_mm,
        out,
    );
}

/// A vertical vessel with 2:1 elliptical heads; local (0,0) is the body centre.
pub(crate) fn vertical_vessel(
    pl: &Place,
    st: &Style,
    w: f64,
    h: f64,
    trays: bool,
    out: &mut Vec<Prim>,
) {
    let lw = st.equipment_mm;
    let (hw, hh, head) = (w / 2.0, h / 2.0, w / 4.0);
    out.push(pl.seg((-hw, -hh), (-hw, hh), lw));
    out.push(pl.seg((hw, -hh), (hw, hh), lw));
    half_ellipse(pl, (0.0, -hh), hw, head, true, lw, out);
    half_ellipse(pl, (0.0, hh), hw, head, false, lw, out);
    if trays {
        let n = (h / 7.0).floor() as usize;
        for k in 1..n {
            let y = -hh + h * k as f64 / n as f64;
            let (x0, x1) = if k % 2 == 0 {
                (-hw, hw * 0.45)
            } else {
                (-hw * 0.45, hw)
            };
            out.push(pl.seg((x0, y), (x1, y), st.thin_mm));
        }
    }
}

/// Half an ellipse above (`up`) or below a centre line, as chords.
fn half_ellipse(
    pl: &Place,
    c: (f64, f64),
    rx: f64,
    ry: f64,
    up: bool,
    lw: f64,
    out: &mut Vec<Prim>,
) {
    let n = 20;
    let pts: Vec<(f64, f64)> = (0..=n)
        .map(|k| {
            let t = PI * k as f64 / n as f64;
            let y = ry * t.sin();
            (c.0 + rx * t.cos(), if up { c.1 - y } else { c.1 + y })
        })
        .collect();
    pl.polyline(&pts, lw, out);
}

/// A horizontal drum with heads on both ends and two saddles.
pub(crate) fn horizontal_drum(pl: &Place, st: &Style, w: f64, h: f64, out: &mut Vec<Prim>) {
    let lw = st.equipment_mm;
    let (hw, hh) = (w / 2.0, h / 2.0);
    out.push(pl.seg((-hw, -hh), (hw, -hh), lw));
    out.push(pl.seg((-hw, hh), (hw, hh), lw));
    let q = Place {
        quarter_turns: 1,
        ..*pl
    };
    // Heads drawn in a turned frame: local (u, v) of q is (-v, u) of pl.
    half_ellipse(&q, (0.0, hw), hh, hh / 2.0, false, lw, out);
    half_ellipse(&q, (0.0, -hw), hh, hh / 2.0, true, lw, out);
    for sx in [-0.3 * w, 0.3 * w] {
        pl.polyline(
            &[
                (sx - 2.0, hh),
                (sx - 3.0, hh + 4.0),
                (sx + 3.0, hh + 4.0),
                (sx + 2.0, hh),
            ],
            st.thin_mm,
            out,
        );
    }
}

/// A shell-and-tube exchanger: shell with a rounded rear end and a channel.
pub(crate) fn exchanger(pl: &Place, st: &Style, w: f64, h: f64, out: &mut Vec<Prim>) {
    let lw = st.equipment_mm;
    let (hw, hh) = (w / 2.0, h / 2.0);
    out.push(pl.seg((-hw, -hh), (hw - hh, -hh), lw));
    out.push(pl.seg((-hw, hh), (hw - hh, hh), lw));
    out.push(pl.seg((-hw, -hh), (-hw, hh), lw));
    out.push(pl.arc((hw - hh, 0.0), hh, -PI / 2.0, PI / 2.0, lw));
    out.push(pl.seg((-hw + 6.0, -hh), (-hw + 6.0, hh), lw));
    pl.polyline(
        &[(-hw + 6.0, -hh * 0.4), (hw - hh, -hh * 0.4)],
        st.thin_mm,
        out,
    );
    pl.polyline(
        &[(-hw + 6.0, hh * 0.4), (hw - hh, hh * 0.4)],
        st.thin_mm,
        out,
    );
}

/// A flat-bottomed tank with a cone roof; (0,0) is the body centre.
pub(crate) fn tank(pl: &Place, st: &Style, w: f64, h: f64, out: &mut Vec<Prim>) {
    let lw = st.equipment_mm;
    let (hw, hh) = (w / 2.0, h / 2.0);
    pl.polyline(&[(-hw, -hh), (-hw, hh), (hw, hh), (hw, -hh)], lw, out);
    pl.polyline(&[(-hw, -hh), (0.0, -hh - w * 0.12), (hw, -hh)], lw, out);
}

/// An off-sheet connector arrow pointing along +u, `len` mm long.
pub(crate) fn off_sheet(pl: &Place, st: &Style, len: f64, out: &mut Vec<Prim>) {
    let h = 3.0;
    pl.polygon(
        &[(0.0, -h), (len - h, -h), (len, 0.0), (len - h, h), (0.0, h)],
        st.outline_mm,
        out,
    );
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::synth::paper::mm_to_px;
    use crate::synth::raster::union_extent;

    #[test]
    fn every_class_fits_a_100_px_window_at_200_dpi() {
        // Common practice: a 100 x 100 px window at 200 dpi (12.7 mm) holds one
        // whole symbol, line width included, in every orientation it is drawn in.
        let s = mm_to_px(1.0, 200.0);
        for style in [DraftingStyle::A, DraftingStyle::B] {
            let st = style.spec();
            for class in Class::ALL {
                for turns in 0..4u8 {
                    for mirror in [false, true] {
                        let pl = Place {
                            origin: (500.0, 500.0),
                            scale: s,
                            quarter_turns: turns,
                            mirror,
                        };
                        let mut prims = Vec::new();
                        draw_class(&pl, class, &st, Some(("FIC", "101")), &mut prims);
                        let e = union_extent(&prims).unwrap();
                        assert!(
                            e.w <= 100.0 && e.h <= 100.0,
                            "{style:?} {class:?}: {} x {} px",
                            e.w,
                            e.h
                        );
                    }
                }
            }
        }
    }

    #[test]
    fn bubble_box_is_diameter_plus_line_width() {
        // Analytic: outline centre-line diameter D plus one line width w.
        let s = mm_to_px(1.0, 200.0);
        for style in [DraftingStyle::A, DraftingStyle::B] {
            let st = style.spec();
            let pl = Place::at((300.0, 300.0), s);
            let mut prims = Vec::new();
            bubble(
                &pl,
                Class::BubbleField,
                &st,
                Some(("PI", "104")),
                &mut prims,
            );
            let e = union_extent(&prims).unwrap();
            let want = (st.bubble_diameter_mm + st.outline_mm) * s;
            assert!((e.w - want).abs() < 1e-9 && (e.h - want).abs() < 1e-9);
        }
    }

    #[test]
    fn classes_are_five_snake_case_names_in_fixed_order() {
        let names: Vec<String> = classes(DraftingStyle::A)
            .into_iter()
            .map(|c| c.name)
            .collect();
        assert_eq!(
            names,
            [
                "bubble_field",
                "bubble_shared",
                "bubble_board",
                "control_valve",
                "pump"
            ]
        );
        let b = classes(DraftingStyle::B);
        assert!(b[0].nominal_mm < classes(DraftingStyle::A)[0].nominal_mm);
    }
}
