//! The synthetic plant: labelled P&ID sheets for the demo and the tests.
//!
//! A sheet of a fictional plant of our own is laid out in millimetres (frame,
//! title block, legend, process units, lines, instrument loops, text and
//! look-alike distractors), rasterised at the configured resolution with exact,
//! analytic boxes for the labelled symbols, then degraded like a scan (Kanungo
//! flips, closing, blur, skew, grey paper and noise). Each sheet draws from its
//! own random stream `SeededRng::derive(seed, id)`, so sheet 7 generated alone
//! equals sheet 7 of a batch.

mod degrade;
mod font;
mod layout;
mod paper;
mod raster;
mod style;
mod symbols;

pub use degrade::Degradation;
pub use font::{CHARSET, text_width_mm};
pub use paper::{Paper, default_paper, mm_to_px};
pub use style::{DraftingStyle, Style, lettering_width_mm};
pub use symbols::{ClassSpec, classes};

use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use crate::rng::SeededRng;
use layout::Drawing;
use raster::Mask;

/// Settings of a synthetic batch.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SynthConfig {
    /// Drafting standard of every sheet.
    pub style: DraftingStyle,
    /// Seed of the whole batch.
    pub seed: u64,
    /// Resolution, dots per inch (default 200).
    pub dpi: f64,
    /// Scan simulation ([`Degradation::none`] for clean renders).
    pub degradation: Degradation,
}

impl SynthConfig {
    /// Style and seed at 200 dpi with the default scan degradation.
    pub fn new(style: DraftingStyle, seed: u64) -> Self {
        Self {
            style,
            seed,
            dpi: 200.0,
            degradation: Degradation::default(),
        }
    }

    /// Checks the settings: resolution 50-1200 dpi, probabilities in `[0, 1]`,
    /// decay constants positive, skew at most 10 degrees, grey levels in 0-255.
    pub fn validate(&self) -> Result<()> {
        let d = &self.degradation;
        let bad = |message: String| Err(LabelError::SynthSettings { message });
        if !(self.dpi.is_finite() && (50.0..=1200.0).contains(&self.dpi)) {
            return bad(format!(
                "dpi {} is outside 50-1200; use e.g. --dpi 200",
                self.dpi
            ));
        }
        for (name, v) in [("alpha0", d.alpha0), ("beta0", d.beta0), ("eta", d.eta)] {
            if !(0.0..=1.0).contains(&v) {
                return bad(format!(
                    "degradation {name} = {v} is not a probability in [0, 1]"
                ));
            }
        }
        for (name, v) in [("alpha", d.alpha), ("beta", d.beta)] {
            if !(v.is_finite() && v > 0.0) {
                return bad(format!(
                    "degradation {name} = {v} must be a positive decay constant"
                ));
            }
        }
        if !(0.0..=10.0).contains(&d.max_skew_deg)
            || !(0.0..=5.0).contains(&d.blur_sigma)
            || d.closing > 9
        {
            return bad(format!(
                "degradation skew {} deg (0-10), blur {} px (0-5) or closing {} (0-9) out of range",
                d.max_skew_deg, d.blur_sigma, d.closing
            ));
        }
        for (name, v) in [
            ("paper_level", d.paper_level),
            ("ink_level", d.ink_level),
            ("noise_sd", d.noise_sd),
        ] {
            if !(0.0..=255.0).contains(&v) {
                return bad(format!("degradation {name} = {v} is outside 0-255"));
            }
        }
        Ok(())
    }
}

impl Default for SynthConfig {
    fn default() -> Self {
        Self::new(DraftingStyle::A, 0)
    }
}

/// One labelled symbol of a synthetic sheet.
#[derive(Debug, Clone, PartialEq)]
pub struct SynthSymbol {
    /// Class name (one of [`classes`]).
    pub class: String,
    /// Exact box in final (skewed, degraded) image pixels.
    pub bbox: BBox,
    /// Tag number of an instrument, e.g. `"FIC-101"`.
    pub tag: Option<String>,
}

/// A region whose contents are not labelled (title block, legend).
#[derive(Debug, Clone, PartialEq)]
pub struct IgnoreArea {
    /// The region, final image pixels.
    pub bbox: BBox,
    /// Why it is ignored: `"title block"` or `"legend"`.
    pub reason: String,
}

/// One generated sheet with its ground truth.
#[derive(Debug, Clone)]
pub struct SynthSheet {
    /// Sheet id, e.g. `"fp-a-0003"` (style and index), file-name safe.
    pub id: String,
    /// Paper size.
    pub paper: Paper,
    /// The raster: paper about 255, ink about 0.
    pub image: image::GrayImage,
    /// Labelled symbols, boxes in final image coordinates.
    pub symbols: Vec<SynthSymbol>,
    /// Regions whose contents are not labelled.
    pub ignore: Vec<IgnoreArea>,
    /// The skew applied about the sheet centre, degrees (clockwise on screen).
    pub skew_deg: f64,
}

/// The id of sheet `index` in `style`, e.g. `"fp-a-0003"`.
pub fn sheet_id(style: DraftingStyle, index: usize) -> String {
    format!("fp-{}-{index:04}", style.letter())
}

fn compose(config: &SynthConfig, index: usize, paper: Paper) -> (Drawing, SeededRng, String) {
    let id = sheet_id(config.style, index);
    let mut rng = SeededRng::derive(config.seed, &id);
    let (w_mm, h_mm) = paper.size_mm();
    let st = config.style.spec();
    let s = mm_to_px(1.0, config.dpi);
    let drawing = layout::compose(&st, w_mm, h_mm, paper.size_px(config.dpi), s, &id, &mut rng);
    (drawing, rng, id)
}

/// Rasterises a drawing: everything, or only the labelled symbols.
fn render(drawing: &Drawing, symbols_only: bool) -> Mask {
    let mut m = Mask::new(drawing.width, drawing.height);
    for item in &drawing.items {
        if symbols_only && item.symbol.is_none() {
            continue;
        }
        for p in &item.prims {
            m.draw(p);
        }
    }
    m
}

/// Generates sheet `index` of a batch; deterministic in (seed, index, paper, style).
///
/// # Panics
/// When `config` fails [`SynthConfig::validate`]; callers taking settings from a
/// user validate first and report the error.
pub fn generate_sheet(config: &SynthConfig, index: usize, paper: Paper) -> SynthSheet {
    if let Err(e) = config.validate() {
        panic!("generate_sheet: {e}");
    }
    let (drawing, mut rng, id) = compose(config, index, paper);
    let mask = render(&drawing, false);
    let (image, theta) = degrade::degrade(&mask, &config.degradation, config.dpi, &mut rng);
    let c = (
        f64::from(drawing.width) / 2.0,
        f64::from(drawing.height) / 2.0,
    );
    let moved = |b: &BBox| {
        if theta == 0.0 {
            *b
        } else {
            degrade::rotate_box(b, theta, c)
        }
    };
    SynthSheet {
        id,
        paper,
        image,
        symbols: drawing
            .symbols
            .iter()
            .map(|s| SynthSymbol {
                class: s.class.name().to_string(),
                bbox: moved(&s.bbox),
                tag: s.tag.clone(),
            })
            .collect(),
        ignore: drawing
            .ignore
            .iter()
            .map(|(b, r)| IgnoreArea {
                bbox: moved(b),
                reason: r.clone(),
            })
            .collect(),
        skew_deg: theta.to_degrees(),
    }
}

#[cfg(test)]
mod tests;
