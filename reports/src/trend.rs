//! The nightly trend: AP per class of the model in service after each run of
//! `history.csv`, and the champion's and challenger's mAP side by side, so a
//! team sees at a glance whether reviewing labels has paid off.

use crate::error::{ReportError, Result};
use crate::plot::lines::{LinePanel, LineSeries, LinesDrawn, LinesPlot};
use crate::plot::{Drawn, Figure, render};
use std::path::{Path, PathBuf};
use symtrust_labels::atomic::write_atomic;
use symtrust_labels::nightly::history::HistoryRow;

/// File stem of the trend figure at the site root (`.svg` and `.png`).
pub const TREND_STEM: &str = "history-trend";

/// AP per class of the model in service after a run: the challenger's when it
/// was promoted, else the champion's (both were measured on the same sheets).
pub fn in_service(row: &HistoryRow) -> Vec<Option<f64>> {
    row.per_class
        .iter()
        .map(|(champion, challenger)| {
            if row.outcome == "promoted" {
                challenger.ap
            } else {
                champion.ap
            }
        })
        .collect()
}

/// The trend figure of a history (one point per run, run 1 first).
pub fn trend_figure(classes: &[String], rows: &[HistoryRow]) -> Result<Figure> {
    if rows.is_empty() {
        return Err(ReportError::Plot {
            figure: TREND_STEM.into(),
            message: "the history has no runs yet".into(),
        });
    }
    let x = |i: usize| (i + 1) as f64;
    let x_range = (0.5, rows.len() as f64 + 0.5);
    let per_class: Vec<LineSeries> = classes
        .iter()
        .enumerate()
        .map(|(k, name)| LineSeries {
            name: name.clone(),
            points: rows
                .iter()
                .enumerate()
                .map(|(i, r)| (x(i), in_service(r).get(k).copied().flatten()))
                .collect(),
        })
        .collect();
    let maps = vec![
        LineSeries {
            name: "champion".into(),
            points: rows
                .iter()
                .enumerate()
                .map(|(i, r)| (x(i), r.map_champion))
                .collect(),
        },
        LineSeries {
            name: "challenger".into(),
            points: rows
                .iter()
                .enumerate()
                .map(|(i, r)| (x(i), r.map_challenger))
                .collect(),
        },
    ];
    let plot = LinesPlot {
        panels: vec![
            LinePanel {
                title: "AP per class of the model in service".into(),
                x_desc: "Nightly run (1 = first)".into(),
                y_desc: "Average precision, all-point (%)".into(),
                x_range,
                y_range: (0.0, 1.0001),
                y_percent: true,
                series: per_class,
                marker: None,
                legend_low: true,
                x_whole: true,
            },
            LinePanel {
                title: "mAP: champion and challenger".into(),
                x_desc: "Nightly run (1 = first)".into(),
                y_desc: "Mean AP over classes (%)".into(),
                x_range,
                y_range: (0.0, 1.0001),
                y_percent: true,
                series: maps,
                marker: None,
                legend_low: true,
                x_whole: true,
            },
        ],
        panel_size: (460, 380),
    };
    let (svg, png, placed) = render(TREND_STEM, &plot)?;
    let promoted = rows.iter().filter(|r| r.outcome == "promoted").count();
    Ok(Figure {
        id: TREND_STEM.into(),
        title: "Nightly retraining over time".into(),
        caption: format!(
            "{} runs, {promoted} promoted. Left: each class's AP on the held-out sheets of the model in service after each run. Right: the champion's and the challenger's mAP as measured in each run on the same frozen held-out sheets; a rejected challenger leaves the champion in service.",
            rows.len()
        ),
        svg,
        png,
        drawn: Drawn::Lines(LinesDrawn {
            panels: plot.panels,
            placed,
        }),
    })
}

/// Writes `<dir>/history-trend.svg` and `.png` atomically; returns both paths.
pub fn write_trend(dir: &Path, figure: &Figure) -> Result<(PathBuf, PathBuf)> {
    let svg = dir.join(format!("{TREND_STEM}.svg"));
    let png = dir.join(format!("{TREND_STEM}.png"));
    write_atomic(&svg, figure.svg.as_bytes())?;
    write_atomic(&png, &figure.png)?;
    Ok((svg, png))
}

#[cfg(test)]
mod tests {
    use super::*;
    use symtrust_labels::nightly::history::ApCell;

    fn row(outcome: &str, champion: Option<f64>, challenger: f64) -> HistoryRow {
        HistoryRow {
            run: format!("r-{outcome}-{challenger}"),
            started: "2026-12-02T01:30:00Z".into(),
            seconds: 60.0,
            trigger: "labels changed".into(),
            sheets_changed: 1,
            accepted_labels: 100,
            crop_library: "lib".into(),
            champion: "old".into(),
            challenger: "new".into(),
            outcome: outcome.into(),
            reason: String::new(),
            map_champion: champion,
            map_challenger: Some(challenger),
            per_class: vec![(
                ApCell {
                    ap: champion,
                    lo: None,
                    hi: None,
                },
                ApCell {
                    ap: Some(challenger),
                    lo: None,
                    hi: None,
                },
            )],
        }
    }

    #[test]
    fn the_line_follows_the_model_in_service() {
        let rows = vec![
            row("promoted", None, 0.6),
            row("promoted", Some(0.6), 0.8),
            row("rejected", Some(0.8), 0.3),
        ];
        let fig = trend_figure(&["pump".to_string()], &rows).unwrap();
        let Drawn::Lines(d) = &fig.drawn else {
            panic!("a line figure");
        };
        // A rejected challenger (0.3) does not pull the in-service line down.
        let pts: Vec<Option<f64>> = d.panels[0].series[0].points.iter().map(|p| p.1).collect();
        assert_eq!(pts, [Some(0.6), Some(0.8), Some(0.8)]);
        assert_eq!(d.panels[1].series[1].points[2].1, Some(0.3));
        assert!(fig.svg.starts_with("<svg"));
        assert!(fig.png.starts_with(&[0x89, b'P', b'N', b'G']));
        assert!(trend_figure(&["pump".to_string()], &[]).is_err());
    }
}
