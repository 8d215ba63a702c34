//! Every figure and table of a report agrees with `metrics.json`: the numbers
//! each figure was drawn from are held against the record, and where possible
//! against an independent recount from the record's match log (every
//! detection's fate, every symbol's finding score), which the figures do not use.

mod common;

use symtrust_eval::match_log::MatchKind;
use symtrust_reports::plot::Drawn;
use symtrust_reports::{EvaluationInput, Report, ReportRequest};

fn build(f: &common::Fixture) -> (Report, tempfile::TempDir) {
    let staging = tempfile::tempdir().unwrap();
    let req = ReportRequest::new(
        EvaluationInput {
            dir: f.eval_dir.clone(),
            site_root: f.site.clone(),
            title: None,
        },
        f.tmp.path().join("out"),
    );
    (
        symtrust_reports::build(&req, staging.path(), &|_| {}).unwrap(),
        staging,
    )
}

/// Pixel positions of every `<circle>` in an SVG.
fn circles(svg: &str) -> Vec<(i32, i32)> {
    let attr = |tag: &str, name: &str| -> Option<i32> {
        let k = tag.find(&format!(" {name}=\""))? + name.len() + 3;
        tag[k..]
            .split('"')
            .next()?
            .parse::<f64>()
            .ok()
            .map(|v| v.round() as i32)
    };
    svg.split("<circle")
        .skip(1)
        .filter_map(|t| {
            let tag = t.split('>').next()?;
            Some((attr(tag, "cx")?, attr(tag, "cy")?))
        })
        .collect()
}

#[test]
fn pr_operating_points_are_the_table_values_and_sit_on_the_curve() {
    let f = common::fixture();
    let (report, _s) = build(&f);
    let e = &f.record.sheet_level;
    let t = e
        .operating_threshold
        .expect("the fair detector has an operating point");
    let fig = report.figure("pr-curves").unwrap();
    let Drawn::Pr(d) = &fig.drawn else {
        panic!("not a PR figure")
    };
    assert_eq!(d.panels.len(), 1 + f.record.classes.len());
    // Pooled panel: the micro operating point and its intervals.
    let op = e.operating.unwrap();
    let pooled = &d.panels[0].series[0];
    assert_eq!(pooled.operating, Some((op.recall, op.precision)));
    let iv = e.intervals.as_ref().unwrap();
    let b = pooled.interval.unwrap();
    assert_eq!(
        b.precision_lower,
        iv.precision_at_operating.unwrap().lower.unwrap()
    );
    assert_eq!(
        b.recall_upper,
        iv.recall_at_operating.unwrap().upper.unwrap()
    );
    // Per class: the drawn point is the per-class table's, and it is the point of
    // the class curve at the threshold, recounted from the match log.
    let ops = e.class_operating.as_ref().unwrap();
    for (k, class) in f.record.classes.iter().enumerate() {
        let s = &d.panels[k + 1].series[0];
        let row = ops.iter().find(|o| o.class == *class).unwrap();
        let kept: Vec<_> = f
            .record
            .matches
            .detections
            .iter()
            .filter(|m| m.class == *class && m.score >= t)
            .collect();
        let hits = kept.iter().filter(|m| m.kind == MatchKind::Hit).count() as f64;
        let truths = f
            .record
            .matches
            .truths
            .iter()
            .filter(|m| m.class == *class)
            .count() as f64;
        if kept.is_empty() {
            assert_eq!(
                s.operating, None,
                "{class}: precision undefined, nothing drawn"
            );
            continue;
        }
        let (r, p) = s.operating.unwrap();
        assert_eq!((Some(r), Some(p)), (row.recall, row.precision), "{class}");
        assert!(
            (p - hits / kept.len() as f64).abs() < 1e-12,
            "{class}: precision recount"
        );
        assert!((r - hits / truths).abs() < 1e-12, "{class}: recall recount");
        // The curve's own point at the threshold (ranked list) agrees too.
        let at = e.per_class[k].figures.pr.at_threshold(t).unwrap();
        assert_eq!((at.recall, at.precision), (r, p), "{class}: on the curve");
        let bx = s.interval.unwrap();
        assert_eq!(
            bx.precision_upper,
            row.precision_interval.unwrap().upper.unwrap()
        );
        assert!(
            bx.recall_lower <= r && r <= bx.recall_upper,
            "{class}: point in its box"
        );
    }
    // Every operating point placed is a circle in the SVG at that pixel.
    let cs = circles(&fig.svg);
    assert!(!d.placed.is_empty());
    for p in &d.placed {
        assert!(
            cs.contains(&(p.px, p.py)),
            "no circle at {:?} for {}",
            (p.px, p.py),
            p.what
        );
    }
    // And the pixel is where the axes put the value: recall 0-1 maps left to
    // right, precision 0-1 bottom to top, so larger recall lies further right.
    let mut by_x: Vec<_> = d.placed.iter().collect();
    by_x.sort_by(|a, b| a.x.total_cmp(&b.x));
    let first_panel: Vec<_> = d
        .placed
        .iter()
        .filter(|p| p.what.contains("All classes"))
        .collect();
    assert_eq!(first_panel.len(), 1);
}

