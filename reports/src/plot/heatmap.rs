//! A confusion table as a heat map: one cell per (true, reported) pair, shaded
//! by the cell's share of its row (single-hue scale, light to dark, so it reads
//! in grey and for every colour vision) and labelled with the count itself.

use super::{Placed, Plot, font, pe, sz};
use crate::palette::INK;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use serde::Serialize;

/// The numbers of a heat map: counts as printed in each cell.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HeatmapDrawn {
    /// Row labels (true class).
    pub rows: Vec<String>,
    /// Column labels (reported class).
    pub columns: Vec<String>,
    /// Counts, `counts[row][column]`.
    pub counts: Vec<Vec<u64>>,
    /// Row share of each cell (0 for an empty row), the shade drawn.
    pub shares: Vec<Vec<f64>>,
}

/// A heat map to draw.
#[derive(Debug, Clone)]
pub struct HeatmapPlot {
    /// Rows, columns and counts.
    pub table: HeatmapDrawn,
    /// Title of the row axis.
    pub row_title: String,
    /// Title of the column axis.
    pub column_title: String,
}

impl HeatmapPlot {
    /// A heat map of `rows` x `columns` counts.
    pub fn new(
        rows: Vec<String>,
        columns: Vec<String>,
        counts: Vec<Vec<u64>>,
        row_title: &str,
        column_title: &str,
    ) -> Self {
        let shares = counts
            .iter()
            .map(|r| {
                let total: u64 = r.iter().sum();
                r.iter()
                    .map(|&c| {
                        if total == 0 {
                            0.0
                        } else {
                            c as f64 / total as f64
                        }
                    })
                    .collect()
            })
            .collect();
        Self {
            table: HeatmapDrawn {
                rows,
                columns,
                counts,
                shares,
            },
            row_title: row_title.into(),
            column_title: column_title.into(),
        }
    }

    fn label_width(&self) -> u32 {
        let longest = self
            .table
            .rows
            .iter()
            .chain(&self.table.columns)
            .map(|l| l.chars().count())
            .max()
            .unwrap_or(4) as u32;
        longest * 8 + 30
    }

    const CELL: u32 = 62;
}

/// Shade of a row share: white (0) to deep blue (1).
fn shade(share: f64) -> RGBColor {
    let lerp = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * share).round() as u8;
    RGBColor(lerp(0xf7, 0x0b), lerp(0xf9, 0x3d), lerp(0xfc, 0x7a))
}

impl Plot for HeatmapPlot {
    fn size(&self) -> (u32, u32) {
        let lw = self.label_width();
        (
            lw + 40 + Self::CELL * self.table.columns.len() as u32 + 20,
            lw + 40 + Self::CELL * self.table.rows.len() as u32 + 20,
        )
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        s: f64,
    ) -> Result<Vec<Placed>, String> {
        let t = &self.table;
        let lw = self.label_width();
        let p = |v: u32| sz(f64::from(v), s) as i32;
        let (left, top, cell) = (p(lw + 40), p(lw + 40), p(Self::CELL));
        let centre = |h, v| Pos::new(h, v);
        // Axis titles.
        root.draw(&Text::new(
            self.column_title.clone(),
            (left + cell * t.columns.len() as i32 / 2, p(10)),
            font(13.0, s).pos(centre(HPos::Center, VPos::Top)),
        ))
        .map_err(pe)?;
        root.draw(&Text::new(
            self.row_title.clone(),
            (p(10), top + cell * t.rows.len() as i32 / 2),
            font(13.0, s)
                .transform(FontTransform::Rotate270)
                .pos(centre(HPos::Center, VPos::Top)),
        ))
        .map_err(pe)?;
        for (j, c) in t.columns.iter().enumerate() {
            root.draw(&Text::new(
                c.clone(),
                (left + cell * j as i32 + cell / 2, top - p(6)),
                font(12.0, s)
                    .transform(FontTransform::Rotate270)
                    .pos(centre(HPos::Left, VPos::Center)),
            ))
            .map_err(pe)?;
        }
        for (i, r) in t.rows.iter().enumerate() {
            root.draw(&Text::new(
                r.clone(),
                (left - p(6), top + cell * i as i32 + cell / 2),
                font(12.0, s).pos(centre(HPos::Right, VPos::Center)),
            ))
            .map_err(pe)?;
            for (j, &count) in t.counts[i].iter().enumerate() {
                let share = t.shares[i][j];
                let (x0, y0) = (left + cell * j as i32, top + cell * i as i32);
                root.draw(&Rectangle::new(
                    [(x0, y0), (x0 + cell, y0 + cell)],
                    shade(share).filled(),
                ))
                .map_err(pe)?;
                let border = if t.rows[i] == t.columns[j] {
                    INK.stroke_width(sz(2.0, s))
                } else {
                    RGBColor(0xbb, 0xbb, 0xbb).stroke_width(sz(1.0, s))
                };
                root.draw(&Rectangle::new([(x0, y0), (x0 + cell, y0 + cell)], border))
                    .map_err(pe)?;
                let ink = if share > 0.55 { WHITE } else { INK };
                // "none" found as "missed" cannot happen: leave that cell blank.
                let impossible = t.rows[i] == symtrust_eval::confusion::NONE_ROW
                    && t.columns[j] == symtrust_eval::confusion::MISSED_COLUMN;
                root.draw(&Text::new(
                    if impossible {
                        "–".to_string()
                    } else {
                        count.to_string()
                    },
                    (x0 + cell / 2, y0 + cell / 2),
                    (super::FONT, 15.0 * super::EM * s)
                        .into_font()
                        .color(&ink)
                        .pos(centre(HPos::Center, VPos::Center)),
                ))
                .map_err(pe)?;
            }
        }
        Ok(Vec::new())
    }
}
