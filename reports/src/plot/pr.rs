//! Precision-recall curves: one panel per class (and all classes pooled), each
//! with its operating point and the bootstrap interval box around it; or
//! several evaluations overlaid in one panel.

use super::{
    Placed, Plot, draw_legend, draw_mark, draw_path, font, mesh_style, pct_label, pe, series_rows,
    sz,
};
use crate::palette::{BAND, INK, series_style};
use plotters::coord::Shift;
use plotters::prelude::*;
use serde::Serialize;

/// An interval box: recall range by precision range.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct IntervalBox {
    /// Lower end of the recall interval.
    pub recall_lower: f64,
    /// Upper end of the recall interval.
    pub recall_upper: f64,
    /// Lower end of the precision interval.
    pub precision_lower: f64,
    /// Upper end of the precision interval.
    pub precision_upper: f64,
}

/// One curve of a panel.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PrSeries {
    /// Legend text.
    pub name: String,
    /// (recall, precision) points, in order of falling score threshold.
    pub points: Vec<(f64, f64)>,
    /// The operating point (recall, precision), if there is one.
    pub operating: Option<(f64, f64)>,
    /// Its interval box, when the bootstrap ran.
    pub interval: Option<IntervalBox>,
}

/// One panel.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PrPanel {
    /// Panel heading (class name and AP).
    pub title: String,
    /// The curves.
    pub series: Vec<PrSeries>,
    /// Why the panel is empty, when it is.
    pub note: Option<String>,
}

/// The numbers of a PR figure and where its operating points landed.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PrDrawn {
    /// Panels, left to right, top to bottom.
    pub panels: Vec<PrPanel>,
    /// Operating points as placed in the SVG.
    pub placed: Vec<Placed>,
}

/// A PR figure to draw.
#[derive(Debug, Clone)]
pub struct PrPlot {
    /// The panels.
    pub panels: Vec<PrPanel>,
    /// Panels per row.
    pub columns: usize,
    /// Panel width and height in SVG pixels.
    pub panel_size: (u32, u32),
}

impl Plot for PrPlot {
    fn size(&self) -> (u32, u32) {
        let rows = self.panels.len().div_ceil(self.columns).max(1) as u32;
        (
            self.panel_size.0 * self.columns as u32,
            self.panel_size.1 * rows,
        )
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        s: f64,
    ) -> Result<Vec<Placed>, String> {
        let rows = self.panels.len().div_ceil(self.columns).max(1);
        let areas = root.split_evenly((rows, self.columns));
        let mut placed = Vec::new();
        for (panel, area) in self.panels.iter().zip(&areas) {
            placed.extend(draw_panel(root, area, panel, s)?);
        }
        Ok(placed)
    }
}

fn draw_panel<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    area: &DrawingArea<DB, Shift>,
    panel: &PrPanel,
    s: f64,
) -> Result<Vec<Placed>, String> {
    let (grid, ticks, desc) = mesh_style(s);
    let mut chart = ChartBuilder::on(area)
        .caption(&panel.title, font(15.0, s))
        .margin(sz(8.0, s))
        .margin_right(sz(26.0, s))
        .x_label_area_size(sz(48.0, s))
        .y_label_area_size(sz(64.0, s))
        .build_cartesian_2d(0f64..1.0001f64, 0f64..1.0001f64)
        .map_err(pe)?;
    chart
        .configure_mesh()
        .light_line_style(TRANSPARENT)
        .max_light_lines(1)
        .bold_line_style(grid)
        .axis_style(INK.stroke_width(sz(1.0, s)))
        .label_style(ticks)
        .axis_desc_style(desc)
        .x_labels(6)
        .y_labels(6)
        .x_label_formatter(&pct_label)
        .y_label_formatter(&pct_label)
        .x_desc("Recall: labelled symbols found (%)")
        .y_desc("Precision: reports right (%)")
        .draw()
        .map_err(pe)?;
    let mut placed = Vec::new();
    if let Some(note) = &panel.note {
        let at = chart.backend_coord(&(0.5, 0.5));
        root.draw(&Text::new(
            note.clone(),
            at,
            font(12.0, s).pos(plotters::style::text_anchor::Pos::new(
                plotters::style::text_anchor::HPos::Center,
                plotters::style::text_anchor::VPos::Center,
            )),
        ))
        .map_err(pe)?;
    }
    let several = panel.series.len() > 1;
    for (i, series) in panel.series.iter().enumerate() {
        let (color, mark, dash) = if several {
            series_style(i)
        } else {
            (crate::palette::HIT, crate::palette::Mark::Circle, None)
        };
        if let Some(b) = series.interval {
            let band = if several { color } else { BAND };
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [
                        (b.recall_lower, b.precision_lower),
                        (b.recall_upper, b.precision_upper),
                    ],
                    band.mix(0.18).filled(),
                )))
                .map_err(pe)?;
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [
                        (b.recall_lower, b.precision_lower),
                        (b.recall_upper, b.precision_upper),
                    ],
                    band.mix(0.7).stroke_width(sz(1.0, s)),
                )))
                .map_err(pe)?;
        }
        let px: Vec<(i32, i32)> = series
            .points
            .iter()
            .map(|p| chart.backend_coord(p))
            .collect();
        draw_path(root, &px, color.stroke_width(sz(2.0, s)), dash, s)?;
        if several {
            // A mark every few points so each curve is known without colour.
            let step = (px.len() / 8).max(1);
            for p in px.iter().step_by(step) {
                draw_mark(root, mark, *p, sz(3.0, s) as i32, color, s)?;
            }
        }
        if let Some(op) = series.operating {
            let at = chart.backend_coord(&op);
            let r = sz(6.0, s) as i32;
            let op_color = if several { color } else { INK };
            root.draw(&Circle::new(at, r, WHITE.filled())).map_err(pe)?;
            root.draw(&Circle::new(at, r, op_color.stroke_width(sz(3.0, s))))
                .map_err(pe)?;
            draw_mark(
                root,
                crate::palette::Mark::Circle,
                at,
                sz(2.0, s) as i32,
                op_color,
                s,
            )?;
            placed.push(Placed {
                what: format!("operating point: {} / {}", panel.title, series.name),
                x: op.0,
                y: op.1,
                px: at.0,
                py: at.1,
            });
        }
    }
    if several {
        let (x0, y0) = chart.backend_coord(&(0.03, 0.30));
        let line_h = sz(18.0, s) as i32;
        let rows = series_rows(panel.series.iter().map(|x| x.name.as_str()));
        let first_y = y0 - line_h * (rows.len() as i32 - 1);
        draw_legend(root, &rows, (x0, first_y), line_h, 3.0, s)?;
    }
    Ok(placed)
}