#[test]
fn heat_maps_hold_the_confusion_counts() {
    let f = common::fixture();
    let (report, _s) = build(&f);
    let e = &f.record.sheet_level;
    let t = e.operating_threshold.unwrap();
    let Drawn::Heatmap(h) = &report.figure("detection-confusion").unwrap().drawn else {
        panic!()
    };
    let c = e.detection_confusion.as_ref().unwrap();
    assert_eq!(
        (&h.rows, &h.columns, &h.counts),
        (&c.rows, &c.columns, &c.counts)
    );
    // Recount from the match log: each class row sums to its labelled symbols,
    // each class column to its detections kept at the threshold.
    for (k, class) in f.record.classes.iter().enumerate() {
        let truths = f
            .record
            .matches
            .truths
            .iter()
            .filter(|m| m.class == *class)
            .count() as u64;
        assert_eq!(h.counts[k].iter().sum::<u64>(), truths, "{class} row");
        let kept = f
            .record
            .matches
            .detections
            .iter()
            .filter(|m| m.class == *class && m.score >= t)
            .count() as u64;
        assert_eq!(
            h.counts.iter().map(|r| r[k]).sum::<u64>(),
            kept,
            "{class} column"
        );
        // Shares are what is shaded: each row's shares add to one.
        let s: f64 = h.shares[k].iter().sum();
        assert!(truths == 0 || (s - 1.0).abs() < 1e-9);
    }
    // Each count is printed in the SVG.
    let svg = &report.figure("detection-confusion").unwrap().svg;
    let texts: Vec<&str> = svg
        .split("<text")
        .skip(1)
        .filter_map(|t| Some(t.split_once('>')?.1.split("</text>").next()?.trim()))
        .collect();
    for n in c.counts.iter().flatten() {
        assert!(
            texts.contains(&n.to_string().as_str()),
            "count {n} not printed"
        );
    }
    let Drawn::Heatmap(hc) = &report.figure("crop-confusion").unwrap().drawn else {
        panic!()
    };
    let cl = f.record.crop_level.as_ref().unwrap();
    assert_eq!(hc.counts, cl.evaluation.confusion.counts);
    assert_eq!(
        hc.counts.iter().flatten().sum::<u64>(),
        cl.crops.len() as u64
    );
}

