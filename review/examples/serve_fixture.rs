//! Serves a generated site for the browser benchmark and for trying the page:
//! `cargo run -p symtrust-review --release --example serve_fixture -- [--boxes N]
//! [--paper a1|a3] [--out DIR]`. Prints one JSON line (`url`, `site`, `sheet`) and
//! serves until standard input closes. When `--out DIR` already holds a site
//! (from an earlier run), it is served as it is: a restarted server.
//!
//! The sheet is drawn by the synthetic plant generator at 200 dpi (A1 is 6622 x
//! 4677 px). With `--boxes N` the generator's symbols are proposed as they are
//! and, to reach N boxes, further proposals are laid on a grid over the sheet
//! (scores spread over [0.3, 1)), so the page has N boxes to draw.

use std::io::Read;
use symtrust_labels::atomic::write_atomic;
use symtrust_labels::detections::Detection;
use symtrust_labels::proposals::{MergeOptions, merge_proposals};
use symtrust_labels::raster::encode_png_with_dpi;
use symtrust_labels::sheets::register_sheet;
use symtrust_labels::site::{ClassSpec, Site, SiteConfig};
use symtrust_labels::store::LabelStore;
use symtrust_labels::synth::{self, DraftingStyle, Paper, SynthConfig};
use symtrust_review::{ReviewServer, ReviewSettings};

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let get = |name: &str| {
        args.iter()
            .position(|a| a == name)
            .and_then(|i| args.get(i + 1))
            .cloned()
    };
    let boxes: usize = get("--boxes").map_or(0, |v| v.parse().expect("--boxes N"));
    let paper = match get("--paper").as_deref() {
        None | Some("a1") => Paper::A1,
        Some("a3") => Paper::A3,
        Some(p) => panic!("--paper a1|a3, not {p}"),
    };
    let tmp = tempfile::tempdir().expect("temporary folder");
    let root = get("--out").map_or_else(|| tmp.path().join("site"), std::path::PathBuf::from);
    if root.join("site.toml").exists() {
        let site = Site::open(&root).expect("site");
        let store = LabelStore::new(&site);
        let id = store.sheet_ids().expect("sheets").remove(0);
        let doc = store.load(&id).expect("document");
        serve(site, &root, &doc);
        return;
    }
    let sc = SynthConfig::new(DraftingStyle::A, 5);
    let classes: Vec<ClassSpec> = synth::classes(DraftingStyle::A)
        .into_iter()
        .map(|c| ClassSpec {
            name: c.name,
            description: c.description,
            nominal_mm: c.nominal_mm,
            rotatable: c.rotatable,
        })
        .collect();
    let mut config = SiteConfig::new("Quillmoor benchmark unit", classes.clone());
    config.dpi = sc.dpi;
    let site = Site::create(&root, config).expect("new site");
    let sheet = synth::generate_sheet(&sc, 0, paper);
    let path = site.sheets_dir().join(format!("{}.png", sheet.id));
    write_atomic(
        &path,
        &encode_png_with_dpi(&sheet.image, sc.dpi).expect("png"),
    )
    .expect("write");
    register_sheet(&site, &path).expect("register");
    let store = LabelStore::new(&site);
    let doc = store.load(&sheet.id).expect("document");
    let (w, h) = (f64::from(doc.sheet.width), f64::from(doc.sheet.height));
    let mut dets: Vec<Detection> = sheet
        .symbols
        .iter()
        .take(boxes)
        .enumerate()
        .map(|(i, s)| Detection {
            sheet: sheet.id.clone(),
            class: s.class.clone(),
            score: 0.3 + 0.7 * ((i * 37) % 100) as f64 / 100.0,
            x: s.bbox.x,
            y: s.bbox.y,
            w: s.bbox.w,
            h: s.bbox.h,
        })
        .collect();
    let extra = boxes.saturating_sub(dets.len());
    let cols = ((extra as f64 * w / h).sqrt().ceil() as usize).max(1);
    let rows = extra.div_ceil(cols).max(1);
    let (cw, ch) = (w / cols as f64, h / rows as f64);
    for i in 0..extra {
        let (c, r) = (i % cols, i / cols);
        dets.push(Detection {
            sheet: sheet.id.clone(),
            class: classes[i % classes.len()].name.clone(),
            score: 0.3 + 0.7 * ((i * 61) % 100) as f64 / 100.0,
            x: c as f64 * cw + cw * 0.2,
            y: r as f64 * ch + ch * 0.2,
            w: cw * 0.6,
            h: ch * 0.6,
        });
    }
    let (merged, _) = merge_proposals(
        &doc,
        "bench-model",
        &dets,
        &MergeOptions { duplicate_iou: 1.0 },
        "bench",
        "2026-12-01T00:00:00Z",
    )
    .expect("merge");
    let saved = store.save(&merged, "bench").expect("save");
    serve(site, &root, &saved);
}

/// Serves `site` until standard input closes, after printing the JSON line.
fn serve(site: Site, root: &std::path::Path, doc: &symtrust_labels::document::LabelDocument) {
    let server = ReviewServer::start(site, ReviewSettings::loopback("bench")).expect("server");
    println!(
        "{}",
        serde_json::json!({
            "url": server.url(),
            "site": root,
            "sheet": doc.sheet.id,
            "boxes": doc.symbols.len(),
            "width": doc.sheet.width,
            "height": doc.sheet.height,
        })
    );
    let mut sink = Vec::new();
    let _ = std::io::stdin().read_to_end(&mut sink);
    server.stop();
}
