//! Speed figures of the trainer for `bench/peer.sh` (a benchmark, not a test).
//!
//! ```text
//! cargo run --release -p symtrust-trainer --example peer_bench -- train  WINDOW BATCH STEPS
//! cargo run --release -p symtrust-trainer --example peer_bench -- sweep  WIDTH HEIGHT STRIDE SUBSET
//! cargo run --release -p symtrust-trainer --example peer_bench -- memory WIDTH HEIGHT STRIDE
//! cargo run --release -p symtrust-trainer --example peer_bench -- kernels [ONLY]
//! cargo run --release -p symtrust-trainer --example peer_bench -- plant DPI STRIDE
//! ```
//!
//! Each prints one JSON line. Data are built before the timed code from a fixed
//! seed: random weights of the default architecture, random crops, and a sheet
//! of paper with random line work. `train` times optimiser steps on the real
//! training path (augmentation, weighted loss, AdamW); `sweep` times the
//! fully-convolutional score map over the whole sheet and per-window
//! classification of `SUBSET` windows of the same grid, and extrapolates the
//! per-window time to the whole grid; `memory` runs one sweep and reports the
//! process's peak resident memory (VmHWM); `kernels` prints the measured FP32
//! peak (FMA chains) and each convolution kernel's GFLOP/s at batch 64 (with
//! `ONLY`, just the kernels whose name starts with it, e.g. `conv1 forward`);
//! `plant` sweeps an A1 sheet of the synthetic plant densely and with
//! blank-paper skipping (threshold from windows centred on its symbols, as
//! training would choose it) and counts the symbols whose nearest grid window
//! was skipped.

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

fn plant(args: &[String], threads: usize) {
    use symtrust_labels::synth::{DraftingStyle, Paper, SynthConfig, generate_sheet};
    use symtrust_trainer::blank::{ink_fraction, threshold_from_positives};
    let (dpi, stride) = (arg(args, 2), arg(args, 3));
    let config = SynthConfig {
        dpi: dpi as f64,
        ..SynthConfig::new(DraftingStyle::A, 11)
    };
    let sheet = generate_sheet(&config, 3, Paper::A1);
    let (w, h) = (sheet.image.width() as usize, sheet.image.height() as usize);
    let px = sheet.image.as_raw();
    let side = 100;
    let origin = |c: f64, limit: usize| {
        ((c - side as f64 / 2.0).round().max(0.0) as usize).min(limit - side)
    };
    let centred: Vec<Vec<u8>> = sheet
        .symbols
        .iter()
        .map(|s| {
            let (x, y) = (
                origin(s.bbox.x + s.bbox.w / 2.0, w),
                origin(s.bbox.y + s.bbox.h / 2.0, h),
            );
            (y..y + side)
                .flat_map(|yy| px[yy * w + x..yy * w + x + side].iter().copied())
                .collect()
        })
        .collect();
    let threshold = threshold_from_positives(centred.iter().map(Vec::as_slice));
    let clf = classifier(side);
    let dense = ScoreMapOptions {
        stride,
        ..ScoreMapOptions::native(&clf)
    };
    let t = Instant::now();
    let full = clf.score_map(px, w, h, &dense).expect("dense score map");
    let dense_s = t.elapsed().as_secs_f64();
    let skip = ScoreMapOptions {
        skip_below_ink: Some(threshold),
        ..dense
    };
    let t = Instant::now();
    let map = clf.score_map(px, w, h, &skip).expect("skipping score map");
    let skip_s = t.elapsed().as_secs_f64();
    // A symbol is lost when the grid window nearest its centre was skipped.
    let lost = sheet
        .symbols
        .iter()
        .filter(|s| {
            let c = ((origin(s.bbox.x + s.bbox.w / 2.0, w) as f64 / stride as f64).round()
                as usize)
                .min(map.cols - 1);
            let r = ((origin(s.bbox.y + s.bbox.h / 2.0, h) as f64 / stride as f64).round()
                as usize)
                .min(map.rows - 1);
            let (x, y) = map.window_origin(r, c);
            let win: Vec<u8> = (y..y + side)
                .flat_map(|yy| px[yy * w + x..yy * w + x + side].iter().copied())
                .collect();
            ink_fraction(&win) < threshold
        })
        .count();
    let changed = full
        .scores
        .iter()
        .zip(&map.scores)
        .filter(|(a, b)| a != b)
        .count();
    println!(
        "{{\"mode\":\"plant\",\"width\":{w},\"height\":{h},\"dpi\":{dpi},\"stride\":{stride},\"threads\":{threads},\"cells\":{},\"symbols\":{},\"threshold\":{threshold:.5},\"dense_seconds\":{dense_s:.3},\"skip_seconds\":{skip_s:.3},\"skipped\":{},\"skipped_share\":{:.4},\"symbols_lost\":{lost},\"scores_changed\":{changed},\"peak_rss_mib\":{:.1}}}",
        map.cells(),
        sheet.symbols.len(),
        map.skipped,
        map.skipped as f64 / map.cells() as f64,
        peak_rss_kib() as f64 / 1024.0
    );
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
        Some("kernels") => kernels(threads, args.get(2).map_or("", String::as_str)),
        Some("plant") => plant(&args, threads),
        _ => {
            arg(&args, usize::MAX);
        }
    }
}

