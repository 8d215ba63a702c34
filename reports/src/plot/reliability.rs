//! The reliability diagram: per score bin, the mean score against the share of
//! detections that were right, with the diagonal of perfect calibration, and
//! below it how many detections fell in each bin.

use super::{
    LegendRow, Placed, Plot, draw_legend, draw_mark, draw_path, mesh_style, pct_label, pe,
    series_rows, sz,
};
use crate::palette::{INK, series_style};
use plotters::coord::Shift;
use plotters::prelude::*;
use serde::Serialize;

/// One bin as drawn.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct DrawnBin {
    /// Lower edge of the bin.
    pub lower: f64,
    /// Upper edge of the bin.
    pub upper: f64,
    /// Detections in it.
    pub count: u64,
    /// Mean score (horizontal position), when not empty.
    pub mean_score: Option<f64>,
    /// Share right (vertical position), when not empty.
    pub observed: Option<f64>,
}

/// One reliability curve (raw scores, or after calibration).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ReliabilityCurve {
    /// Legend text, with ECE and Brier score.
    pub name: String,
    /// Expected calibration error.
    pub ece: f64,
    /// Brier score.
    pub brier: f64,
    /// The bins.
    pub bins: Vec<DrawnBin>,
}

/// The numbers of a reliability diagram.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ReliabilityDrawn {
    /// One or two curves.
    pub curves: Vec<ReliabilityCurve>,
    /// Bin points as placed in the SVG.
    pub placed: Vec<Placed>,
}

/// A reliability diagram to draw.
#[derive(Debug, Clone)]
pub struct ReliabilityPlot {
    /// The curves.
    pub curves: Vec<ReliabilityCurve>,
}

impl Plot for ReliabilityPlot {
    fn size(&self) -> (u32, u32) {
        (620, 600)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        s: f64,
    ) -> Result<Vec<Placed>, String> {
        let (upper, lower) = root.split_vertically(sz(420.0, s));
        let (grid, ticks, desc) = mesh_style(s);
        let mut chart = ChartBuilder::on(&upper)
            .margin(sz(10.0, s))
            .margin_right(sz(26.0, s))
            .x_label_area_size(sz(46.0, s))
            .y_label_area_size(sz(68.0, s))
            .build_cartesian_2d(0f64..1.0001f64, 0f64..1.0001f64)
            .map_err(pe)?;
        chart
            .configure_mesh()
            .light_line_style(TRANSPARENT)
            .max_light_lines(1)
            .bold_line_style(grid)
            .axis_style(INK.stroke_width(sz(1.0, s)))
            .label_style(ticks.clone())
            .axis_desc_style(desc.clone())
            .x_label_formatter(&pct_label)
            .y_label_formatter(&pct_label)
            .x_desc("Mean detection score in the bin (%)")
            .y_desc("Detections that were right (%)")
            .draw()
            .map_err(pe)?;
        let diag = [
            chart.backend_coord(&(0.0, 0.0)),
            chart.backend_coord(&(1.0, 1.0)),
        ];
        draw_path(
            root,
            &diag,
            RGBColor(0x88, 0x88, 0x88).stroke_width(sz(1.0, s)),
            Some((6, 4)),
            s,
        )?;
        let mut placed = Vec::new();
        for (i, c) in self.curves.iter().enumerate() {
            let (color, mark, dash) = series_style(i);
            let pts: Vec<(f64, f64)> = c
                .bins
                .iter()
                .filter_map(|b| Some((b.mean_score?, b.observed?)))
                .collect();
            let px: Vec<(i32, i32)> = pts.iter().map(|p| chart.backend_coord(p)).collect();
            draw_path(root, &px, color.stroke_width(sz(2.0, s)), dash, s)?;
            for (p, at) in pts.iter().zip(&px) {
                draw_mark(root, mark, *at, sz(4.0, s) as i32, color, s)?;
                placed.push(Placed {
                    what: format!("bin: {}", c.name),
                    x: p.0,
                    y: p.1,
                    px: at.0,
                    py: at.1,
                });
            }
        }
        // Legend, top left, after every curve; the dashed diagonal is its last row.
        let (x0, y0) = chart.backend_coord(&(0.03, 0.97));
        let mut rows = series_rows(self.curves.iter().map(|c| c.name.as_str()));
        rows.push(LegendRow {
            name: "dashed diagonal: perfectly calibrated".into(),
            color: RGBColor(0x88, 0x88, 0x88),
            mark: None,
            dash: Some((6, 4)),
            width: 1.0,
        });
        draw_legend(
            root,
            &rows,
            (x0, y0 + sz(6.0, s) as i32),
            sz(18.0, s) as i32,
            4.0,
            s,
        )?;
        // Counts per bin, first curve's bins (the counts do not change with calibration
        // only when bins are the same; each curve gets its own bars side by side).
        let max = self
            .curves
            .iter()
            .flat_map(|c| c.bins.iter().map(|b| b.count))
            .max()
            .unwrap_or(1)
            .max(1);
        let mut bars = ChartBuilder::on(&lower)
            .margin(sz(10.0, s))
            .margin_right(sz(26.0, s))
            .x_label_area_size(sz(46.0, s))
            .y_label_area_size(sz(68.0, s))
            .build_cartesian_2d(0f64..1.0001f64, 0f64..(max as f64 * 1.1))
            .map_err(pe)?;
        bars.configure_mesh()
            .light_line_style(TRANSPARENT)
            .max_light_lines(1)
            .bold_line_style(grid)
            .axis_style(INK.stroke_width(sz(1.0, s)))
            .label_style(ticks)
            .axis_desc_style(desc)
            .x_label_formatter(&pct_label)
            .y_labels(4)
            .y_label_formatter(&|v| format!("{v:.0}"))
            .x_desc("Score bin (%)")
            .y_desc("Detections")
            .draw()
            .map_err(pe)?;
        let n = self.curves.len().max(1) as f64;
        for (i, c) in self.curves.iter().enumerate() {
            let (color, _, _) = series_style(i);
            bars.draw_series(c.bins.iter().map(|b| {
                let w = (b.upper - b.lower) / n;
                let x = b.lower + w * i as f64;
                Rectangle::new(
                    [(x + w * 0.08, 0.0), (x + w * 0.92, b.count as f64)],
                    color.mix(if i == 0 { 0.85 } else { 0.45 }).filled(),
                )
            }))
            .map_err(pe)?;
        }
        Ok(placed)
    }
}
