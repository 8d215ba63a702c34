//! A small single-stroke lettering font of our own for tags, line numbers and titles.
//!
//! Each glyph is drawn on a grid 4 units wide and 6 units tall (baseline at 0,
//! capital height at 6, y up) as chains of straight strokes and elliptic arcs,
//! written as a tiny text recipe: `x,y` is a point, `A:cx,cy,rx,ry,a0,a1` appends an
//! arc from `a0` to `a1` degrees (counter-clockwise positive), `E:cx,cy,rx,ry` a
//! closed ellipse, and `|` starts a new chain. Strokes are rendered with the
//! lettering line width `h / 10` (ISO 3098 type B); the character spacing is
//! `0.2 h` (ISO 3098 type B, from memory).

use super::raster::{Place, Prim};
use super::style::{Style, lettering_width_mm};

/// The characters the font can draw (besides space).
pub const CHARSET: &str = "0123456789ABCDEFGHIJKLMNOPQRSTUVWXYZ-/._";

fn recipe(c: char) -> Option<&'static str> {
    Some(match c {
        '0' => "E:2,3,1.8,3",
        '1' => "0.8,4.6 2.2,6 2.2,0",
        '2' => "A:2,4.2,1.9,1.8,160,-30 0,0 4,0",
        '3' => "A:2,4.5,1.8,1.5,150,-90 A:2,1.5,2,1.5,90,-150",
        '4' => "3,0 3,6 0,1.8 4,1.8",
        '5' => "3.8,6 0.5,6 0.3,3.3 A:2,1.95,1.9,1.95,135,-150",
        '6' => "A:2,3,2,3,70,200 | E:2,1.9,1.9,1.9",
        '7' => "0,6 4,6 1.4,0",
        '8' => "E:2,4.55,1.6,1.45 | E:2,1.55,1.9,1.55",
        '9' => "E:2,4.1,1.9,1.9 | A:2,3,2,3,20,-110",
        'A' => "0,0 2,6 4,0 | 0.7,2.1 3.3,2.1",
        'B' => {
            "0,0 0,6 2.6,6 A:2.6,4.5,1.3,1.5,90,-90 0,3 | 0,3 2.7,3 A:2.7,1.5,1.3,1.5,90,-90 0,0"
        }
        'C' => "A:2.2,3,2.1,3,50,310",
        'D' => "0,0 0,6 1.8,6 A:1.8,3,2.2,3,90,-90 0,0",
        'E' => "4,6 0,6 0,0 4,0 | 0,3 3,3",
        'F' => "4,6 0,6 0,0 | 0,3 3,3",
        'G' => "A:2.1,3,2,3,55,355 2.4,2.74",
        'H' => "0,0 0,6 | 4,0 4,6 | 0,3 4,3",
        'I' => "2,0 2,6 | 1,0 3,0 | 1,6 3,6",
        'J' => "3.4,6 3.4,1.6 A:1.9,1.6,1.5,1.6,0,-180",
        'K' => "0,0 0,6 | 4,6 0,2 | 1.3,3.3 4,0",
        'L' => "0,6 0,0 4,0",
        'M' => "0,0 0,6 2,2 4,6 4,0",
        'N' => "0,0 0,6 4,0 4,6",
        'O' => "E:2,3,2,3",
        'P' => "0,0 0,6 2.5,6 A:2.5,4.4,1.5,1.6,90,-90 0,2.8",
        'Q' => "E:2,3,2,3 | 2.4,1.2 4,0",
        'R' => "0,0 0,6 2.5,6 A:2.5,4.4,1.5,1.6,90,-90 0,2.8 | 2,2.8 4,0",
        'S' => "A:2,4.5,1.9,1.5,30,270 A:2,1.5,2,1.5,90,-150",
        'T' => "0,6 4,6 | 2,6 2,0",
        'U' => "0,6 0,1.8 A:2,1.8,2,1.8,180,360 4,6",
        'V' => "0,6 2,0 4,6",
        'W' => "0,6 1,0 2,4 3,0 4,6",
        'X' => "0,0 4,6 | 0,6 4,0",
        'Y' => "0,6 2,3 4,6 | 2,3 2,0",
        'Z' => "0,6 4,6 0,0 4,0",
        '-' => "0.6,3 3.4,3",
        '/' => "0.2,0 3.8,6",
        '.' => "2,0.15 2,0.35",
        '_' => "0,-0.8 4,-0.8",
        _ => return None,
    })
}

fn nums(s: &str) -> Vec<f64> {
    s.split(',')
        .map(|v| v.parse::<f64>().expect("font recipe number"))
        .collect()
}