/// Seconds per call of `f`, the best of `reps` timed calls after one warm-up.
fn best_of(reps: usize, mut f: impl FnMut()) -> f64 {
    f();
    (0..reps)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

/// FP32 peak of all threads from chains of independent fused multiply-adds
/// (10 accumulators per thread hide the FMA latency), the best of AVX2 and
/// AVX-512 where the CPU has them; GFLOP/s. Each is the best of 40 short
/// runs (a few ms each), as the kernels are the best of
/// several calls: on shared cores a single long run mostly measures the
/// other processes' share.
fn fma_peak(threads: usize) -> (f64, &'static str) {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::*;
        const ITERS: usize = 1_000_000;
        const PEAK_RUNS: usize = 40;
        #[target_feature(enable = "avx2,fma")]
        unsafe fn chains256(seed: f32) -> f32 {
            let a = _mm256_set1_ps(0.999_999);
            let b = _mm256_set1_ps(1e-7);
            let mut acc = [_mm256_set1_ps(seed); 10];
            for _ in 0..ITERS {
                for v in acc.iter_mut() {
                    *v = _mm256_fmadd_ps(*v, a, b);
                }
            }
            let mut out = [0f32; 8];
            let mut s = acc[0];
            for v in &acc[1..] {
                s = _mm256_add_ps(s, *v);
            }
            unsafe { _mm256_storeu_ps(out.as_mut_ptr(), s) };
            out.iter().sum()
        }
        #[target_feature(enable = "avx512f")]
        unsafe fn chains512(seed: f32) -> f32 {
            let a = _mm512_set1_ps(0.999_999);
            let b = _mm512_set1_ps(1e-7);
            let mut acc = [_mm512_set1_ps(seed); 10];
            for _ in 0..ITERS / 2 {
                for v in acc.iter_mut() {
                    *v = _mm512_fmadd_ps(*v, a, b);
                }
            }
            let mut s = acc[0];
            for v in &acc[1..] {
                s = _mm512_add_ps(s, *v);
            }
            _mm512_reduce_add_ps(s)
        }
        let run_once = |wide: bool| -> f64 {
            let t = Instant::now();
            let sums: Vec<f32> = std::thread::scope(|sc| {
                let hs: Vec<_> = (0..threads)
                    .map(|i| {
                        sc.spawn(move || {
                            // SAFETY: only called after the CPU reported the feature.
                            unsafe {
                                if wide {
                                    chains512(i as f32)
                                } else {
                                    chains256(i as f32)
                                }
                            }
                        })
                    })
                    .collect();
                hs.into_iter()
                    .map(|h| h.join().expect("peak thread"))
                    .collect()
            });
            std::hint::black_box(sums);
            // Both variants do ITERS x 10 x 8 FMAs (2 flops each) per thread.
            (threads * ITERS * 10 * 8 * 2) as f64 / t.elapsed().as_secs_f64() / 1e9
        };
        let run =
            |wide: bool| -> f64 { (0..PEAK_RUNS).map(|_| run_once(wide)).fold(0.0, f64::max) };
        let mut best = (0.0, "none");
        if is_x86_feature_detected!("avx2") && is_x86_feature_detected!("fma") {
            best = (run(false), "AVX2 FMA");
        }
        if is_x86_feature_detected!("avx512f") {
            let wide = run(true);
            if wide > best.0 {
                best = (wide, "AVX-512 FMA");
            }
        }
        best
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        (0.0, "unmeasured")
    }
}

