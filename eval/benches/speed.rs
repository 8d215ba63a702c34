//! Speed of the eval kernels on data of realistic size, built outside the timed
//! code with a fixed seed. Run with `cargo bench -p symtrust-eval`; it prints
//! the median of several runs per case. The fast NMS is timed beside the plain
//! O(n^2) loop it is tested against, so the gain is measured, not assumed.

use std::hint::black_box;
use std::time::{Duration, Instant};
use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::matching::{ScoredBox, score_order};
use symtrust_eval::nms::{NmsScope, nms};
use symtrust_eval::peaks::{BoxSize, DetectConfig, ScoreGrid, detect};
use symtrust_eval::sheet_eval::{SheetEvalConfig, SheetInput, TruthSymbol, evaluate_sheets};
use symtrust_labels::detections::Detection;
use symtrust_labels::{BBox, SeededRng};

fn median_time(runs: usize, mut f: impl FnMut()) -> Duration {
    let mut t: Vec<Duration> = (0..runs)
        .map(|_| {
            let s = Instant::now();
            f();
            s.elapsed()
        })
        .collect();
    t.sort();
    t[runs / 2]
}

fn naive_nms(c: &[ScoredBox], thr: f64) -> Vec<usize> {
    let mut kept: Vec<usize> = Vec::new();
    for i in score_order(c) {
        if !kept
            .iter()
            .any(|&k| c[k].class == c[i].class && c[k].bbox.iou(&c[i].bbox) > thr)
        {
            kept.push(i);
        }
    }
    kept
}

fn main() {
    let mut rng = SeededRng::new(42);
    // A 7000 x 5000 px sheet at stride 8: windows of 64 px, 20 000 candidates.
    let cands: Vec<ScoredBox> = (0..20_000)
        .map(|_| ScoredBox {
            class: rng.below(4) as usize,
            score: rng.uniform(),
            bbox: BBox::new(
                rng.range_f64(0.0, 7000.0),
                rng.range_f64(0.0, 5000.0),
                64.0,
                64.0,
            ),
        })
        .collect();
    let fast = median_time(5, || {
        black_box(nms(&cands, 0.3, NmsScope::PerClass).unwrap());
    });
    let slow = median_time(3, || {
        black_box(naive_nms(&cands, 0.3));
    });
    println!("nms 20000 candidates: grid {fast:?}, naive O(n^2) {slow:?}");

    let (rows, cols) = (620, 870);
    let planes: Vec<Vec<f32>> = (0..4)
        .map(|_| (0..rows * cols).map(|_| rng.uniform() as f32).collect())
        .collect();
    let grid = ScoreGrid {
        rows,
        cols,
        stride: 8,
        window: 64,
        planes,
    };
    let names: Vec<String> = ["gate_valve", "pump", "instrument_bubble", "reducer"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let cfg = DetectConfig {
        min_score: 0.9,
        nms_iou: 0.3,
        nms_scope: NmsScope::PerClass,
        box_size: BoxSize::Window,
        ignore: vec![],
    };
    let t = median_time(5, || {
        black_box(detect("bench", &grid, &names, &cfg).unwrap());
    });
    println!("detect on a 620 x 870 grid, 4 classes: {t:?}");

    // Eleven held-out sheets, 150 symbols and about 200 detections each.
    let sheets: Vec<SheetInput> = (0..11)
        .map(|s| {
            let sheet = format!("held-{s:02}");
            let mut truths = Vec::new();
            let mut detections = Vec::new();
            for _ in 0..150 {
                let class = rng.below(4) as usize;
                let b = BBox::new(
                    rng.range_f64(0.0, 7000.0),
                    rng.range_f64(0.0, 5000.0),
                    50.0,
                    50.0,
                );
                truths.push(TruthSymbol {
                    class: names[class].clone(),
                    bbox: b,
                });
                if rng.chance(0.9) {
                    let (dx, dy) = (rng.range_f64(-10.0, 10.0), rng.range_f64(-10.0, 10.0));
                    detections.push(Detection {
                        sheet: sheet.clone(),
                        class: names[class].clone(),
                        score: rng.uniform(),
                        x: b.x + dx,
                        y: b.y + dy,
                        w: 50.0,
                        h: 50.0,
                    });
                }
            }
            for _ in 0..65 {
                detections.push(Detection {
                    sheet: sheet.clone(),
                    class: names[rng.below(4) as usize].clone(),
                    score: rng.uniform() * 0.6,
                    x: rng.range_f64(0.0, 7000.0),
                    y: rng.range_f64(0.0, 5000.0),
                    w: 50.0,
                    h: 50.0,
                });
            }
            SheetInput {
                sheet,
                truths,
                detections,
                ignore: vec![],
            }
        })
        .collect();
    let no_boot = SheetEvalConfig {
        bootstrap: None,
        ..SheetEvalConfig::default()
    };
    let t = median_time(5, || {
        black_box(evaluate_sheets(&sheets, &names, &no_boot).unwrap());
    });
    println!("evaluate_sheets, 11 sheets, no bootstrap: {t:?}");
    let boot = SheetEvalConfig {
        bootstrap: Some(BootstrapConfig::default()),
        ..SheetEvalConfig::default()
    };
    let t = median_time(3, || {
        black_box(evaluate_sheets(&sheets, &names, &boot).unwrap());
    });
    println!("evaluate_sheets, 11 sheets, 2000 bootstrap replicates: {t:?}");
}