#[test]
fn reliability_bins_are_the_record_and_the_recount() {
    let f = common::fixture();
    let (report, _s) = build(&f);
    let Drawn::Reliability(d) = &report.figure("reliability").unwrap().drawn else {
        panic!()
    };
    let fit = f
        .record
        .calibration_fit
        .as_ref()
        .expect("fixture fits a calibration");
    assert_eq!(d.curves.len(), 2, "before and after calibration");
    assert_eq!(d.curves[0].ece, fit.held_out_raw.ece);
    assert_eq!(d.curves[1].brier, fit.held_out_scaled.brier);
    // Recount the raw bins from the match log: score in [k/10, (k+1)/10) (the
    // last bin closed), mean score and share of hits.
    for (k, b) in d.curves[0].bins.iter().enumerate() {
        let inside: Vec<_> = f
            .record
            .matches
            .detections
            .iter()
            .filter(|m| ((m.score * 10.0).floor() as usize).min(9) == k)
            .collect();
        assert_eq!(b.count, inside.len() as u64, "bin {k}");
        if let (Some(ms), Some(obs)) = (b.mean_score, b.observed) {
            let mean = inside.iter().map(|m| m.score).sum::<f64>() / inside.len() as f64;
            let hit = inside.iter().filter(|m| m.kind == MatchKind::Hit).count() as f64
                / inside.len() as f64;
            assert!(
                (ms - mean).abs() < 1e-12 && (obs - hit).abs() < 1e-12,
                "bin {k}"
            );
        }
    }
    // ECE recomputed from the drawn bins: count-weighted mean |observed - mean|.
    let c = &d.curves[0];
    let n: u64 = c.bins.iter().map(|b| b.count).sum();
    let ece: f64 = c
        .bins
        .iter()
        .filter_map(|b| Some(b.count as f64 / n as f64 * (b.observed? - b.mean_score?).abs()))
        .sum();
    assert!((ece - c.ece).abs() < 1e-12);
}

#[test]
fn iou_sweep_sheet_ranking_and_training_curves_agree() {
    let f = common::fixture();
    let (report, _s) = build(&f);
    let e = &f.record.sheet_level;
    let Drawn::Lines(d) = &report.figure("iou-sweep").unwrap().drawn else {
        panic!()
    };
    let map: Vec<(f64, Option<f64>)> = e
        .iou_sweep
        .iter()
        .map(|r| (r.min_iou, r.map_all_point))
        .collect();
    assert_eq!(d.panels[0].series[0].points, map);
    assert_eq!(d.panels[0].marker.as_ref().unwrap().0, 0.5);
    // At IoU 0.5 (the matching used) the sweep repeats the headline mAP.
    let half = d.panels[0].series[0]
        .points
        .iter()
        .find(|p| p.0 == 0.5)
        .unwrap();
    assert_eq!(half.1, e.map_all_point);
    // Sheets: bars recounted from the match log, worst first.
    let t = e.operating_threshold.unwrap();
    let Drawn::Bars(b) = &report.figure("sheet-errors").unwrap().drawn else {
        panic!()
    };
    assert_eq!(b.bars.len(), f.record.sheets.len());
    for bar in &b.bars {
        let misses = f
            .record
            .matches
            .truths
            .iter()
            .filter(|m| m.sheet == bar.sheet && m.missed_at(t))
            .count() as u64;
        let fa = f
            .record
            .matches
            .detections
            .iter()
            .filter(|m| m.sheet == bar.sheet && m.score >= t && m.kind != MatchKind::Hit)
            .count() as u64;
        assert_eq!(
            (bar.misses, bar.false_alarms),
            (misses, fa),
            "{}",
            bar.sheet
        );
    }
    assert!(
        b.bars
            .windows(2)
            .all(|w| w[0].misses + w[0].false_alarms >= w[1].misses + w[1].false_alarms)
    );
    // Training: the epochs.csv the fixture wrote (loss 1.6/epoch).
    let Drawn::Lines(tr) = &report.figure("training").unwrap().drawn else {
        panic!()
    };
    let train = &tr.panels[0].series[0].points;
    assert_eq!(train.len(), 8);
    assert_eq!(train[1], (2.0, Some(0.8)));
}

