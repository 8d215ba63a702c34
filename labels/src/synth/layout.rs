//! Composition of one sheet: frame, title block, legend, process units, lines,
//! instrument loops, text and distractors, all laid out in millimetres.
//!
//! A sheet is one or more horizontal bands; each band is a train of process units
//! (a vessel, column, drum, exchanger or tank, often with a pump) joined by thick
//! orthogonal process lines that carry control valves, hand valves and reducers,
//! and a vent header along the top. Instrument loops (transmitter, controller,
//! gauges, alarms) are placed around their process points with dashed signal
//! lines. Every placement checks a list of occupied boxes so labelled symbols never
//! overlap each other, the title block or the legend. Instrument loops live in
//! `layout/instruments.rs`, look-alike distractors in `layout/distractors.rs`.

use super::font::{self, Anchor};
use super::raster::{Place, Prim, union_extent};
use super::style::Style;
use super::symbols::{self, Class};
use crate::geometry::BBox;
use crate::rng::SeededRng;

mod distractors;
mod instruments;

/// A list of primitives drawn together; `symbol` names the labelled symbol it is.
#[derive(Debug, Clone)]
pub(crate) struct Item {
    /// The strokes.
    pub prims: Vec<Prim>,
    /// Index into [`Drawing::symbols`] when this item is a labelled symbol.
    pub symbol: Option<usize>,
}

/// A labelled symbol before degradation (box in clean pixel coordinates).
#[derive(Debug, Clone)]
pub(crate) struct PlacedSymbol {
    /// Its class.
    pub class: Class,
    /// Exact ink extent, pixels.
    pub bbox: BBox,
    /// Tag number, for instruments.
    pub tag: Option<String>,
}

/// Everything to be rasterised for one sheet.
#[derive(Debug, Clone)]
pub(crate) struct Drawing {
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    /// Items in drawing order.
    pub items: Vec<Item>,
    /// Labelled symbols.
    pub symbols: Vec<PlacedSymbol>,
    /// Ignore areas (pixels) with their reason.
    pub ignore: Vec<(BBox, String)>,
}

/// Which way a nozzle leaves its equipment.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Dir {
    Down,
    Right,
}

/// A piece of main equipment and its connection points (mm).
#[derive(Debug, Clone)]
struct Equipment {
    body: BBox,
    inlet: (f64, f64),
    outlet: (f64, f64),
    outlet_dir: Dir,
    vent: Option<(f64, f64)>,
    level_taps: Option<((f64, f64), (f64, f64))>,
    tag: String,
}

/// What a process run is attached to, to hang loops on.
#[derive(Debug, Clone)]
struct UnitRoute {
    valve: Option<ValveAt>,
    run: Option<((f64, f64), (f64, f64))>,
    pump_discharge: Option<(f64, f64)>,
}

#[derive(Debug, Clone, Copy)]
struct ValveAt {
    centre: (f64, f64),
    vertical: bool,
    /// The actuator tip (mm).
    tip: (f64, f64),
    /// Index of the valve among the labelled symbols.
    symbol: usize,
}

struct Builder<'r> {
    st: Style,
    s: f64,
    rng: &'r mut SeededRng,
    items: Vec<Item>,
    symbols: Vec<PlacedSymbol>,
    objects: Vec<BBox>,
    lines: Vec<BBox>,
    runs: Vec<((f64, f64), (f64, f64))>,
    area: BBox,
    loop_no: u32,
}