/// GFLOP/s of each convolution kernel of the default network at batch 64,
/// and of the score map's dense head on one 64 x 64-cell tile; only those
/// whose name starts with `only`.
fn kernels(threads: usize, only: &str) {
    use symtrust_trainer::kernels::conv::{Geometry, backward, forward};
    let (peak, isa) = fma_peak(threads);
    let mut rng = SeededRng::new(7);
    let mut rand = |n: usize| -> Vec<f32> { (0..n).map(|_| rng.uniform() as f32 - 0.3).collect() };
    let arch = Architecture::from_settings(&ModelSettings::default(), 100, 4).expect("arch");
    let mut side = arch.window;
    let mut rows = Vec::new();
    for i in 0..arch.layers() {
        let g = Geometry {
            batch: 64,
            c_in: arch.conv_inputs(i),
            h: side,
            w: side,
            c_out: arch.conv_channels[i],
            k: arch.conv_kernels[i],
            relu: true,
            pool: true,
        };
        side = g.out_hw().0;
        let name = |what: &str| format!("conv{} {what}", i + 1);
        let wanted = |what: &str| name(what).starts_with(only);
        if !wanted("forward") && !wanted("backward") {
            continue;
        }
        let (x, w, b) = (
            rand(g.batch * g.in_len()),
            rand(g.c_out * g.patch()),
            rand(g.c_out),
        );
        let (out, idx) = forward(&g, &x, &w, &b);
        let grad = rand(out.len());
        let fwd = wanted("forward").then(|| {
            best_of(15, || {
                std::hint::black_box(forward(&g, &x, &w, &b));
            })
        });
        let want_dx = i > 0;
        let bwd = wanted("backward").then(|| {
            best_of(8, || {
                std::hint::black_box(backward(&g, &x, &w, &out, &idx, &grad, want_dx));
            })
        });
        let flops = 2.0 * g.forward_macs() as f64;
        let bwd_flops = flops * if want_dx { 2.0 } else { 1.0 };
        for (what, secs, fl) in [("forward", fwd, flops), ("backward", bwd, bwd_flops)] {
            let Some(secs) = secs else { continue };
            rows.push(format!(
                "{{\"kernel\":\"{}\",\"shape\":\"{}x{}x{}x{} k{} -> {}\",\"ms\":{:.2},\"gflops\":{:.1},\"peak_share\":{:.3}}}",
                name(what),
                g.batch,
                g.c_in,
                g.h,
                g.w,
                g.k,
                g.c_out,
                secs * 1e3,
                fl / secs / 1e9,
                fl / secs / 1e9 / peak
            ));
        }
    }
    if "dense head".starts_with(only) {
        rows.push(dense_head(&arch, threads, peak, &mut rand));
    }
    println!(
        "{{\"mode\":\"kernels\",\"threads\":{threads},\"peak_gflops\":{peak:.1},\"peak_isa\":\"{isa}\",\"kernels\":[{}]}}",
        rows.join(",")
    );
}

/// The JSON row of the score map's dense head on one 64 x 64-cell tile per
/// thread: a 73 x 73 feature map gives 64 x 64 cells, and the score map runs
/// one tile per thread, so the rate is for all threads.
fn dense_head(
    arch: &Architecture,
    threads: usize,
    peak: f64,
    rand: &mut impl FnMut(usize) -> Vec<f32>,
) -> String {
    use symtrust_trainer::kernels::head::DenseHead;
    let f = arch.feature_side();
    let c = arch.conv_channels[arch.layers() - 1];
    let (fh, fw) = (64 + f - 1, 64 + f - 1);
    let feats = rand(c * fh * fw);
    let (hw, hb, ow, ob) = (
        rand(arch.hidden * c * f * f),
        rand(arch.hidden),
        rand(arch.classes * arch.hidden),
        rand(arch.classes),
    );
    let head = DenseHead {
        hidden_w: &hw,
        hidden_b: &hb,
        out_w: &ow,
        out_b: &ob,
        channels: c,
        side: f,
    };
    let cells: Vec<(usize, usize)> = (0..64).flat_map(|r| (0..64).map(move |q| (r, q))).collect();
    let secs = best_of(3, || {
        use rayon::prelude::*;
        (0..threads).into_par_iter().for_each(|_| {
            std::hint::black_box(head.logits(&feats, fh, fw, &cells));
        });
    });
    let flops = threads as f64
        * 2.0
        * cells.len() as f64
        * (c * f * f * arch.hidden + arch.hidden * arch.classes) as f64;
    format!(
        "{{\"kernel\":\"dense head\",\"shape\":\"{threads} tiles of 64x64 cells, {c}x{f}x{f} -> {} -> {}\",\"ms\":{:.2},\"gflops\":{:.1},\"peak_share\":{:.3}}}",
        arch.hidden,
        arch.classes,
        secs * 1e3,
        flops / secs / 1e9,
        flops / secs / 1e9 / peak
    )
}