fn ellipse_points(v: &[f64], a0: f64, a1: f64, out: &mut Vec<(f64, f64)>) {
    let steps = (((a1 - a0).abs() / 12.0).ceil() as usize).max(2);
    for k in 0..=steps {
        let t = (a0 + (a1 - a0) * k as f64 / steps as f64).to_radians();
        out.push((v[0] + v[2] * t.cos(), v[1] + v[3] * t.sin()));
    }
}

/// The stroke chains of a glyph in font units (y up); `None` for an unknown
/// character, empty for a space.
pub fn glyph(c: char) -> Option<Vec<Vec<(f64, f64)>>> {
    if c == ' ' {
        return Some(Vec::new());
    }
    let r = recipe(c.to_ascii_uppercase())?;
    let mut chains = Vec::new();
    for chain_src in r.split('|') {
        let mut chain = Vec::new();
        for tok in chain_src.split_whitespace() {
            if let Some(a) = tok.strip_prefix("A:") {
                let v = nums(a);
                ellipse_points(&v, v[4], v[5], &mut chain);
            } else if let Some(e) = tok.strip_prefix("E:") {
                ellipse_points(&nums(e), 90.0, 450.0, &mut chain);
            } else {
                let v = nums(tok);
                chain.push((v[0], v[1]));
            }
        }
        chains.push(chain);
    }
    Some(chains)
}

/// Width in millimetres of `text` lettered at height `h`.
pub fn text_width_mm(text: &str, h: f64, style: &Style) -> f64 {
    let n = text.chars().count() as f64;
    if n == 0.0 {
        0.0
    } else {
        n * style.char_width * h + (n - 1.0) * 0.2 * h
    }
}

/// Where a text line is anchored horizontally.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Anchor {
    /// `x` is the left end.
    Left,
    /// `x` is the middle.
    Centre,
}

/// Strokes of one line of text whose baseline starts (or is centred) at local
/// `(x, y)` mm of `place`; unknown characters are drawn as spaces.
#[allow(clippy::too_many_arguments)]
pub(crate) fn text(
    place: &Place,
    s: &str,
    x: f64,
    y: f64,
    h: f64,
    anchor: Anchor,
    style: &Style,
    out: &mut Vec<Prim>,
) {
    let lw = lettering_width_mm(h);
    let x0 = match anchor {
        Anchor::Left => x,
        Anchor::Centre => x - text_width_mm(s, h, style) / 2.0,
    };
    let unit_x = style.char_width * h / 4.0;
    let unit_y = h / 6.0;
    let slant = style.slant_deg.to_radians().tan();
    let advance = style.char_width * h + 0.2 * h;
    for (k, c) in s.chars().enumerate() {
        let cx = x0 + k as f64 * advance;
        let Some(chains) = glyph(c) else { continue };
        for chain in chains {
            let pts: Vec<(f64, f64)> = chain
                .iter()
                .map(|&(gx, gy)| {
                    let up = gy * unit_y;
                    (cx + gx * unit_x + up * slant, y - up)
                })
                .collect();
            place.polyline(&pts, lw, out);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::synth::raster::{Mask, union_extent};
    use crate::synth::style::DraftingStyle;

    #[test]
    fn every_character_has_strokes_inside_its_cell() {
        for c in CHARSET.chars() {
            let g = glyph(c).unwrap_or_else(|| panic!("no glyph for {c:?}"));
            assert!(!g.is_empty(), "{c:?} is empty");
            for chain in g {
                for (x, y) in chain {
                    assert!(
                        (-0.3..=4.3).contains(&x) && (-1.0..=6.1).contains(&y),
                        "{c:?}: {x},{y}"
                    );
                }
            }
        }
    }

    #[test]
    fn lettered_text_has_the_stated_height_and_width() {
        let st = DraftingStyle::A.spec();
        let place = Place::at((0.0, 0.0), 10.0); // 10 px per mm
        let mut prims = Vec::new();
        text(&place, "FIC", 2.0, 5.0, 2.5, Anchor::Left, &st, &mut prims);
        let e = union_extent(&prims).unwrap();
        // Ink height = h + line width (h/10), both in px: (2.5 + 0.25) * 10.
        assert!((e.h - 27.5).abs() < 0.01, "{}", e.h);
        // Nominal width plus one line width; the C ends on its arc at 50 degrees,
        // 0.45 font units (1.74 px here) short of the cell edge.
        let w = text_width_mm("FIC", 2.5, &st) * 10.0 + 2.5;
        let unit_px = st.char_width * 2.5 / 4.0 * 10.0;
        assert!(
            e.w <= w + 1e-9 && w - e.w <= 0.5 * unit_px,
            "{} vs {w}",
            e.w
        );
        let mut m = Mask::new(100, 60);
        for p in &prims {
            m.draw(p);
        }
        assert!(m.ink_in(&e) > 50);
    }
}