/// Lays out a whole sheet of `w_mm x h_mm` at `s` pixels per millimetre.
pub(crate) fn compose(
    st: &Style,
    w_mm: f64,
    h_mm: f64,
    size_px: (u32, u32),
    s: f64,
    id: &str,
    rng: &mut SeededRng,
) -> Drawing {
    let frame = BBox::new(20.0, 10.0, w_mm - 30.0, h_mm - 20.0);
    let tb_w = 180f64.min(frame.w * 0.62);
    let tb_h = if st.slant_deg > 0.0 { 36.0 } else { 40.0 };
    let title = BBox::new(frame.right() - tb_w, frame.bottom() - tb_h, tb_w, tb_h);
    let lg_w = 28.0 + font::text_width_mm("CONTROL_VALVE", st.text_mm, st);
    let n_classes = Class::ALL.len() as f64;
    let legend = BBox::new(frame.right() - lg_w, frame.y, lg_w, 14.0 + 16.0 * n_classes);
    let area = BBox::new(
        frame.x + 8.0,
        frame.y + 8.0,
        legend.x - 8.0 - (frame.x + 8.0),
        title.y - 8.0 - (frame.y + 8.0),
    );
    let mut b = Builder {
        st: *st,
        s,
        rng,
        items: Vec::new(),
        symbols: Vec::new(),
        objects: vec![grow(&title, 4.0), grow(&legend, 4.0)],
        lines: Vec::new(),
        runs: Vec::new(),
        area,
        loop_no: 0,
    };
    let sheet_no = 1 + b.rng.below(5) as u32;
    b.loop_no = sheet_no * 100;
    b.frame(&frame);
    let title_px = b.title_block(&title, id, sheet_no);
    let legend_px = b.legend(&legend);
    let n_bands = ((area.h / 200.0).floor() as usize).max(1);
    let band_h = area.h / n_bands as f64;
    for k in 0..n_bands {
        let band = BBox::new(area.x, area.y + k as f64 * band_h, area.w, band_h);
        b.band(&band, sheet_no * 100 + k as u32 * 10);
    }
    b.run_instruments();
    b.line_numbers();
    b.inline_distractors();
    b.floating_distractors();
    b.crossings_near_bubbles();
    b.notes(&frame, &title);
    Drawing {
        width: size_px.0,
        height: size_px.1,
        items: b.items,
        symbols: b.symbols,
        ignore: vec![
            (title_px, "title block".to_string()),
            (legend_px, "legend".to_string()),
        ],
    }
}

fn grow(b: &BBox, m: f64) -> BBox {
    BBox::new(b.x - m, b.y - m, b.w + 2.0 * m, b.h + 2.0 * m)
}

fn overlaps(a: &BBox, b: &BBox) -> bool {
    a.x < b.right() && b.x < a.right() && a.y < b.bottom() && b.y < a.bottom()
}

fn seg_box(a: (f64, f64), b: (f64, f64), m: f64) -> BBox {
    let x0 = a.0.min(b.0) - m;
    let y0 = a.1.min(b.1) - m;
    BBox::new(x0, y0, a.0.max(b.0) + m - x0, a.1.max(b.1) + m - y0)
}