#[test]
fn tables_agree_with_the_record() {
    let f = common::fixture();
    let (report, _s) = build(&f);
    let e = &f.record.sheet_level;
    let csv = |id: &str| -> Vec<Vec<String>> {
        let t = report.csv.iter().find(|t| t.id == id).unwrap();
        let bytes = t.to_csv().unwrap();
        let mut r = csv_rows(&bytes);
        r.remove(0);
        r
    };
    let per_class = csv("per_class");
    for (row, c) in per_class.iter().zip(&e.per_class) {
        assert_eq!(row[0], c.class);
        assert_eq!(row[1].parse::<u64>().unwrap(), c.figures.n_truths);
        assert_eq!(row[3].parse::<f64>().ok(), c.figures.ap.all_point);
        assert_eq!(row[6].parse::<f64>().ok(), c.figures.ap.points_101);
        let op = e
            .class_operating
            .as_ref()
            .unwrap()
            .iter()
            .find(|o| o.class == c.class)
            .unwrap();
        assert_eq!(row[12].parse::<f64>().ok(), op.precision);
        assert_eq!(row[15].parse::<f64>().ok(), op.recall);
        assert_eq!(row[18].parse::<f64>().ok(), op.f1);
    }
    // The people's table shows the same values as percentages.
    for (row, c) in report.per_class.rows.iter().zip(&e.per_class) {
        let ap = c
            .figures
            .ap
            .all_point
            .map(|v| format!("{:.1}%", 100.0 * v))
            .unwrap_or("–".into());
        assert!(row[2].starts_with(&ap), "{} vs {ap}", row[2]);
    }
    let pooled = report.per_class.rows.last().unwrap();
    assert!(pooled[4].starts_with(&format!("{:.1}%", 100.0 * e.operating.unwrap().precision)));
    let per_sheet = csv("per_sheet");
    for (row, s) in per_sheet.iter().zip(e.per_sheet.as_ref().unwrap()) {
        assert_eq!(row[0], s.sheet);
        assert_eq!(row[4].parse::<u64>().unwrap(), s.false_alarms);
        assert_eq!(row[6].parse::<u64>().unwrap(), s.misses);
    }
    let conf = csv("detection_confusion");
    let c = e.detection_confusion.as_ref().unwrap();
    for (row, counts) in conf.iter().zip(&c.counts) {
        let got: Vec<u64> = row[1..].iter().map(|v| v.parse().unwrap()).collect();
        assert_eq!(&got, counts);
    }
    assert_eq!(csv("detections").len(), f.record.matches.detections.len());
    assert_eq!(csv("symbols").len(), f.record.matches.truths.len());
}

fn csv_rows(bytes: &[u8]) -> Vec<Vec<String>> {
    let mut r = csv_reader(bytes);
    r.records()
        .map(|x| x.unwrap().iter().map(str::to_string).collect())
        .collect()
}

fn csv_reader(bytes: &[u8]) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        .from_reader(bytes)
}

#[test]
fn galleries_are_worst_first_and_capped() {
    let f = common::fixture();
    let (report, _s) = build(&f);
    let t = f.record.sheet_level.operating_threshold.unwrap();
    let fa_total = f
        .record
        .matches
        .detections
        .iter()
        .filter(|m| m.score >= t && m.kind != MatchKind::Hit)
        .count();
    let miss_total = f
        .record
        .matches
        .truths
        .iter()
        .filter(|m| m.missed_at(t))
        .count();
    assert_eq!(report.error_totals, (fa_total, miss_total));
    assert!(
        fa_total > 0 && miss_total > 0,
        "the fixture has errors to show"
    );
    assert_eq!(
        report.false_alarms.len(),
        fa_total.min(symtrust_reports::DEFAULT_GALLERY_CAP)
    );
    assert!(
        report
            .false_alarms
            .windows(2)
            .all(|w| w[0].score >= w[1].score)
    );
    // Misses never found by any detection come first.
    let first_found = report
        .misses
        .iter()
        .position(|m| m.score.is_some())
        .unwrap_or(report.misses.len());
    assert!(
        report.misses[first_found..]
            .iter()
            .all(|m| m.score.is_some())
    );
    assert!(report.misses.iter().all(|m| !m.png.is_empty()));
}
