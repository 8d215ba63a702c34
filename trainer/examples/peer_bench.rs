//! Speed figures of the trainer for `bench/peer.sh` (a benchmark, not a test).
//!
//! ```text
//! cargo run --release -p symtrust-trainer --example peer_bench -- train  WINDOW BATCH STEPS
//! cargo run --release -p symtrust-trainer --example peer_bench -- sweep  WIDTH HEIGHT STRIDE SUBSET
//! cargo run --release -p symtrust-trainer --example peer_bench -- memory WIDTH HEIGHT STRIDE
//! ```
//!
//! Each prints one JSON line. Data are built before the timed code from a fixed
//! seed: random weights of the default architecture, random crops, and a sheet
//! of paper with random line work. `train` times optimiser steps on the real
//! training path (augmentation, weighted loss, AdamW); `sweep` times the
//! fully-convolutional score map over the whole sheet and per-window
//! classification of `SUBSET` windows of the same grid, and extrapolates the
//! per-window time to the whole grid; `memory` runs one sweep and reports the
//! process's peak resident memory (VmHWM).

use candle_core::DType;
use std::time::Instant;
use symtrust_labels::SeededRng;
use symtrust_labels::site::ModelSettings;
use symtrust_trainer::data::{DataSource, Sample};
use symtrust_trainer::model::Network;
use symtrust_trainer::scoremap::grid_size;
use symtrust_trainer::train::Silent;
use symtrust_trainer::{Architecture, Classifier, Dataset, ScoreMapOptions, TrainOptions, train};

fn arg(args: &[String], i: usize) -> usize {
    args.get(i).and_then(|a| a.parse().ok()).unwrap_or_else(|| {
        eprintln!("usage: peer_bench train WINDOW BATCH STEPS | sweep WIDTH HEIGHT STRIDE SUBSET | memory WIDTH HEIGHT STRIDE");
        std::process::exit(2)
    })
}

fn sheet(width: usize, height: usize, seed: u64) -> Vec<u8> {
    let mut rng = SeededRng::new(seed);
    let mut px = vec![255u8; width * height];
    for _ in 0..(width * height) / 4000 {
        let (x, y) = (
            rng.below(width as u64) as usize,
            rng.below(height as u64) as usize,
        );
        let len = 20 + rng.below(200) as usize;
        let horizontal = rng.chance(0.5);
        for d in 0..len {
            let (cx, cy) = if horizontal { (x + d, y) } else { (x, y + d) };
            if cx < width && cy < height {
                px[cy * width + cx] = 0;
            }
        }
    }
    px
}

fn peak_rss_kib() -> u64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1).and_then(|v| v.parse().ok()))
        })
        .unwrap_or(0)
}

fn classifier(window: usize) -> Classifier {
    let arch = Architecture::from_settings(&ModelSettings::default(), window, 4)
        .expect("default architecture");
    let net = Network::init(&arch, 1, DType::F32).expect("weights");
    Classifier::from_network(net, (0..4).map(|i| format!("c{i}")).collect()).expect("classifier")
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let threads = symtrust_trainer::threads();
    match args.get(1).map(String::as_str) {
        Some("train") => {
            let (window, batch, steps) = (arg(&args, 2), arg(&args, 3), arg(&args, 4));
            let mut rng = SeededRng::new(2);
            let mut samples = |n: usize| -> Vec<Sample> {
                (0..n)
                    .map(|i| Sample {
                        pixels: (0..window * window)
                            .map(|_| if rng.chance(0.1) { 0 } else { 255 })
                            .collect(),
                        class: i % 4,
                    })
                    .collect()
            };
            let data = Dataset {
                classes: (0..4).map(|i| format!("c{i}")).collect(),
                rotatable: vec![false; 4],
                window,
                train: samples(batch * steps),
                validation: samples(batch),
                source: DataSource {
                    crop_library: "bench".into(),
                    manifest_sha256: String::new(),
                    index_sha256: String::new(),
                    dpi: 200.0,
                },
            };
            let arch = Architecture::from_settings(&ModelSettings::default(), window, 4)
                .expect("architecture");
            let opts = TrainOptions {
                epochs: 1,
                batch_size: batch,
                learning_rate: 1e-3,
                weight_decay: 1e-4,
                patience: 0,
                seed: 1,
                augment: true,
            };
            let t = Instant::now();
            train(&data, &arch, &opts, None, false, &mut Silent).expect("training");
            let secs = t.elapsed().as_secs_f64();
            println!(
                "{{\"mode\":\"train\",\"window\":{window},\"batch\":{batch},\"steps\":{steps},\"threads\":{threads},\"seconds\":{secs:.3},\"samples_per_s\":{:.2}}}",
                (batch * steps) as f64 / secs
            );
        }
        Some("sweep") => {
            let (w, h, stride, subset) =
                (arg(&args, 2), arg(&args, 3), arg(&args, 4), arg(&args, 5));
            let clf = classifier(100);
            let px = sheet(w, h, 3);
            let opts = ScoreMapOptions {
                stride,
                ..ScoreMapOptions::native(&clf)
            };
            let t = Instant::now();
            let map = clf.score_map(&px, w, h, &opts).expect("score map");
            let sweep = t.elapsed().as_secs_f64();
            let (cols, rows) = grid_size(w, h, 100, stride);
            let mut rng = SeededRng::new(4);
            let windows: Vec<Vec<u8>> = (0..subset)
                .map(|_| {
                    let (r, c) = (
                        rng.below(rows as u64) as usize,
                        rng.below(cols as u64) as usize,
                    );
                    let (x, y) = (c * stride, r * stride);
                    (y..y + 100)
                        .flat_map(|yy| px[yy * w + x..yy * w + x + 100].iter().copied())
                        .collect()
                })
                .collect();
            let refs: Vec<&[u8]> = windows.iter().map(Vec::as_slice).collect();
            let t = Instant::now();
            clf.classify(&refs).expect("classify");
            let per_window = t.elapsed().as_secs_f64() / subset as f64;
            let cells = map.rows * map.cols;
            println!(
                "{{\"mode\":\"sweep\",\"width\":{w},\"height\":{h},\"stride\":{stride},\"threads\":{threads},\"cells\":{cells},\"sweep_seconds\":{sweep:.3},\"per_window_seconds\":{per_window:.6},\"per_window_subset\":{subset},\"per_window_full_seconds_est\":{:.1},\"ratio\":{:.2},\"peak_rss_mib\":{:.1},\"macs_per_window\":{}}}",
                per_window * cells as f64,
                per_window * cells as f64 / sweep,
                peak_rss_kib() as f64 / 1024.0,
                clf.network.arch.window_macs()
            );
        }
        Some("memory") => {
            let (w, h, stride) = (arg(&args, 2), arg(&args, 3), arg(&args, 4));
            let clf = classifier(100);
            let px = sheet(w, h, 5);
            let before = peak_rss_kib();
            let opts = ScoreMapOptions {
                stride,
                ..ScoreMapOptions::native(&clf)
            };
            let t = Instant::now();
            let map = clf.score_map(&px, w, h, &opts).expect("score map");
            println!(
                "{{\"mode\":\"memory\",\"width\":{w},\"height\":{h},\"stride\":{stride},\"threads\":{threads},\"cells\":{},\"seconds\":{:.1},\"peak_rss_mib_before_sweep\":{:.1},\"peak_rss_mib\":{:.1}}}",
                map.rows * map.cols,
                t.elapsed().as_secs_f64(),
                before as f64 / 1024.0,
                peak_rss_kib() as f64 / 1024.0
            );
        }
        _ => {
            arg(&args, usize::MAX);
        }
    }
}
