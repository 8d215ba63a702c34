//! Wiring shared by `detect`, `eval` and `nightly`: check that a model fits the
//! site, sweep it over one sheet (trainer) and turn its score planes into
//! detections (eval).

use crate::context::UsageError;
use anyhow::Context as _;
use image::GrayImage;
use std::path::Path;
use symtrust_eval::nms::NmsScope;
use symtrust_eval::peaks::{BoxSize, DetectConfig, ScoreGrid, detect};
use symtrust_eval::record::DetectSettings;
use symtrust_labels::crops::BACKGROUND;
use symtrust_labels::detections::Detection;
use symtrust_labels::document::LabelDocument;
use symtrust_labels::site::Site;
use symtrust_trainer::{Classifier, ScoreMapOptions};

/// Refuses a model whose classes or window differ from the site's.
pub fn check_model(site: &Site, classifier: &Classifier, dir: &Path) -> anyhow::Result<()> {
    let mut expected = site.config.class_names();
    expected.push(BACKGROUND.to_string());
    if classifier.classes != expected {
        return Err(UsageError(format!(
            "{}: the model's classes ({}) are not the site's ({}); train a model for this site",
            dir.display(),
            classifier.classes.join(", "),
            expected.join(", ")
        ))
        .into());
    }
    if classifier.window() != site.config.window as usize {
        return Err(UsageError(format!(
            "{}: the model's window is {} px but the site's is {}",
            dir.display(),
            classifier.window(),
            site.config.window
        ))
        .into());
    }
    Ok(())
}

/// Checks detection settings given on the command line.
pub fn check_settings(settings: &DetectSettings) -> anyhow::Result<()> {
    if !(0.0..=1.0).contains(&settings.min_score) || !(0.0..=1.0).contains(&settings.nms_iou) {
        return Err(UsageError("--min-score and --nms-iou must lie in [0, 1]".into()).into());
    }
    if settings.max_per_sheet == Some(0) {
        return Err(UsageError("--max-per-sheet must be at least 1".into()).into());
    }
    Ok(())
}

/// One sheet's sweep.
#[derive(Debug, Clone)]
pub struct SheetSweep {
    /// Detections, highest score first.
    pub detections: Vec<Detection>,
    /// Window positions in the score map.
    pub windows: u64,
    /// Of those, windows on blank paper given background without running the network.
    pub skipped: u64,
    /// The blank-paper threshold applied (`None`: every window computed).
    pub skip_below_ink: Option<f64>,
    /// Detections dropped by the per-sheet cap.
    pub capped: usize,
}

/// Sweeps `classifier` over one loaded sheet and finds its detections.
pub fn sweep_sheet(
    site: &Site,
    classifier: &Classifier,
    doc: &LabelDocument,
    img: &GrayImage,
    settings: &DetectSettings,
) -> anyhow::Result<SheetSweep> {
    let id = &doc.sheet.id;
    let site_classes = site.config.class_names();
    let opts = ScoreMapOptions::native(classifier);
    let map = classifier
        .score_map_image(img, &opts)
        .with_context(|| format!("sweeping sheet {id}"))?;
    let k = map.classes.len();
    let planes: Vec<Vec<f32>> = (0..site_classes.len())
        .map(|c| map.scores.iter().skip(c).step_by(k).copied().collect())
        .collect();
    let grid = ScoreGrid {
        rows: map.rows,
        cols: map.cols,
        stride: map.stride as u32,
        window: map.window as u32,
        planes,
    };
    let nominal: Vec<(f64, f64)> = site
        .config
        .classes
        .iter()
        .map(|c| {
            let px = site.config.nominal_pixels(c);
            (px, px)
        })
        .collect();
    let config = DetectConfig {
        min_score: settings.min_score,
        nms_iou: settings.nms_iou,
        nms_scope: if settings.nms_across_classes {
            NmsScope::AcrossClasses
        } else {
            NmsScope::PerClass
        },
        box_size: BoxSize::Nominal(nominal),
        ignore: doc.ignore.iter().map(|r| r.bbox).collect(),
    };
    let mut found = detect(id, &grid, &site_classes, &config)?;
    found.sort_by(|a, b| b.score.total_cmp(&a.score));
    let mut capped = 0;
    if let Some(cap) = settings.max_per_sheet
        && found.len() > cap
    {
        capped = found.len() - cap;
        found.truncate(cap);
    }
    Ok(SheetSweep {
        detections: found,
        windows: (map.rows * map.cols) as u64,
        skipped: map.skipped as u64,
        skip_below_ink: map.skip_below_ink,
        capped,
    })
}

/// Ground-truth symbols whose centred window is blank enough to be skipped
/// (ink fraction below `threshold`): each would be missed by skipping alone.
pub fn truths_on_blank(
    img: &GrayImage,
    truths: &[symtrust_labels::BBox],
    window: u32,
    threshold: f64,
) -> u64 {
    truths
        .iter()
        .filter(|b| {
            let (cx, cy) = b.center();
            let crop = symtrust_labels::crops::cut_window(
                img,
                symtrust_labels::Window::centered_on(cx, cy, window),
            );
            symtrust_trainer::blank::ink_fraction(crop.as_raw()) < threshold
        })
        .count() as u64
}
