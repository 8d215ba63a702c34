//! Figures drawn with plotters: each is drawn twice from the same code, as SVG
//! (inline in the HTML) and as PNG at twice the size (beside the Markdown), and
//! keeps the numbers it was drawn from ([`Drawn`]) so a test, or an auditor,
//! can hold every mark against `metrics.json`.

pub mod bars;
pub mod forest;
pub mod heatmap;
pub mod lines;
pub mod pr;
pub mod reliability;

use crate::error::{ReportError, Result};
use crate::palette::{Dash, GRID, INK, Mark};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::{FontStyle, register_font};
use serde::Serialize;
use std::sync::OnceLock;

/// Family name the embedded font is registered under.
pub const FONT: &str = "sans-serif";

/// Scale of the PNG copies against the SVG (2: crisp when printed).
pub const PNG_SCALE: f64 = 2.0;

/// The embedded DejaVu Sans (Bitstream Vera licence, see `assets/`), so text
/// renders the same on every machine without system fonts.
static FONT_BYTES: &[u8] = include_bytes!("../../assets/DejaVuSans.ttf");

/// Registers the embedded font once per process.
pub fn ensure_font() -> Result<()> {
    static DONE: OnceLock<bool> = OnceLock::new();
    let ok = *DONE.get_or_init(|| register_font(FONT, FontStyle::Normal, FONT_BYTES).is_ok());
    if ok {
        Ok(())
    } else {
        Err(ReportError::Plot {
            figure: "font".into(),
            message: "the embedded font could not be read".into(),
        })
    }
}

/// A mark placed on a figure: its data coordinates and where it landed in the
/// SVG (pixels from the top-left corner).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Placed {
    /// What the mark is, e.g. `"operating point: valve"`.
    pub what: String,
    /// Horizontal data value.
    pub x: f64,
    /// Vertical data value.
    pub y: f64,
    /// Horizontal SVG pixel.
    pub px: i32,
    /// Vertical SVG pixel.
    pub py: i32,
}

/// The numbers a figure was drawn from, per kind of figure.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Drawn {
    /// PR curves (per class, or several evaluations overlaid).
    Pr(pr::PrDrawn),
    /// A confusion table as a heat map.
    Heatmap(heatmap::HeatmapDrawn),
    /// A reliability diagram.
    Reliability(reliability::ReliabilityDrawn),
    /// Lines over a numeric axis (IoU sweep, training curves).
    Lines(lines::LinesDrawn),
    /// Horizontal stacked bars (sheets ranked by errors).
    Bars(bars::BarsDrawn),
    /// AP differences of a comparison with their intervals.
    Forest(forest::ForestDrawn),
}

/// One finished figure.
#[derive(Debug, Clone)]
pub struct Figure {
    /// File stem and HTML anchor, e.g. `"pr-curves"`.
    pub id: String,
    /// Heading.
    pub title: String,
    /// What is drawn and how to read it.
    pub caption: String,
    /// The SVG document.
    pub svg: String,
    /// The PNG (at [`PNG_SCALE`]).
    pub png: Vec<u8>,
    /// The numbers drawn, with SVG pixel positions of the key marks.
    pub drawn: Drawn,
}

/// A figure drawn from the same code on any plotters backend.
pub trait Plot {
    /// Size of the SVG in pixels (the PNG is [`PNG_SCALE`] times larger).
    fn size(&self) -> (u32, u32);
    /// Draws on `root` at scale `s` (1 for SVG); returns the key marks placed.
    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        s: f64,
    ) -> std::result::Result<Vec<Placed>, String>;
}

/// Turns any displayable plotting error into our message.
pub fn pe<E: std::fmt::Display>(e: E) -> String {
    e.to_string()
}

/// Draws `plot` as SVG and PNG; returns both and the marks placed on the SVG.
pub fn render<P: Plot>(id: &str, plot: &P) -> Result<(String, Vec<u8>, Vec<Placed>)> {
    ensure_font()?;
    let err = |message: String| ReportError::Plot {
        figure: id.to_string(),
        message,
    };
    let (w, h) = plot.size();
    let mut svg = String::new();
    let placed = {
        let root = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| err(pe(e)))?;
        let placed = plot.draw(&root, 1.0).map_err(err)?;
        root.present().map_err(|e| err(pe(e)))?;
        placed
    };
    let (pw, ph) = (
        (f64::from(w) * PNG_SCALE).round() as u32,
        (f64::from(h) * PNG_SCALE).round() as u32,
    );
    let mut buf = vec![255u8; pw as usize * ph as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, (pw, ph)).into_drawing_area();
        plot.draw(&root, PNG_SCALE).map_err(err)?;
        root.present().map_err(|e| err(pe(e)))?;
    }
    let img = image::RgbImage::from_raw(pw, ph, buf)
        .ok_or_else(|| err("bitmap buffer has the wrong size".into()))?;
    let png = crate::picture::encode_png(&image::DynamicImage::ImageRgb8(img))
        .map_err(|e| err(e.to_string()))?;
    Ok((svg, png, placed))
}

/// plotters sizes text by line height, an em being 1/1.24 of it (its SVG
/// backend writes `font-size` = size / 1.24); this turns an em size into that.
pub const EM: f64 = 1.24;

/// A text style whose em is `px` pixels at scale 1.
pub fn font(px: f64, s: f64) -> TextStyle<'static> {
    (FONT, px * EM * s).into_font().color(&INK)
}

/// Pixels at scale `s`.
pub fn sz(px: f64, s: f64) -> u32 {
    (px * s).round().max(1.0) as u32
}

