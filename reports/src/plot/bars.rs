//! Sheets ranked by errors: one horizontal bar per sheet, misses and false
//! alarms stacked (the colours and patterns of the sheet overlays), worst on top.

use super::{Placed, Plot, font, mesh_style, pe, sz};
use crate::palette::{FALSE_ALARM, INK, MISS};
use plotters::coord::Shift;
use plotters::prelude::*;
use serde::Serialize;

/// One bar.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Bar {
    /// Sheet id.
    pub sheet: String,
    /// Missed symbols (left part, magenta, solid).
    pub misses: u64,
    /// False alarms (right part, orange, hatched).
    pub false_alarms: u64,
}

/// The numbers of a bar chart.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BarsDrawn {
    /// Bars, top to bottom (worst first).
    pub bars: Vec<Bar>,
    /// Right end of each bar as placed in the SVG.
    pub placed: Vec<Placed>,
}

/// A bar chart to draw.
#[derive(Debug, Clone)]
pub struct BarsPlot {
    /// Bars, top to bottom.
    pub bars: Vec<Bar>,
}

impl Plot for BarsPlot {
    fn size(&self) -> (u32, u32) {
        (780, 140 + 30 * self.bars.len().max(1) as u32)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        s: f64,
    ) -> Result<Vec<Placed>, String> {
        let n = self.bars.len().max(1) as f64;
        let max = self
            .bars
            .iter()
            .map(|b| b.misses + b.false_alarms)
            .max()
            .unwrap_or(0)
            .max(1) as f64;
        let longest = self.bars.iter().map(|b| b.sheet.len()).max().unwrap_or(6) as f64;
        let (grid, ticks, desc) = mesh_style(s);
        let mut chart = ChartBuilder::on(root)
            .margin(sz(12.0, s))
            .margin_top(sz(34.0, s))
            .x_label_area_size(sz(48.0, s))
            .y_label_area_size(sz(longest * 8.0 + 20.0, s))
            .build_cartesian_2d(0f64..max * 1.5, 0f64..n)
            .map_err(pe)?;
        let names: Vec<String> = self.bars.iter().map(|b| b.sheet.clone()).collect();
        let label = |y: &f64| {
            // Bar i (from the top) spans n-1-i .. n-i; label its middle only.
            let k = n - y - 0.5;
            if (k - k.round()).abs() < 1e-6 && k >= 0.0 {
                names.get(k.round() as usize).cloned().unwrap_or_default()
            } else {
                String::new()
            }
        };
        let whole = |v: &f64| {
            if (v - v.round()).abs() < 1e-9 {
                format!("{v:.0}")
            } else {
                String::new()
            }
        };
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
            .x_label_formatter(&whole)
            .x_desc("Errors on the sheet at the operating threshold (count)")
            .draw()
            .map_err(pe)?;
        let mut placed = Vec::new();
        for (i, b) in self.bars.iter().enumerate() {
            let top = n - i as f64 - 0.15;
            let bottom = n - i as f64 - 0.85;
            let m = b.misses as f64;
            let f = b.false_alarms as f64;
            chart
                .draw_series([
                    Rectangle::new([(0.0, bottom), (m, top)], MISS.filled()),
                    Rectangle::new([(m, bottom), (m + f, top)], FALSE_ALARM.mix(0.35).filled()),
                    Rectangle::new(
                        [(m, bottom), (m + f, top)],
                        FALSE_ALARM.stroke_width(sz(2.0, s)),
                    ),
                ])
                .map_err(pe)?;
            // Hatching of the false-alarm part, so it differs from misses without colour.
            let step = (max * 1.5) / 110.0;
            let mut x = m + step;
            while x < m + f {
                let a = chart.backend_coord(&(x, bottom));
                let c = chart.backend_coord(&((x + step * 0.8).min(m + f), top));
                root.draw(&PathElement::new(
                    vec![a, c],
                    FALSE_ALARM.stroke_width(sz(1.0, s)),
                ))
                .map_err(pe)?;
                x += step * 2.0;
            }
            let (lx, ly) = chart.backend_coord(&(0.0, n - i as f64 - 0.5));
            root.draw(&Text::new(
                label(&(n - i as f64 - 0.5)),
                (lx - sz(6.0, s) as i32, ly),
                font(12.0, s).pos(plotters::style::text_anchor::Pos::new(
                    plotters::style::text_anchor::HPos::Right,
                    plotters::style::text_anchor::VPos::Center,
                )),
            ))
            .map_err(pe)?;
            let end = chart.backend_coord(&(m + f, n - i as f64 - 0.5));
            root.draw(&Text::new(
                format!(
                    "{} missed, {}",
                    b.misses,
                    crate::text::count(b.false_alarms as usize, "false alarm", "false alarms")
                ),
                (end.0 + sz(6.0, s) as i32, end.1),
                font(12.0, s).pos(plotters::style::text_anchor::Pos::new(
                    plotters::style::text_anchor::HPos::Left,
                    plotters::style::text_anchor::VPos::Center,
                )),
            ))
            .map_err(pe)?;
            placed.push(Placed {
                what: format!("errors: {}", b.sheet),
                x: m + f,
                y: (n - i as f64 - 0.5),
                px: end.0,
                py: end.1,
            });
        }
        // Key, top right: the two patterns.
        let (kx, ky) = chart.backend_coord(&(max * 1.5, n));
        let box_w = sz(16.0, s) as i32;
        let mut x = kx - sz(250.0, s) as i32;
        let y = ky - sz(2.0, s) as i32 - box_w;
        for (label, missed) in [("missed symbols", true), ("false alarms", false)] {
            let style = if missed {
                MISS.filled()
            } else {
                FALSE_ALARM.mix(0.35).filled()
            };
            root.draw(&Rectangle::new([(x, y), (x + box_w, y + box_w)], style))
                .map_err(pe)?;
            if !missed {
                root.draw(&Rectangle::new(
                    [(x, y), (x + box_w, y + box_w)],
                    FALSE_ALARM.stroke_width(sz(2.0, s)),
                ))
                .map_err(pe)?;
                root.draw(&PathElement::new(
                    vec![(x + box_w / 3, y + box_w), (x + 2 * box_w / 3, y)],
                    FALSE_ALARM.stroke_width(sz(1.0, s)),
                ))
                .map_err(pe)?;
            }
            root.draw(&Text::new(
                label.to_string(),
                (x + box_w + sz(5.0, s) as i32, y + box_w / 2),
                font(12.0, s).pos(plotters::style::text_anchor::Pos::new(
                    plotters::style::text_anchor::HPos::Left,
                    plotters::style::text_anchor::VPos::Center,
                )),
            ))
            .map_err(pe)?;
            x += sz(130.0, s) as i32;
        }
        Ok(placed)
    }
}