impl Builder<'_> {
    fn g(&self) -> Place {
        Place::at((0.0, 0.0), self.s)
    }

    fn at(&self, c: (f64, f64)) -> Place {
        Place::at((c.0 * self.s, c.1 * self.s), self.s)
    }

    fn push(&mut self, prims: Vec<Prim>) {
        self.items.push(Item {
            prims,
            symbol: None,
        });
    }

    fn extent_mm(&self, prims: &[Prim]) -> BBox {
        union_extent(prims)
            .map(|e| e.scaled(1.0 / self.s))
            .unwrap_or(BBox::new(0.0, 0.0, 0.0, 0.0))
    }

    fn free(&self, b: &BBox, with_lines: bool) -> bool {
        self.area.contains_box(b)
            && !self.objects.iter().any(|o| overlaps(o, b))
            && (!with_lines || !self.lines.iter().any(|o| overlaps(o, b)))
    }

    fn text(&mut self, s: &str, x: f64, y: f64, h: f64, anchor: Anchor) -> BBox {
        let mut prims = Vec::new();
        font::text(&self.g(), s, x, y, h, anchor, &self.st, &mut prims);
        let e = self.extent_mm(&prims);
        self.push(prims);
        self.objects.push(grow(&e, 0.8));
        e
    }

    fn process_line(&mut self, pts: &[(f64, f64)]) {
        let mut prims = Vec::new();
        self.g().polyline(pts, self.st.process_line_mm, &mut prims);
        self.push(prims);
        for w in pts.windows(2) {
            self.lines
                .push(seg_box(w[0], w[1], self.st.process_line_mm / 2.0 + 0.8));
            self.runs.push((w[0], w[1]));
        }
    }

    /// A thin solid line (instrument process connection); its first point is a
    /// tap on a process line or vessel, kept clear of inline shapes.
    fn thin_line(&mut self, pts: &[(f64, f64)], lw: f64) {
        if let Some(p) = pts.first() {
            self.objects.push(BBox::centered(p.0, p.1, 5.0, 5.0));
        }
        let mut prims = Vec::new();
        self.g().polyline(pts, lw, &mut prims);
        self.push(prims);
        for w in pts.windows(2) {
            self.lines.push(seg_box(w[0], w[1], lw / 2.0 + 0.8));
        }
    }

    /// A dashed polyline whose dash pattern runs on across corners.
    fn dashed_line(&mut self, pts: &[(f64, f64)]) {
        let (dash, gap, lw) = (self.st.dash_mm, self.st.gap_mm, self.st.signal_line_mm);
        let period = dash + gap;
        let mut prims = Vec::new();
        let mut phase = 0.0;
        for w in pts.windows(2) {
            let (a, b) = (w[0], w[1]);
            let len = ((b.0 - a.0).powi(2) + (b.1 - a.1).powi(2)).sqrt();
            if len <= 0.0 {
                continue;
            }
            let dir = ((b.0 - a.0) / len, (b.1 - a.1) / len);
            let mut t = -phase;
            while t < len {
                let t0 = t.max(0.0);
                let t1 = (t + dash).min(len);
                if t1 > t0 {
                    let p0 = (a.0 + dir.0 * t0, a.1 + dir.1 * t0);
                    let p1 = (a.0 + dir.0 * t1, a.1 + dir.1 * t1);
                    prims.push(self.g().seg(p0, p1, lw));
                }
                t += period;
            }
            phase = (phase + len) % period;
            self.lines.push(seg_box(a, b, lw / 2.0 + 0.8));
        }
        self.push(prims);
    }

    /// Adds a labelled symbol; returns its extent in mm.
    fn symbol(&mut self, class: Class, pl: Place, tag: Option<(String, String)>) -> BBox {
        let mut prims = Vec::new();
        let tag_ref = tag.as_ref().map(|(a, b)| (a.as_str(), b.as_str()));
        symbols::draw_class(&pl, class, &self.st, tag_ref, &mut prims);
        let px = union_extent(&prims).expect("symbols have strokes");
        let idx = self.symbols.len();
        self.symbols.push(PlacedSymbol {
            class,
            bbox: px,
            tag: tag.map(|(a, b)| format!("{a}-{b}")),
        });
        self.items.push(Item {
            prims,
            symbol: Some(idx),
        });
        let mm = px.scaled(1.0 / self.s);
        self.objects.push(grow(&mm, 2.0));
        mm
    }

    fn bubble_extent(&self, c: (f64, f64)) -> BBox {
        let r = (self.st.bubble_diameter_mm + self.st.outline_mm) / 2.0;
        BBox::new(c.0 - r, c.1 - r, 2.0 * r, 2.0 * r)
    }

    /// Places an instrument bubble at the first free candidate centre; returns
    /// the centre and the symbol index.
    fn bubble(
        &mut self,
        class: Class,
        letters: &str,
        number: u32,
        cands: &[(f64, f64)],
    ) -> Option<((f64, f64), usize)> {
        for &c in cands {
            if self.free(&grow(&self.bubble_extent(c), 2.5), true) {
                let idx = self.symbols.len();
                self.symbol(
                    class,
                    self.at(c),
                    Some((letters.to_string(), number.to_string())),
                );
                return Some((c, idx));
            }
        }
        None
    }

    fn frame(&mut self, f: &BBox) {
        let st = self.st;
        let mut prims = Vec::new();
        self.g()
            .rect(f.center(), f.w, f.h, 0.0, st.frame_mm, &mut prims);
        // Grid reference zones (ISO 5457, from memory): numbers along the top,
        // letters down the left, no I or O.
        let nx = ((f.w / 50.0).round() as usize).max(2);
        let ny = ((f.h / 50.0).round() as usize).max(2);
        for k in 0..nx {
            let x = f.x + f.w * (k as f64 + 0.5) / nx as f64;
            font::text(
                &self.g(),
                &format!("{}", k + 1),
                x,
                f.y - 3.0,
                st.tag_text_mm,
                Anchor::Centre,
                &st,
                &mut prims,
            );
            if k > 0 {
                let xt = f.x + f.w * k as f64 / nx as f64;
                prims.push(self.g().seg((xt, f.y - 5.0), (xt, f.y), st.thin_mm));
            }
        }
        for (k, letter) in "ABCDEFGHJKLMNPQRSTUVWXYZ".chars().take(ny).enumerate() {
            let y = f.y + f.h * (k as f64 + 0.5) / ny as f64;
            let l = letter.to_string();
            font::text(
                &self.g(),
                &l,
                f.x - 10.0,
                y + st.tag_text_mm / 2.0,
                st.tag_text_mm,
                Anchor::Centre,
                &st,
                &mut prims,
            );
            if k > 0 {
                let yt = f.y + f.h * k as f64 / ny as f64;
                prims.push(self.g().seg((f.x - 5.0, yt), (f.x, yt), st.thin_mm));
            }
        }
        self.push(prims);
    }

    fn title_block(&mut self, t: &BBox, id: &str, sheet_no: u32) -> BBox {
        let st = self.st;
        let g = self.g();
        let mut prims = Vec::new();
        g.rect(
            t.center(),
            t.w,
            t.h,
            st.title_corner_mm,
            st.frame_mm,
            &mut prims,
        );
        let rows = [0.42, 0.62, 0.81];
        for r in rows {
            let y = t.y + t.h * r;
            prims.push(g.seg((t.x, y), (t.right(), y), st.thin_mm));
        }
        let xm = t.x + t.w * 0.62;
        prims.push(g.seg((xm, t.y + t.h * rows[1]), (xm, t.bottom()), st.thin_mm));
        let pad = 3.0;
        let title = format!("UNIT {} TRANSFER", sheet_no * 100);
        font::text(
            &g,
            &title,
            t.x + pad,
            t.y + t.h * 0.3,
            st.title_text_mm,
            Anchor::Left,
            &st,
            &mut prims,
        );
        let h = st.text_mm;
        let line = |prims: &mut Vec<Prim>, s: &str, x: f64, row: f64| {
            font::text(&g, s, x, t.y + t.h * row - 1.2, h, Anchor::Left, &st, prims);
        };
        line(
            &mut prims,
            "FICTIONAL PLANT - SYNTHETIC SHEET",
            t.x + pad,
            rows[1],
        );
        line(
            &mut prims,
            "PIPING AND INSTRUMENTATION DIAGRAM",
            t.x + pad,
            rows[2],
        );
        line(
            &mut prims,
            &format!("DWG {}", id.to_ascii_uppercase()),
            t.x + pad,
            1.0,
        );
        line(
            &mut prims,
            &format!("SHEET {sheet_no}  REV {}", 1 + self.rng.below(4)),
            xm + pad,
            rows[2],
        );
        line(&mut prims, "SCALE NTS", xm + pad, 1.0);
        let e = union_extent(&prims).expect("title block has strokes");
        self.push(prims);
        e
    }

    fn legend(&mut self, l: &BBox) -> BBox {
        let st = self.st;
        let g = self.g();
        let mut prims = Vec::new();
        g.rect(
            l.center(),
            l.w,
            l.h,
            st.title_corner_mm,
            st.frame_mm,
            &mut prims,
        );
        font::text(
            &g,
            "LEGEND",
            l.x + 4.0,
            l.y + 9.0,
            st.text_mm,
            Anchor::Left,
            &st,
            &mut prims,
        );
        prims.push(g.seg((l.x, l.y + 12.0), (l.right(), l.y + 12.0), st.thin_mm));
        for (k, class) in Class::ALL.iter().enumerate() {
            let cy = l.y + 14.0 + 16.0 * (k as f64 + 0.5);
            let pl = self.at((l.x + 11.0, cy));
            symbols::draw_class(&pl, *class, &st, None, &mut prims);
            let name = class.name().to_ascii_uppercase();
            font::text(
                &g,
                &name,
                l.x + 21.0,
                cy + st.text_mm / 2.0,
                st.text_mm,
                Anchor::Left,
                &st,
                &mut prims,
            );
        }
        let e = union_extent(&prims).expect("legend has strokes");
        self.push(prims);
        e
    }

    fn equipment(&mut self, ex: f64, band: &BBox, unit: u32) -> Equipment {
        let st = self.st;
        let h = band.h;
        let top = band.y + 0.2 * h;
        let kind = self.rng.below(5);
        let mut prims = Vec::new();
        let eq = match kind {
            0 | 1 => {
                let column = kind == 1;
                let w = if column {
                    self.rng.range_f64(14.0, 18.0)
                } else {
                    self.rng.range_f64(18.0, 26.0)
                };
                let bh = if column {
                    0.4 * h
                } else {
                    self.rng.range_f64(0.24, 0.32) * h
                }
                .min(110.0);
                let c = (ex, top + w / 4.0 + bh / 2.0);
                symbols::vertical_vessel(&self.at(c), &st, w, bh, column, &mut prims);
                let body = BBox::new(ex - w / 2.0, top, w, bh + w / 2.0);
                Equipment {
                    body,
                    inlet: (ex - w / 2.0, top + w / 4.0 + 0.3 * bh),
                    outlet: (ex, body.bottom()),
                    outlet_dir: Dir::Down,
                    vent: Some((ex, top)),
                    level_taps: Some((
                        (ex + w / 2.0, top + w / 4.0 + 0.25 * bh),
                        (ex + w / 2.0, top + w / 4.0 + 0.85 * bh),
                    )),
                    tag: format!("{}-{unit}", if column { "C" } else { "V" }),
                }
            }
            2 => {
                let (w, dh) = (
                    self.rng.range_f64(34.0, 42.0),
                    self.rng.range_f64(14.0, 18.0),
                );
                let c = (ex + 6.0, top + 14.0 + dh / 2.0);
                symbols::horizontal_drum(&self.at(c), &st, w, dh, &mut prims);
                let body = BBox::new(
                    c.0 - w / 2.0 - dh / 4.0,
                    c.1 - dh / 2.0,
                    w + dh / 2.0,
                    dh + 4.0,
                );
                Equipment {
                    body,
                    inlet: (c.0 - w / 2.0 - dh / 4.0, c.1),
                    outlet: (c.0 + w * 0.15, c.1 + dh / 2.0),
                    outlet_dir: Dir::Down,
                    vent: Some((c.0 - w * 0.2, c.1 - dh / 2.0)),
                    level_taps: Some((
                        (c.0 + w / 2.0 + dh / 4.0, c.1 - dh * 0.25),
                        (c.0 + w / 2.0 + dh / 4.0, c.1 + dh * 0.25),
                    )),
                    tag: format!("D-{unit}"),
                }
            }
            3 => {
                let (w, eh) = (self.rng.range_f64(36.0, 44.0), 12.0);
                let c = (ex + 6.0, top + 20.0);
                symbols::exchanger(&self.at(c), &st, w, eh, &mut prims);
                let body = BBox::new(c.0 - w / 2.0, c.1 - eh / 2.0, w, eh);
                // Cooling water nozzles on top of the shell.
                let cw = [(c.0 - 4.0, c.1 - eh / 2.0), (c.0 + 8.0, c.1 - eh / 2.0)];
                for (k, p) in cw.iter().enumerate() {
                    prims.push(self.g().seg(*p, (p.0, p.1 - 8.0), st.signal_line_mm * 2.0));
                    let lbl = if k == 0 { "CWS" } else { "CWR" };
                    font::text(
                        &self.g(),
                        lbl,
                        p.0,
                        p.1 - 9.5,
                        st.tag_text_mm,
                        Anchor::Centre,
                        &st,
                        &mut prims,
                    );
                }
                Equipment {
                    body: BBox::new(body.x, body.y - 13.0, body.w, body.h + 13.0),
                    inlet: (c.0 - w / 2.0, c.1),
                    outlet: (c.0 + w / 2.0 - eh, c.1 + eh / 2.0),
                    outlet_dir: Dir::Down,
                    vent: None,
                    level_taps: None,
                    tag: format!("E-{unit}"),
                }
            }
            _ => {
                let (w, th) = (
                    self.rng.range_f64(28.0, 36.0),
                    self.rng.range_f64(0.18, 0.24) * h,
                );
                let c = (ex, top + w * 0.12 + th / 2.0);
                symbols::tank(&self.at(c), &st, w, th, &mut prims);
                let body = BBox::new(ex - w / 2.0, top, w, th + w * 0.12);
                Equipment {
                    body,
                    inlet: (ex - w / 2.0, top + w * 0.12 + 0.2 * th),
                    outlet: (ex + w / 2.0, body.bottom() - 4.0),
                    outlet_dir: Dir::Right,
                    vent: Some((ex, top)),
                    level_taps: Some((
                        (ex + w / 2.0, top + w * 0.12 + 0.2 * th),
                        (ex + w / 2.0, body.bottom() - 10.0),
                    )),
                    tag: format!("TK-{unit}"),
                }
            }
        };
        self.push(prims);
        self.objects.push(grow(&eq.body, 1.0));
        // Equipment tag: left of the body near its top, else right, else above.
        let tag = eq.tag.clone();
        let (tw, th) = (font::text_width_mm(&tag, st.text_mm, &st), st.text_mm);
        let spots = [
            (eq.body.x - tw - 3.0, eq.body.y + 6.0),
            (eq.body.right() + 3.0, eq.body.y + 2.0),
            (eq.body.x, eq.body.y - 3.0),
        ];
        let spot = spots
            .iter()
            .copied()
            .find(|&(x, y)| {
                let b = BBox::new(x - 0.5, y - th - 0.5, tw + 1.0, th + 1.0);
                !self.objects.iter().any(|o| overlaps(o, &b))
            })
            .unwrap_or(spots[0]);
        self.text(&tag, spot.0, spot.1, st.text_mm, Anchor::Left);
        eq
    }

    fn band(&mut self, band: &BBox, unit_base: u32) {
        let st = self.st;
        let n_units = ((band.w / 95.0).floor() as usize).max(2);
        let wu = band.w / n_units as f64;
        let h = band.h;
        let y_route = band.y + 0.72 * h;
        let y_pump = band.y + 0.87 * h;
        // Keep the feed connector's strip clear of equipment tags and bubbles.
        self.objects.push(BBox::new(band.x, band.y, 17.0, band.h));
        let mut eqs = Vec::new();
        for k in 0..n_units {
            // The first unit sits further right, clear of the feed connector.
            let lead = if k == 0 { 10.0 } else { 0.0 };
            let ex = band.x + k as f64 * wu + 0.32 * wu + lead + self.rng.range_f64(-3.0, 3.0);
            let unit = unit_base + k as u32 + 1;
            eqs.push(self.equipment(ex, band, unit));
        }
        // Feed from off-sheet into the first unit.
        let first = eqs[0].inlet;
        let x_feed = band.x + 2.0;
        let mut prims = Vec::new();
        symbols::off_sheet(&self.at((x_feed, first.1)), &st, 12.0, &mut prims);
        self.push(prims);
        self.objects
            .push(BBox::new(x_feed - 1.0, first.1 - 4.0, 14.0, 8.0));
        self.process_line(&[(x_feed + 12.0, first.1), first]);
        self.text("FEED", x_feed, first.1 + 6.5, st.tag_text_mm, Anchor::Left);
        let mut routes = Vec::new();
        for k in 0..n_units {
            let e = eqs[k].clone();
            let next_in = eqs.get(k + 1).map(|n| n.inlet);
            let unit = unit_base + k as u32 + 1;
            let x_end = band.right() - 16.0;
            routes.push(self.route(&e, next_in, x_end, y_route, y_pump, unit));
        }
        // Vent header along the top of the band.
        let y_h = band.y + 0.07 * h;
        let vents: Vec<(f64, f64)> = eqs.iter().filter_map(|e| e.vent).collect();
        if vents.len() >= 2 {
            let x0 = vents[0].0;
            let x1 = band.right() - 16.0;
            self.process_line(&[(x0, y_h), (x1, y_h)]);
            let mut prims = Vec::new();
            symbols::off_sheet(&self.at((x1, y_h)), &st, 12.0, &mut prims);
            for (k, v) in vents.iter().enumerate() {
                if k > 0 {
                    prims.push(self.g().disc((v.0, y_h), st.process_line_mm * 1.2));
                }
            }
            self.push(prims);
            self.objects.push(BBox::new(x1 - 1.0, y_h - 4.0, 14.0, 8.0));
            self.text(
                "TO FLARE",
                x1 - 4.0,
                y_h + 7.0,
                st.tag_text_mm,
                Anchor::Left,
            );
            for v in &vents {
                self.process_line(&[*v, (v.0, y_h)]);
            }
        }
        for (e, r) in eqs.iter().zip(&routes) {
            self.loops(e, r);
        }
    }

    /// Routes the outflow of `e` (through a pump when drawn) to the next inlet or
    /// off the sheet, and places the control valve.
    fn route(
        &mut self,
        e: &Equipment,
        next_in: Option<(f64, f64)>,
        x_end: f64,
        y_route: f64,
        y_pump: f64,
        unit: u32,
    ) -> UnitRoute {
        let st = self.st;
        let o = e.outlet;
        let mut pts = vec![o];
        if e.outlet_dir == Dir::Right {
            pts.push((o.0 + 6.0, o.1));
        }
        let x_down = pts.last().expect("non-empty").0;
        let mut pump_discharge = None;
        let mut run_start_x = x_down;
        let has_pump = self.rng.chance(0.7);
        if has_pump {
            let (suction, discharge) = symbols::pump_ports(&st);
            let pc = (
                x_down + 16.0 - suction.0 - st.pump_diameter_mm / 2.0,
                y_pump,
            );
            pts.push((x_down, y_pump));
            pts.push((pc.0 + suction.0, pc.1 + suction.1));
            self.process_line(&pts);
            self.symbol(Class::Pump, self.at(pc), None);
            let d = (pc.0 + discharge.0, pc.1 + discharge.1);
            pump_discharge = Some(d);
            let tag = format!("P-{unit}{}", if self.rng.chance(0.5) { "A" } else { "" });
            self.text(
                &tag,
                pc.0 - 6.0,
                pc.1 + st.pump_diameter_mm / 2.0 + 6.0,
                st.text_mm,
                Anchor::Left,
            );
            pts = vec![d, (d.0 + 6.0, d.1), (d.0 + 6.0, y_route)];
            run_start_x = d.0 + 6.0;
        } else {
            pts.push((x_down, y_route));
        }
        let (x_rise, y_target) = match next_in {
            Some(n) => (n.0 - 10.0, n.1),
            None => (x_end, y_route),
        };
        pts.push((x_rise, y_route));
        if let Some(n) = next_in {
            pts.push((x_rise, n.1));
            pts.push(n);
        }
        self.process_line(&pts);
        if next_in.is_none() {
            let mut prims = Vec::new();
            symbols::off_sheet(&self.at((x_end, y_route)), &st, 12.0, &mut prims);
            self.push(prims);
            self.objects
                .push(BBox::new(x_end - 1.0, y_route - 4.0, 14.0, 8.0));
            self.text(
                "TO UNIT 900",
                x_end - 8.0,
                y_route + 7.0,
                st.tag_text_mm,
                Anchor::Left,
            );
        }
        let run = ((run_start_x, y_route), (x_rise, y_route));
        let run_len = x_rise - run_start_x;
        let rise_len = y_route - y_target;
        let valve = if run_len >= 42.0 {
            let x = run_start_x + run_len * self.rng.range_f64(0.45, 0.7);
            Some(self.control_valve((x, y_route), false))
        } else if rise_len >= 34.0 {
            let y = y_route - rise_len * self.rng.range_f64(0.4, 0.6);
            Some(self.control_valve((x_rise, y), true))
        } else {
            None
        };
        UnitRoute {
            valve,
            run: (run_len >= 20.0).then_some(run),
            pump_discharge,
        }
    }

    fn control_valve(&mut self, c: (f64, f64), vertical: bool) -> ValveAt {
        let st = self.st;
        let half = st.valve_length_mm / 2.0;
        let lw = st.process_line_mm;
        let erase = if vertical {
            BBox::new(c.0 - lw, c.1 - half, 2.0 * lw, 2.0 * half)
        } else {
            BBox::new(c.0 - half, c.1 - lw, 2.0 * half, 2.0 * lw)
        };
        self.push(vec![Prim::Erase(erase.scaled(self.s))]);
        let pl = Place {
            quarter_turns: if vertical { 1 } else { 0 },
            ..self.at(c)
        };
        let symbol = self.symbols.len();
        self.symbol(Class::ControlValve, pl, None);
        let reach = st.actuator_stem_mm + st.actuator_width_mm / 2.0 + st.outline_mm / 2.0;
        let tip = if vertical {
            (c.0 + reach, c.1)
        } else {
            (c.0, c.1 - reach)
        };
        // Block valves either side, sometimes.
        if self.rng.chance(0.45) {
            for sgn in [-1.0, 1.0] {
                let hc = if vertical {
                    (c.0, c.1 + sgn * 13.0)
                } else {
                    (c.0 + sgn * 13.0, c.1)
                };
                self.inline_shape(hc, vertical, 0);
            }
        }
        ValveAt {
            centre: c,
            vertical,
            tip,
            symbol,
        }
    }

    /// Draws an unlabelled inline shape (0 hand valve, 1 ball valve, 2 reducer).
    fn inline_shape(&mut self, c: (f64, f64), vertical: bool, kind: u8) -> bool {
        let st = self.st;
        let pl = Place {
            quarter_turns: if vertical { 1 } else { 0 },
            ..self.at(c)
        };
        let mut prims = Vec::new();
        match kind {
            0 => symbols::hand_valve(&pl, &st, &mut prims),
            1 => symbols::ball_valve(&pl, &st, &mut prims),
            _ => symbols::reducer(&pl, &st, &mut prims),
        }
        let e = self.extent_mm(&prims);
        if self.objects.iter().any(|o| overlaps(o, &e)) || !self.area.contains_box(&e) {
            return false;
        }
        let lw = st.process_line_mm;
        let half = e.w.max(e.h) / 2.0;
        let erase = if vertical {
            BBox::new(c.0 - lw, c.1 - half + 0.6, 2.0 * lw, 2.0 * half - 1.2)
        } else {
            BBox::new(c.0 - half + 0.6, c.1 - lw, 2.0 * half - 1.2, 2.0 * lw)
        };
        if kind != 2 {
            self.push(vec![Prim::Erase(erase.scaled(self.s))]);
        }
        self.push(prims);
        self.objects.push(grow(&e, 1.5));
        true
    }

    fn line_numbers(&mut self) {
        let st = self.st;
        let runs = self.runs.clone();
        for (a, b) in runs {
            let (horizontal, len) = run_span(a, b);
            if len < 55.0 || !self.rng.chance(0.8) {
                continue;
            }
            let size = self
                .rng
                .pick(&[50, 80, 100, 150, 200])
                .copied()
                .expect("non-empty");
            let service = *self
                .rng
                .pick(&["PW", "HC", "CW", "ST", "NG", "PL"])
                .expect("non-empty");
            let num = 1000 + self.rng.below(9000);
            let spec = *self.rng.pick(&["A1", "A2", "B1", "C3"]).expect("non-empty");
            let s = format!("{size}-{service}-{num}-{spec}");
            let h = st.text_mm * 0.72;
            let h = if h < 2.2 { 1.8 } else { 2.5 };
            let tw = font::text_width_mm(&s, h, &st);
            for _ in 0..6 {
                if horizontal {
                    let x0 = a.0.min(b.0) + 4.0;
                    let x1 = a.0.max(b.0) - 4.0 - tw;
                    if x1 <= x0 {
                        break;
                    }
                    let x = self.rng.range_f64(x0, x1);
                    let y = a.1 - st.process_line_mm / 2.0 - 1.6;
                    let bx = BBox::new(x - 0.5, y - h - 0.5, tw + 1.0, h + 1.0);
                    if self.free(&bx, true) {
                        self.text(&s, x, y, h, Anchor::Left);
                        break;
                    }
                } else {
                    let y0 = a.1.min(b.1) + 4.0 + tw;
                    let y1 = a.1.max(b.1) - 4.0;
                    if y1 <= y0 {
                        break;
                    }
                    let y = self.rng.range_f64(y0, y1);
                    let x = a.0 - st.process_line_mm / 2.0 - 1.6;
                    let bx = BBox::new(x - h - 0.5, y - tw - 0.5, h + 1.0, tw + 1.0);
                    if self.free(&bx, true) {
                        let pl = Place {
                            quarter_turns: 3,
                            ..self.at((x, y))
                        };
                        let mut prims = Vec::new();
                        font::text(&pl, &s, 0.0, 0.0, h, Anchor::Left, &st, &mut prims);
                        let e = self.extent_mm(&prims);
                        self.push(prims);
                        self.objects.push(grow(&e, 0.8));
                        break;
                    }
                }
            }
        }
    }

    fn notes(&mut self, frame: &BBox, title: &BBox) {
        let st = self.st;
        let h = st.text_mm * 0.72;
        let h = if h < 2.2 { 1.8 } else { 2.5 };
        let lines = [
            "NOTES",
            "1. ALL DRAINS TO CLOSED DRAIN SYSTEM",
            "2. NO POCKETS ON LINES TO PUMPS",
            "3. CONTROL VALVE SIZES TO VENDOR DATA",
        ];
        let w = lines
            .iter()
            .map(|l| font::text_width_mm(l, h, &st))
            .fold(0.0, f64::max);
        let tall = lines.len() as f64 * h * 1.7;
        let x = frame.x + 6.0;
        let y = title.y + 4.0;
        let bx = BBox::new(x, y, w, tall);
        if bx.right() < title.x - 4.0 && bx.bottom() < frame.bottom() - 2.0 {
            for (k, l) in lines.iter().enumerate() {
                let mut prims = Vec::new();
                font::text(
                    &self.g(),
                    l,
                    x,
                    y + h + k as f64 * h * 1.7,
                    h,
                    Anchor::Left,
                    &st,
                    &mut prims,
                );
                self.push(prims);
            }
        }
    }
}

/// Whether an orthogonal run from `a` to `b` is horizontal, and its length in mm.
pub(super) fn run_span(a: (f64, f64), b: (f64, f64)) -> (bool, f64) {
    let horizontal = (a.1 - b.1).abs() < 1e-9;
    let len = if horizontal {
        (b.0 - a.0).abs()
    } else {
        (b.1 - a.1).abs()
    };
    (horizontal, len)
}
