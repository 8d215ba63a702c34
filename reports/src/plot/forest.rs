//! AP differences with their intervals, one row per class and one for the
//! mAP: a dot at the estimate, a bar over the interval, the zero line and the
//! margin the challenger may lose.

use super::{Placed, Plot, draw_path, font, mesh_style, pe, sz};
use crate::palette::{FALSE_ALARM, HIT, INK};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use serde::Serialize;

/// One row.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ForestRow {
    /// Class name, or "mAP".
    pub name: String,
    /// Estimated difference (challenger minus champion).
    pub estimate: Option<f64>,
    /// Lower end of its interval.
    pub lower: Option<f64>,
    /// Upper end of its interval.
    pub upper: Option<f64>,
    /// Judged worse beyond the margin (drawn hollow, orange).
    pub worse: bool,
}

/// The numbers of a forest plot.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ForestDrawn {
    /// Rows, top to bottom.
    pub rows: Vec<ForestRow>,
    /// AP a class may lose.
    pub margin: f64,
    /// Estimates as placed in the SVG.
    pub placed: Vec<Placed>,
}

/// A forest plot to draw.
#[derive(Debug, Clone)]
pub struct ForestPlot {
    /// Rows, top to bottom.
    pub rows: Vec<ForestRow>,
    /// AP a class may lose.
    pub margin: f64,
}

impl Plot for ForestPlot {
    fn size(&self) -> (u32, u32) {
        (760, 130 + 34 * self.rows.len().max(1) as u32)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        s: f64,
    ) -> Result<Vec<Placed>, String> {
        let n = self.rows.len().max(1) as f64;
        let ends = self
            .rows
            .iter()
            .flat_map(|r| [r.lower, r.upper, r.estimate])
            .flatten()
            .chain([-self.margin, 0.0]);
        let (lo, hi) = ends.fold((0.0f64, 0.0f64), |(a, b), v| (a.min(v), b.max(v)));
        let pad = ((hi - lo) * 0.1).max(0.02);
        let (x0, x1) = ((lo - pad).max(-1.0), (hi + pad).min(1.0));
        let longest = self.rows.iter().map(|r| r.name.len()).max().unwrap_or(4) as f64;
        let (grid, ticks, desc) = mesh_style(s);
        let mut chart = ChartBuilder::on(root)
            .margin(sz(12.0, s))
            .margin_right(sz(26.0, s))
            .x_label_area_size(sz(48.0, s))
            .y_label_area_size(sz(longest * 8.0 + 20.0, s))
            .build_cartesian_2d(x0..x1, 0f64..n)
            .map_err(pe)?;
        chart
            .configure_mesh()
            .disable_y_mesh()
            .light_line_style(TRANSPARENT)
            .max_light_lines(1)
            .bold_line_style(grid)
            .axis_style(INK.stroke_width(sz(1.0, s)))
            .label_style(ticks)
            .axis_desc_style(desc)
            .y_labels(0)
            .x_label_formatter(&|v| format!("{:+.0}", v * 100.0))
            .x_desc("Challenger AP minus champion AP (percentage points)")
            .draw()
            .map_err(pe)?;
        let vline = |x: f64, dash| -> Result<(), String> {
            let a = chart.backend_coord(&(x, 0.0));
            let b = chart.backend_coord(&(x, n));
            draw_path(root, &[a, b], INK.stroke_width(sz(1.0, s)), dash, s)
        };
        vline(0.0, None)?;
        vline(-self.margin, Some((6, 4)))?;
        let (mx, my) = chart.backend_coord(&(-self.margin, n));
        root.draw(&Text::new(
            format!("margin -{:.0} points", self.margin * 100.0),
            (mx - sz(4.0, s) as i32, my + sz(4.0, s) as i32),
            font(12.0, s).pos(Pos::new(HPos::Right, VPos::Top)),
        ))
        .map_err(pe)?;
        let mut placed = Vec::new();
        for (i, r) in self.rows.iter().enumerate() {
            let y = n - i as f64 - 0.5;
            let (lx, ly) = chart.backend_coord(&(x0, y));
            root.draw(&Text::new(
                r.name.clone(),
                (lx - sz(6.0, s) as i32, ly),
                font(12.0, s).pos(Pos::new(HPos::Right, VPos::Center)),
            ))
            .map_err(pe)?;
            let color = if r.worse { FALSE_ALARM } else { HIT };
            if let (Some(a), Some(b)) = (r.lower, r.upper) {
                let pa = chart.backend_coord(&(a, y));
                let pb = chart.backend_coord(&(b, y));
                draw_path(root, &[pa, pb], color.stroke_width(sz(3.0, s)), None, s)?;
                for p in [pa, pb] {
                    let h = sz(6.0, s) as i32;
                    draw_path(
                        root,
                        &[(p.0, p.1 - h), (p.0, p.1 + h)],
                        color.stroke_width(sz(2.0, s)),
                        None,
                        s,
                    )?;
                }
            }
            if let Some(e) = r.estimate {
                let at = chart.backend_coord(&(e, y));
                let rad = sz(6.0, s) as i32;
                if r.worse {
                    root.draw(&Circle::new(at, rad, WHITE.filled()))
                        .map_err(pe)?;
                    root.draw(&Circle::new(at, rad, color.stroke_width(sz(3.0, s))))
                        .map_err(pe)?;
                } else {
                    root.draw(&Circle::new(at, rad, color.filled()))
                        .map_err(pe)?;
                }
                placed.push(Placed {
                    what: format!("difference: {}", r.name),
                    x: e,
                    y,
                    px: at.0,
                    py: at.1,
                });
            }
        }
        Ok(placed)
    }
}
