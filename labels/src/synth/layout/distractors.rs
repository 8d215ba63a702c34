//! Unlabelled look-alikes that fool a naive detector: hand and ball valves and
//! reducers on the lines, circles of other sizes, ovals, arcs, the letter O in
//! text, and thin lines crossing just outside bubbles.

use super::{Builder, grow, overlaps, seg_box};
use crate::geometry::BBox;
use crate::synth::font::{self, Anchor};
use crate::synth::symbols::Class;
use std::f64::consts::{PI, TAU};

impl Builder<'_> {
    pub(super) fn inline_distractors(&mut self) {
        let runs = self.runs.clone();
        for (a, b) in runs {
            let (horizontal, len) = super::run_span(a, b);
            if len < 30.0 || !self.rng.chance(0.5) {
                continue;
            }
            let t = self.rng.range_f64(0.2, 0.8);
            let c = (a.0 + (b.0 - a.0) * t, a.1 + (b.1 - a.1) * t);
            let kind = self.rng.below(3) as u8;
            self.inline_shape(c, !horizontal, kind);
        }
    }

    pub(super) fn floating_distractors(&mut self) {
        let st = self.st;
        let n = (self.area.area() / 2600.0).round() as usize;
        let d = st.bubble_diameter_mm;
        for _ in 0..n {
            let kind = self.rng.below(7);
            let c = (
                self.rng
                    .range_f64(self.area.x + 8.0, self.area.right() - 8.0),
                self.rng
                    .range_f64(self.area.y + 8.0, self.area.bottom() - 8.0),
            );
            let pl = self.at(c);
            let lw = st.outline_mm;
            let mut prims = Vec::new();
            match kind {
                0 => {
                    // Small circle (sample point, orifice tap).
                    let rr = d * self.rng.range_f64(0.2, 0.36);
                    prims.push(pl.circle((0.0, 0.0), rr, lw));
                }
                1 => {
                    // Large circle, sometimes with a cross (sight glass, manway).
                    let rr = d * self.rng.range_f64(0.7, 1.0);
                    prims.push(pl.circle((0.0, 0.0), rr, lw));
                    if self.rng.chance(0.5) {
                        let q = rr * 0.7;
                        prims.push(pl.seg((-q, -q), (q, q), st.thin_mm));
                        prims.push(pl.seg((-q, q), (q, -q), st.thin_mm));
                    }
                }
                2 => {
                    // Oval, sometimes with a word inside.
                    let rx = d * self.rng.range_f64(0.6, 0.95);
                    let ry = rx / self.rng.range_f64(1.3, 2.0);
                    pl.ellipse((0.0, 0.0), rx, ry, lw, &mut prims);
                    if self.rng.chance(0.6) {
                        let word = *self
                            .rng
                            .pick(&["HOLD", "NO", "LO", "FO", "OPEN"])
                            .expect("non-empty");
                        let h = st.tag_text_mm;
                        font::text(&pl, word, 0.0, h / 2.0, h, Anchor::Centre, &st, &mut prims);
                    }
                }
                3 => {
                    // Arc.
                    let rr = d * self.rng.range_f64(0.35, 0.7);
                    let a0 = self.rng.range_f64(0.0, TAU);
                    prims.push(pl.arc(
                        (0.0, 0.0),
                        rr,
                        a0,
                        a0 + self.rng.range_f64(0.6, 1.4) * PI,
                        lw,
                    ));
                }
                4 => {
                    // Word with O's (notes on valves and lines).
                    let word = *self
                        .rng
                        .pick(&["LO", "LC", "NO", "FC", "FO", "NNF", "SLOPE", "OO"])
                        .expect("non-empty");
                    font::text(
                        &pl,
                        word,
                        0.0,
                        0.0,
                        st.text_mm,
                        Anchor::Left,
                        &st,
                        &mut prims,
                    );
                }
                5 => {
                    // Letter O alone, large.
                    let h = *self
                        .rng
                        .pick(&[st.text_mm, st.title_text_mm])
                        .expect("non-empty");
                    font::text(&pl, "O", 0.0, 0.0, h, Anchor::Left, &st, &mut prims);
                }
                _ => {
                    // Crossing thin lines (a leader meeting a line).
                    let l = self.rng.range_f64(8.0, 16.0);
                    prims.push(pl.seg((-l, 0.0), (l, 0.0), st.thin_mm));
                    prims.push(pl.seg((0.0, -l * 0.6), (0.0, l * 0.6), st.thin_mm));
                }
            }
            let e = self.extent_mm(&prims);
            if self.free(&grow(&e, 1.5), kind != 6) {
                self.push(prims);
                self.objects.push(grow(&e, 1.0));
            }
        }
    }

    /// Thin lines that cross each other just outside some bubbles.
    pub(super) fn crossings_near_bubbles(&mut self) {
        let st = self.st;
        let boxes: Vec<BBox> = self
            .symbols
            .iter()
            .filter(|s| {
                matches!(
                    s.class,
                    Class::BubbleField | Class::BubbleShared | Class::BubbleBoard
                )
            })
            .map(|s| s.bbox.scaled(1.0 / self.s))
            .collect();
        for b in boxes {
            if !self.rng.chance(0.3) {
                continue;
            }
            let gap = self.rng.range_f64(1.0, 2.0);
            let y = b.bottom() + gap;
            let (x0, x1) = (
                b.x - self.rng.range_f64(4.0, 10.0),
                b.right() + self.rng.range_f64(4.0, 10.0),
            );
            let xc = b.x + b.w * self.rng.range_f64(0.6, 1.3);
            let horiz = seg_box((x0, y), (x1, y), st.thin_mm);
            let vert = seg_box((xc, y - gap + 0.4), (xc, y + 10.0), st.thin_mm);
            let others: Vec<BBox> = self
                .objects
                .iter()
                .filter(|o| !o.contains_box(&b))
                .copied()
                .collect();
            let clear =
                |bx: &BBox| !others.iter().any(|o| overlaps(o, bx)) && self.area.contains_box(bx);
            let syms_clear = |bx: &BBox| {
                !self
                    .symbols
                    .iter()
                    .any(|s| overlaps(&s.bbox.scaled(1.0 / self.s), bx))
            };
            if clear(&horiz) && clear(&vert) && syms_clear(&horiz) && syms_clear(&vert) {
                let prims = vec![
                    self.g().seg((x0, y), (x1, y), st.thin_mm),
                    self.g()
                        .seg((xc, y - gap + 0.4), (xc, y + 10.0), st.thin_mm),
                ];
                self.push(prims);
                self.objects.push(horiz);
                self.objects.push(vert);
            }
        }
    }
}
