//! Lines over a numeric axis, in one or more panels side by side: the IoU
//! sweep, the training curves and the comparison of evaluations.

use super::{
    Placed, Plot, draw_legend, draw_mark, draw_paper_box, draw_path, font, mesh_style, pct_label,
    pe, series_rows, sz,
};
use crate::palette::{INK, series_style};
use plotters::coord::Shift;
use plotters::prelude::*;
use serde::Serialize;

/// One line.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LineSeries {
    /// Legend text.
    pub name: String,
    /// Points (x, y); a `None` y breaks the line (undefined value).
    pub points: Vec<(f64, Option<f64>)>,
}

/// One panel.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LinePanel {
    /// Heading.
    pub title: String,
    /// Horizontal axis title, with unit.
    pub x_desc: String,
    /// Vertical axis title, with unit.
    pub y_desc: String,
    /// Horizontal range.
    pub x_range: (f64, f64),
    /// Vertical range.
    pub y_range: (f64, f64),
    /// Vertical axis labelled in percent.
    pub y_percent: bool,
    /// The lines.
    pub series: Vec<LineSeries>,
    /// A vertical reference line and its label.
    pub marker: Option<(f64, String)>,
    /// Legend at the bottom right instead of the top right (for rising lines).
    pub legend_low: bool,
    /// Horizontal axis counts whole units (epochs): label only whole numbers.
    pub x_whole: bool,
}

/// The numbers of a line figure.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LinesDrawn {
    /// The panels.
    pub panels: Vec<LinePanel>,
    /// Every point as placed in the SVG.
    pub placed: Vec<Placed>,
}

/// A line figure to draw.
#[derive(Debug, Clone)]
pub struct LinesPlot {
    /// Panels, left to right.
    pub panels: Vec<LinePanel>,
    /// Size of one panel.
    pub panel_size: (u32, u32),
}

impl Plot for LinesPlot {
    fn size(&self) -> (u32, u32) {
        (
            self.panel_size.0 * self.panels.len().max(1) as u32,
            self.panel_size.1,
        )
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        s: f64,
    ) -> Result<Vec<Placed>, String> {
        let areas = root.split_evenly((1, self.panels.len().max(1)));
        let mut placed = Vec::new();
        for (panel, area) in self.panels.iter().zip(&areas) {
            let (grid, ticks, desc) = mesh_style(s);
            let (x0, x1) = panel.x_range;
            let (y0, y1) = panel.y_range;
            let mut chart = ChartBuilder::on(area)
                .caption(&panel.title, font(15.0, s))
                .margin(sz(10.0, s))
                .margin_right(sz(26.0, s))
                .x_label_area_size(sz(48.0, s))
                .y_label_area_size(sz(72.0, s))
                .build_cartesian_2d(x0..x1, y0..y1)
                .map_err(pe)?;
            let decimals = |span: f64| {
                if span <= 2.5 {
                    2
                } else if span <= 25.0 {
                    1
                } else {
                    0
                }
            };
            let (xd, yd) = (decimals(x1 - x0), decimals(y1 - y0));
            let whole_x = panel.x_whole;
            let x_fmt = move |v: &f64| {
                if whole_x {
                    if (v - v.round()).abs() < 1e-9 {
                        format!("{v:.0}")
                    } else {
                        String::new()
                    }
                } else {
                    format!("{v:.xd$}")
                }
            };
            let y_fmt = move |v: &f64| format!("{v:.yd$}");
            let mut mesh = chart.configure_mesh();
            mesh.light_line_style(TRANSPARENT)
                .max_light_lines(1)
                .bold_line_style(grid)
                .axis_style(INK.stroke_width(sz(1.0, s)))
                .label_style(ticks)
                .axis_desc_style(desc)
                .x_label_formatter(&x_fmt)
                .x_desc(panel.x_desc.as_str())
                .y_desc(panel.y_desc.as_str());
            if panel.y_percent {
                mesh.y_label_formatter(&pct_label);
            } else {
                mesh.y_label_formatter(&y_fmt);
            }
            mesh.draw().map_err(pe)?;
            if let Some((x, _)) = &panel.marker {
                let a = chart.backend_coord(&(*x, y0));
                let b = chart.backend_coord(&(*x, y1));
                draw_path(
                    root,
                    &[a, b],
                    RGBColor(0x66, 0x66, 0x66).stroke_width(sz(1.0, s)),
                    Some((4, 4)),
                    s,
                )?;
            }
            for (i, series) in panel.series.iter().enumerate() {
                let (color, mark, dash) = series_style(i);
                let mut run: Vec<(i32, i32)> = Vec::new();
                let mut runs = Vec::new();
                for &(x, y) in &series.points {
                    match y {
                        Some(y) => {
                            let at = chart.backend_coord(&(x, y));
                            run.push(at);
                            placed.push(Placed {
                                what: format!("{}: {}", panel.title, series.name),
                                x,
                                y,
                                px: at.0,
                                py: at.1,
                            });
                        }
                        None => runs.push(std::mem::take(&mut run)),
                    }
                }
                runs.push(run);
                let every = (series.points.len() / 12).max(1);
                for r in &runs {
                    draw_path(root, r, color.stroke_width(sz(2.0, s)), dash, s)?;
                    for p in r.iter().step_by(every) {
                        draw_mark(root, mark, *p, sz(3.5, s) as i32, color, s)?;
                    }
                }
            }
            // The marker's label and the legend go on paper-white boxes drawn
            // after every series, so no curve crosses their text.
            if let Some((x, label)) = &panel.marker {
                let (mx, my) = chart.backend_coord(&(*x, y0 + (y1 - y0) * 0.45));
                let (tx, ty) = (mx + sz(6.0, s) as i32, my - sz(7.0, s) as i32);
                let (pad, w) = (
                    sz(4.0, s) as i32,
                    sz(6.6 * label.chars().count() as f64, s) as i32,
                );
                draw_paper_box(
                    root,
                    [
                        (tx - pad, ty - pad),
                        (tx + w + pad, ty + sz(14.0, s) as i32 + pad),
                    ],
                    s,
                )?;
                root.draw(&Text::new(label.clone(), (tx, ty), font(12.0, s)))
                    .map_err(pe)?;
            }
            let rows = series_rows(panel.series.iter().map(|x| x.name.as_str()));
            let n = rows.len() as i32;
            let line_h = sz(17.0, s) as i32;
            let first_y = if panel.legend_low {
                let (_, ly) = chart.backend_coord(&(x0, y0));
                ly - sz(14.0, s) as i32 - line_h * (n - 1)
            } else {
                let (_, ly) = chart.backend_coord(&(x0, y1));
                ly + sz(14.0, s) as i32
            };
            let (lx, _) = chart.backend_coord(&(x0 + (x1 - x0) * 0.45, y0));
            draw_legend(root, &rows, (lx, first_y), line_h, 3.5, s)?;
        }
        Ok(placed)
    }
}
