//! Generates synthetic sheets, times them and writes previews under a folder
//! (default `/tmp/synth-preview`): a downscaled whole sheet, a 1:1 crop around
//! the first symbol, and one 120 px crop per labelled class (shown 3x).
//!
//! `cargo run -p symtrust-labels --release --example synth_preview -- [OUT] [SEED]`

use std::time::Instant;
use symtrust_labels::synth::{Degradation, DraftingStyle, Paper, SynthConfig, generate_sheet};

fn main() {
    let mut args = std::env::args().skip(1);
    let out = std::path::PathBuf::from(args.next().unwrap_or_else(|| "/tmp/synth-preview".into()));
    let seed: u64 = args
        .next()
        .map_or(1, |s| s.parse().expect("seed is an integer"));
    std::fs::create_dir_all(&out).expect("create output folder");
    for (style, paper, index) in [
        (DraftingStyle::A, Paper::A3, 0),
        (DraftingStyle::B, Paper::A3, 1),
        (DraftingStyle::A, Paper::A1, 3),
        (DraftingStyle::B, Paper::A1, 7),
    ] {
        let cfg = SynthConfig::new(style, seed);
        let clean_cfg = SynthConfig {
            degradation: Degradation::none(),
            ..cfg
        };
        let t = Instant::now();
        let _ = generate_sheet(&clean_cfg, index, paper);
        let clean_secs = t.elapsed().as_secs_f64();
        let t = Instant::now();
        let sheet = generate_sheet(&cfg, index, paper);
        let secs = t.elapsed().as_secs_f64();
        let (w, h) = sheet.image.dimensions();
        println!(
            "{} {:?} {}x{} px: {} symbols, skew {:.2} deg, {:.3} s scanned ({:.3} s clean)",
            sheet.id,
            paper,
            w,
            h,
            sheet.symbols.len(),
            sheet.skew_deg,
            secs,
            clean_secs
        );
        let small = image::imageops::resize(
            &sheet.image,
            1600,
            (1600.0 * f64::from(h) / f64::from(w)) as u32,
            image::imageops::FilterType::Triangle,
        );
        small
            .save(out.join(format!("{}-sheet.png", sheet.id)))
            .expect("save");
        if let Some(s) = sheet.symbols.first() {
            let x = (s.bbox.x as u32).saturating_sub(300).min(w - 900);
            let y = (s.bbox.y as u32).saturating_sub(300).min(h - 700);
            let crop = image::imageops::crop_imm(&sheet.image, x, y, 900, 700).to_image();
            crop.save(out.join(format!("{}-area.png", sheet.id)))
                .expect("save");
        }
        let mut seen = std::collections::HashSet::new();
        for s in &sheet.symbols {
            if !seen.insert(s.class.clone()) {
                continue;
            }
            let (cx, cy) = s.bbox.center();
            let x = ((cx - 60.0).max(0.0) as u32).min(w - 120);
            let y = ((cy - 60.0).max(0.0) as u32).min(h - 120);
            let crop = image::imageops::crop_imm(&sheet.image, x, y, 120, 120).to_image();
            let big =
                image::imageops::resize(&crop, 360, 360, image::imageops::FilterType::Nearest);
            big.save(out.join(format!("{}-{}.png", sheet.id, s.class)))
                .expect("save");
        }
    }
}