/// The usual mesh: light grid, labelled axes.
pub fn mesh_style(s: f64) -> (ShapeStyle, TextStyle<'static>, TextStyle<'static>) {
    (GRID.stroke_width(sz(1.0, s)), font(13.0, s), font(14.0, s))
}

/// Draws `mark` centred on pixel `at` of `area`.
pub fn draw_mark<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    mark: Mark,
    at: (i32, i32),
    r: i32,
    color: RGBColor,
    s: f64,
) -> std::result::Result<(), String> {
    let (x, y) = at;
    let line = color.stroke_width(sz(2.0, s));
    match mark {
        Mark::Circle => area.draw(&Circle::new(at, r, color.filled())).map_err(pe)?,
        Mark::Square => area
            .draw(&Rectangle::new([(x - r, y - r), (x + r, y + r)], line))
            .map_err(pe)?,
        Mark::Triangle => area
            .draw(&Polygon::new(
                vec![(x, y - r - 1), (x - r - 1, y + r), (x + r + 1, y + r)],
                color.filled(),
            ))
            .map_err(pe)?,
        Mark::Diamond => area
            .draw(&Polygon::new(
                vec![
                    (x, y - r - 1),
                    (x + r + 1, y),
                    (x, y + r + 1),
                    (x - r - 1, y),
                ],
                color.filled(),
            ))
            .map_err(pe)?,
        Mark::Cross => {
            area.draw(&PathElement::new(
                vec![(x - r, y - r), (x + r, y + r)],
                line,
            ))
            .map_err(pe)?;
            area.draw(&PathElement::new(
                vec![(x - r, y + r), (x + r, y - r)],
                line,
            ))
            .map_err(pe)?;
        }
    }
    Ok(())
}

/// Draws a polyline of pixel points, solid or dashed.
pub fn draw_path<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    points: &[(i32, i32)],
    style: ShapeStyle,
    dash: Dash,
    s: f64,
) -> std::result::Result<(), String> {
    match dash {
        None => area
            .draw(&PathElement::new(points.to_vec(), style))
            .map_err(pe),
        Some((on, off)) => area
            .draw(&DashedPathElement::new(
                points.iter().copied(),
                sz(f64::from(on), s),
                sz(f64::from(off), s),
                style,
            ))
            .map_err(pe),
    }
}

/// Fills `frame` (two pixel corners) paper-white with a light grey edge:
/// under a legend or a label, it keeps the text readable where curves pass.
pub fn draw_paper_box<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    frame: [(i32, i32); 2],
    s: f64,
) -> std::result::Result<(), String> {
    area.draw(&Rectangle::new(frame, WHITE.mix(0.9).filled()))
        .map_err(pe)?;
    area.draw(&Rectangle::new(
        frame,
        RGBColor(0xbb, 0xbb, 0xbb).stroke_width(sz(1.0, s)),
    ))
    .map_err(pe)
}

/// One row of a legend: a line sample in the series' style and its name.
pub struct LegendRow {
    /// Text beside the sample.
    pub name: String,
    /// Line and mark colour.
    pub color: RGBColor,
    /// Mark drawn at the middle of the sample, if any.
    pub mark: Option<Mark>,
    /// Dash pattern of the sample.
    pub dash: Dash,
    /// Line width at scale 1.
    pub width: f64,
}

/// Draws a legend on a paper-white box, after the curves so none crosses
/// it: `rows` top to bottom, `line_h` pixels apart, the first centred on
/// height `first_y`, samples starting at `x`.
pub fn draw_legend<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    rows: &[LegendRow],
    (x, first_y): (i32, i32),
    line_h: i32,
    mark_r: f64,
    s: f64,
) -> std::result::Result<(), String> {
    if rows.is_empty() {
        return Ok(());
    }
    let pad = sz(5.0, s) as i32;
    let chars = rows
        .iter()
        .map(|r| r.name.chars().count())
        .max()
        .unwrap_or(0);
    let last_y = first_y + line_h * (rows.len() as i32 - 1);
    draw_paper_box(
        area,
        [
            (x - pad, first_y - line_h / 2 - pad),
            (
                x + sz(34.0 + 6.6 * chars as f64, s) as i32 + pad,
                last_y + line_h / 2 + pad,
            ),
        ],
        s,
    )?;
    let x1 = x + sz(28.0, s) as i32;
    for (i, row) in rows.iter().enumerate() {
        let y = first_y + line_h * i as i32;
        draw_path(
            area,
            &[(x, y), (x1, y)],
            row.color.stroke_width(sz(row.width, s)),
            row.dash,
            s,
        )?;
        if let Some(mark) = row.mark {
            draw_mark(
                area,
                mark,
                ((x + x1) / 2, y),
                sz(mark_r, s) as i32,
                row.color,
                s,
            )?;
        }
        area.draw(&Text::new(
            row.name.clone(),
            (x1 + sz(6.0, s) as i32, y - sz(6.0, s) as i32),
            font(12.0, s),
        ))
        .map_err(pe)?;
    }
    Ok(())
}

/// The legend rows of series named `names`, in the palette's series styles.
pub fn series_rows<'a>(names: impl IntoIterator<Item = &'a str>) -> Vec<LegendRow> {
    names
        .into_iter()
        .enumerate()
        .map(|(i, name)| {
            let (color, mark, dash) = crate::palette::series_style(i);
            LegendRow {
                name: name.to_string(),
                color,
                mark: Some(mark),
                dash,
                width: 2.0,
            }
        })
        .collect()
}

/// `0.25` as `"25%"`.
pub fn pct_label(v: &f64) -> String {
    format!("{:.0}%", v * 100.0)
}
