//! Writing a complete, labelled site of the synthetic plant: `symtrust synth`.
//!
//! Each generated sheet is saved as a PNG carrying its resolution, registered like
//! any scanned sheet, and given a label document whose symbols are the
//! generator's exact ground truth (accepted, origin "imported" from the generator)
//! and whose ignore regions are the title block and legend. The last fifth of the
//! sheets (at least one) is held out.

use crate::clock::now_rfc3339;
use crate::document::{IgnoreRegion, Origin, ReviewState, Symbol};
use crate::error::Result;
use crate::raster::encode_png_with_dpi;
use crate::sheets::register_sheet;
use crate::site::{ClassSpec, Site, SiteConfig};
use crate::store::LabelStore;
use crate::synth::{self, DraftingStyle, SynthConfig};

/// Name of the fictional plant the generator draws.
pub const PLANT_NAME: &str = "Quillmoor Fictional Works";

/// Who the generator's labels are attributed to.
pub const GENERATOR_USER: &str = "symtrust-synth";

/// What to generate.
#[derive(Debug, Clone)]
pub struct PlantRequest {
    /// Number of sheets.
    pub sheets: usize,
    /// Drafting style.
    pub style: DraftingStyle,
    /// Seed of the generator.
    pub seed: u64,
}

/// Number of held-out sheets for a plant of `n` sheets: a fifth, at least one
/// (none for a single sheet, which must train).
pub fn held_out_count(n: usize) -> usize {
    if n < 2 { 0 } else { (n / 5).max(1) }
}

/// Generates the plant into a new site at `out`; calls `on_sheet` after each sheet.
pub fn write_plant(
    out: &std::path::Path,
    req: &PlantRequest,
    on_sheet: &dyn Fn(&str),
) -> Result<Site> {
    let synth_config = SynthConfig::new(req.style, req.seed);
    synth_config.validate()?;
    let classes: Vec<ClassSpec> = synth::classes(req.style)
        .into_iter()
        .map(|c| ClassSpec {
            name: c.name,
            description: c.description,
            nominal_mm: c.nominal_mm,
            rotatable: c.rotatable,
        })
        .collect();
    let style_name = style_name(req.style);
    let mut config = SiteConfig::new(&format!("{PLANT_NAME} (style {style_name})"), classes);
    config.dpi = synth_config.dpi;
    config.seed = req.seed;
    let mut site = Site::create(out, config)?;
    let mut ids = Vec::new();
    for index in 0..req.sheets {
        ids.push(draw_sheet(
            &site,
            &synth_config,
            index,
            synth::default_paper(index),
        )?);
        on_sheet(ids.last().expect("just pushed"));
    }
    let mut config = site.config.clone();
    config.held_out = ids[ids.len() - held_out_count(ids.len())..].to_vec();
    site.save_config(config)?;
    Ok(site)
}

fn style_name(style: DraftingStyle) -> &'static str {
    match style {
        DraftingStyle::A => "a",
        DraftingStyle::B => "b",
    }
}

/// Draws sheet `index` of the generator into `site`: PNG, registration and a
/// label document of accepted ground truth. Returns the sheet id.
fn draw_sheet(
    site: &Site,
    synth_config: &SynthConfig,
    index: usize,
    paper: synth::Paper,
) -> Result<String> {
    let store = LabelStore::new(site);
    let source = format!(
        "synthetic plant generator (style {}, seed {})",
        style_name(synth_config.style),
        synth_config.seed
    );
    let sheet = synth::generate_sheet(synth_config, index, paper);
    let path = site.sheets_dir().join(format!("{}.png", sheet.id));
    crate::atomic::write_atomic(&path, &encode_png_with_dpi(&sheet.image, synth_config.dpi)?)?;
    register_sheet(site, &path)?;
    let mut doc = store.load(&sheet.id)?;
    let at = now_rfc3339();
    for (i, s) in sheet.symbols.iter().enumerate() {
        doc.symbols.push(Symbol {
            id: format!("s{:04}", i + 1),
            class: s.class.clone(),
            bbox: s.bbox,
            state: ReviewState::Accepted,
            origin: Origin::Imported {
                source: source.clone(),
            },
            by: GENERATOR_USER.to_string(),
            at: at.clone(),
        });
    }
    for (i, r) in sheet.ignore.iter().enumerate() {
        doc.ignore.push(IgnoreRegion {
            id: format!("ig{}", i + 1),
            bbox: r.bbox,
            reason: r.reason.clone(),
        });
    }
    store.save(&doc, GENERATOR_USER)?;
    Ok(sheet.id)
}

/// Draws sheets `indices` of another drafting style into an existing site (the
/// site's classes must be the generator's), adding them to the held-out list
/// when `held_out`. Returns their ids. This is how the demo shows a detector
/// meeting a new drafting standard.
pub fn add_style_sheets(
    site: &mut Site,
    style: DraftingStyle,
    seed: u64,
    indices: std::ops::Range<usize>,
    held_out: bool,
    on_sheet: &dyn Fn(&str),
) -> Result<Vec<String>> {
    let synth_config = SynthConfig::new(style, seed);
    synth_config.validate()?;
    let names: Vec<String> = synth::classes(style).into_iter().map(|c| c.name).collect();
    if site.config.class_names() != names {
        return Err(crate::error::LabelError::invalid(
            site.root.join(crate::site::SITE_FILE),
            format!(
                "the site's classes ({}) are not the generator's ({})",
                site.config.class_names().join(", "),
                names.join(", ")
            ),
        ));
    }
    let mut ids = Vec::new();
    for index in indices {
        ids.push(draw_sheet(site, &synth_config, index, synth::Paper::A3)?);
        on_sheet(ids.last().expect("just pushed"));
    }
    if held_out {
        let mut config = site.config.clone();
        config.held_out.extend(ids.iter().cloned());
        site.save_config(config)?;
    }
    Ok(ids)
}
