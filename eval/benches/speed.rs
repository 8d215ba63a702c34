//! Speed of the eval kernels on data of realistic size, built outside the timed
//! code with a fixed seed. Run with `cargo bench -p symtrust-eval`; it prints
//! the median of several runs per case and writes the figures into
//! `reports/bench/eval.md` (its own section, between the `metrics-bench`
//! markers; the rest of the file is kept).
//!
//! Cases:
//! - the fast NMS beside the plain O(n^2) loop it is tested against, so the
//!   gain is measured, not assumed;
//! - `detect` on a score grid of one A1 sheet;
//! - `evaluate_sheets` on 11 held-out sheets (the size of a real site);
//! - `evaluate_sheets` on 1000 sheets with 1000 scored detections each (one
//!   million), without the bootstrap, and with it at several resample counts
//!   and several sheet counts. The bootstrap's cost is the time with it minus
//!   the time without it; dividing by resamples, and by resamples x sheets,
//!   gives the per-unit cost, which stays flat when the cost is linear.
//!
//! `SYMTRUST_BENCH_MILLION_ONLY=1` runs only the million-detection case
//! without the bootstrap, five times, and writes nothing (for profiling).

use std::fmt::Write as _;
use std::hint::black_box;
use std::path::Path;
use std::time::{Duration, Instant};
use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::matching::{ScoredBox, score_order};
use symtrust_eval::nms::{NmsScope, nms};
use symtrust_eval::peaks::{BoxSize, DetectConfig, ScoreGrid, detect};
use symtrust_eval::sheet_eval::{SheetEvalConfig, SheetInput, TruthSymbol, evaluate_sheets};
use symtrust_labels::detections::Detection;
use symtrust_labels::{BBox, SeededRng};

const SECTION_START: &str = "<!-- metrics-bench:start -->";
const SECTION_END: &str = "<!-- metrics-bench:end -->";

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

/// Time all threads of this process have spent on a CPU (the first field of
/// each Linux `/proc/self/task/*/schedstat`, nanoseconds): unlike wall time, it
/// does not grow when other work on a shared machine takes the cores. The
/// evaluation's worker threads live in one pool for the whole process, so the
/// difference of two readings is the work done in between.
fn process_cpu() -> Option<Duration> {
    let mut total = 0u64;
    for task in std::fs::read_dir("/proc/self/task").ok()? {
        let s = std::fs::read_to_string(task.ok()?.path().join("schedstat")).ok()?;
        total += s.split_whitespace().next()?.parse::<u64>().ok()?;
    }
    Some(Duration::from_nanos(total))
}

/// Medians of wall time and on-CPU time over `runs` runs.
fn median_wall_and_cpu(runs: usize, mut f: impl FnMut()) -> (Duration, Option<Duration>) {
    let mut wall = Vec::with_capacity(runs);
    let mut cpu = Vec::with_capacity(runs);
    for _ in 0..runs {
        let (s, c) = (Instant::now(), process_cpu());
        f();
        wall.push(s.elapsed());
        cpu.push(process_cpu().zip(c).map(|(b, a)| b - a));
    }
    wall.sort();
    cpu.sort();
    (wall[runs / 2], cpu[runs / 2])
}

fn cpu_text(c: Option<Duration>) -> String {
    c.map_or_else(
        || "on-CPU time unavailable".into(),
        |c| format!("{:.3} s on CPU", c.as_secs_f64()),
    )
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

fn class_names(n: usize) -> Vec<String> {
    [
        "gate_valve",
        "pump",
        "instrument_bubble",
        "reducer",
        "check_valve",
        "control_valve",
        "relief_valve",
        "heat_exchanger",
    ]
    .iter()
    .take(n)
    .map(|s| s.to_string())
    .collect()
}

/// Held-out sheets of an A1 sheet's size (7000 x 5000 px): `truths` symbols
/// of 50 px, of which 90 % are detected (jittered by up to 10 px, score in
/// [0.3, 1)), 5 % detected twice (a duplicate), and the rest of `dets`
/// detections on background with scores in [0, 0.7). Scores are rounded to
/// f32, as a score map holds them, so ties occur.
fn make_sheets(
    rng: &mut SeededRng,
    n_sheets: usize,
    truths_per_sheet: usize,
    dets_per_sheet: usize,
    names: &[String],
) -> Vec<SheetInput> {
    let score = |rng: &mut SeededRng, lo: f64, hi: f64| rng.range_f64(lo, hi) as f32 as f64;
    (0..n_sheets)
        .map(|s| {
            let sheet = format!("held-{s:04}");
            let mut truths = Vec::with_capacity(truths_per_sheet);
            let mut detections = Vec::with_capacity(dets_per_sheet);
            for _ in 0..truths_per_sheet {
                let class = &names[rng.below(names.len() as u64) as usize];
                let b = BBox::new(
                    rng.range_f64(0.0, 7000.0),
                    rng.range_f64(0.0, 5000.0),
                    50.0,
                    50.0,
                );
                truths.push(TruthSymbol {
                    class: class.clone(),
                    bbox: b,
                });
                let copies = if rng.chance(0.9) { 1 } else { 0 } + usize::from(rng.chance(0.05));
                for _ in 0..copies {
                    if detections.len() == dets_per_sheet {
                        break;
                    }
                    let (dx, dy) = (rng.range_f64(-10.0, 10.0), rng.range_f64(-10.0, 10.0));
                    detections.push(Detection {
                        sheet: sheet.clone(),
                        class: class.clone(),
                        score: score(rng, 0.3, 1.0),
                        x: b.x + dx,
                        y: b.y + dy,
                        w: 50.0,
                        h: 50.0,
                    });
                }
            }
            while detections.len() < dets_per_sheet {
                detections.push(Detection {
                    sheet: sheet.clone(),
                    class: names[rng.below(names.len() as u64) as usize].clone(),
                    score: score(rng, 0.0, 0.7),
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
        .collect()
}

fn with_bootstrap(resamples: usize) -> SheetEvalConfig {
    SheetEvalConfig {
        bootstrap: Some(BootstrapConfig {
            resamples,
            ..BootstrapConfig::default()
        }),
        ..SheetEvalConfig::default()
    }
}

fn no_bootstrap() -> SheetEvalConfig {
    SheetEvalConfig {
        bootstrap: None,
        ..SheetEvalConfig::default()
    }
}

fn secs(d: Duration) -> f64 {
    d.as_secs_f64()
}

fn read_trimmed(path: &str) -> Option<String> {
    std::fs::read_to_string(path)
        .ok()
        .map(|s| s.trim().to_string())
}

fn cpu_model() -> String {
    read_trimmed("/proc/cpuinfo")
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split(':').nth(1))
                .map(|m| m.trim().to_string())
        })
        .unwrap_or_else(|| "unknown CPU".into())
}

fn load_average() -> String {
    read_trimmed("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|| "unknown".into())
}

/// Replaces this bench's section of `reports/bench/eval.md`, keeping the rest.
fn write_report(section: &str) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../reports/bench/eval.md");
    let old = std::fs::read_to_string(&path).unwrap_or_else(|_| {
        "# Evaluation benchmarks\n\n\
         Figures measured on the machine named in each section; rerun the \
         command given there to refresh them.\n"
            .to_string()
    });
    let block = format!("{SECTION_START}\n{section}{SECTION_END}\n");
    let new = match (old.find(SECTION_START), old.find(SECTION_END)) {
        (Some(a), Some(b)) if b > a => {
            let end = b + SECTION_END.len();
            let rest = old[end..].strip_prefix('\n').unwrap_or(&old[end..]);
            format!("{}{block}{rest}", &old[..a])
        }
        _ => format!("{}\n{block}", old.trim_end_matches('\n').to_string() + "\n"),
    };
    symtrust_labels::atomic::write_atomic(&path, new.as_bytes())
        .unwrap_or_else(|e| panic!("writing {}: {e}", path.display()));
    println!("figures written to {}", path.display());
}

/// Five timed runs of the million-detection case without the bootstrap,
/// printed and not written to the report: for profiling (`perf record`).
fn million_only(rng: &mut SeededRng) {
    let names8 = class_names(8);
    let big = make_sheets(rng, 1000, 600, 1000, &names8);
    for _ in 0..5 {
        let (wall, cpu) = median_wall_and_cpu(1, || {
            black_box(evaluate_sheets(&big, &names8, &no_bootstrap()).unwrap());
        });
        println!("one million detections: {wall:?} wall, {}", cpu_text(cpu));
    }
}

/// Prints a line and adds it to the report section.
fn emit(md: &mut String, line: String) {
    println!("{line}");
    md.push_str(&line);
    md.push('\n');
}

fn main() {
    let load_before = load_average();
    let mut md = String::new();
    let mut rng = SeededRng::new(42);
    if std::env::var_os("SYMTRUST_BENCH_MILLION_ONLY").is_some() {
        million_only(&mut rng);
        return;
    }

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
    let mut kernels = String::new();
    writeln!(
        kernels,
        "| NMS, 20 000 candidates, per class | {:.2} ms | plain O(n^2) loop: {:.2} ms ({:.1}x) |",
        secs(fast) * 1e3,
        secs(slow) * 1e3,
        secs(slow) / secs(fast)
    )
    .unwrap();
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
    let names = class_names(4);
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
    writeln!(
        kernels,
        "| detect, 620 x 870 score grid, 4 classes | {:.2} ms | |",
        secs(t) * 1e3
    )
    .unwrap();

    // Eleven held-out sheets, 150 symbols and 200 detections each.
    let small = make_sheets(&mut rng, 11, 150, 200, &names);
    let t = median_time(5, || {
        black_box(evaluate_sheets(&small, &names, &no_bootstrap()).unwrap());
    });
    println!("evaluate_sheets, 11 sheets, no bootstrap: {t:?}");
    writeln!(
        kernels,
        "| evaluate_sheets, 11 sheets x 200 detections, no bootstrap | {:.2} ms | |",
        secs(t) * 1e3
    )
    .unwrap();
    let t = median_time(3, || {
        black_box(evaluate_sheets(&small, &names, &with_bootstrap(1000)).unwrap());
    });
    println!("evaluate_sheets, 11 sheets, 1000 bootstrap resamples: {t:?}");
    writeln!(
        kernels,
        "| evaluate_sheets, 11 sheets x 200 detections, 1000 resamples | {:.2} ms | |",
        secs(t) * 1e3
    )
    .unwrap();

    // One million scored detections: 1000 sheets x 1000, 600 symbols a sheet, 8 classes.
    let names8 = class_names(8);
    let big = make_sheets(&mut rng, 1000, 600, 1000, &names8);
    let n_dets: usize = big.iter().map(|s| s.detections.len()).sum();
    let n_truths: usize = big.iter().map(|s| s.truths.len()).sum();
    let (base, base_cpu) = median_wall_and_cpu(3, || {
        black_box(evaluate_sheets(&big, &names8, &no_bootstrap()).unwrap());
    });
    // The same on one worker thread, as the peer of the parallel run.
    let single = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .expect("a one-thread pool");
    let (one, one_cpu) = single.install(|| {
        median_wall_and_cpu(3, || {
            black_box(evaluate_sheets(&big, &names8, &no_bootstrap()).unwrap());
        })
    });
    println!(
        "evaluate_sheets, 1000 sheets, {n_dets} detections, {n_truths} symbols, no bootstrap: {base:?}"
    );

    // Bootstrap cost against resamples, on all 1000 sheets.
    let mut by_resamples = Vec::new();
    for r in [25, 50, 100, 200] {
        let t = median_time(3, || {
            black_box(evaluate_sheets(&big, &names8, &with_bootstrap(r)).unwrap());
        });
        let boot = secs(t) - secs(base);
        println!(
            "  1000 sheets, {r} resamples: {t:?} total, bootstrap {boot:.3} s, {:.2} ms per resample",
            boot / r as f64 * 1e3
        );
        by_resamples.push((r, secs(t), boot));
    }
    // Bootstrap cost against sheets, at 100 resamples (the first sheets of the same set).
    let mut by_sheets = Vec::new();
    for n in [250, 500, 1000] {
        let part = &big[..n];
        let t0 = median_time(3, || {
            black_box(evaluate_sheets(part, &names8, &no_bootstrap()).unwrap());
        });
        let t = median_time(3, || {
            black_box(evaluate_sheets(part, &names8, &with_bootstrap(100)).unwrap());
        });
        let boot = secs(t) - secs(t0);
        println!(
            "  {n} sheets, 100 resamples: no bootstrap {t0:?}, with {t:?}, {:.2} us per resample-sheet",
            boot / (100.0 * n as f64) * 1e6
        );
        by_sheets.push((n, secs(t0), secs(t), boot));
    }
    let (full, full_cpu) = median_wall_and_cpu(1, || {
        black_box(evaluate_sheets(&big, &names8, &with_bootstrap(1000)).unwrap());
    });
    println!("evaluate_sheets, 1000 sheets, default 1000 resamples: {full:?}");

    emit(
        &mut md,
        format!(
            "## Metrics kernels (`cargo bench -p symtrust-eval`)\n\n\
         - command: `cargo bench -p symtrust-eval` (release profile; {} worker threads, `RAYON_NUM_THREADS` sets them)\n\
         - machine: {}, {} logical cores\n\
         - load average (1, 5, 15 min) before: {load_before}; after: {}\n\
         - figures: median of several runs (3 or 5; the default-1000 run once)\n",
            rayon::current_num_threads(),
            cpu_model(),
            std::thread::available_parallelism().map_or(0, |n| n.get()),
            load_average()
        ),
    );
    emit(&mut md, "| case | time | peer |\n|---|---|---|".into());
    md.push_str(&kernels);
    emit(
        &mut md,
        format!(
            "\n### One million scored detections\n\n\
         1000 sheets of 7000 x 5000 px, {n_dets} detections, {n_truths} ground-truth symbols, \
         8 classes; every figure of `evaluate_sheets` (per-class and micro PR curves, AP \
         all-point and 101-point, F1-max, precision at recall and recall at precision, \
         the IoU sweep 0.1..0.9 which matches every sheet nine more times, the detection \
         confusion table, the per-sheet table, calibration).\n\n\
         - without the bootstrap: **{:.3} s** wall, {} of all threads (goal: well under 1 s)\n\
         - the same on one worker thread: {:.3} s wall, {} ({:.2}x the wall time above)\n\
         - with the default 1000 resamples: **{:.2} s** wall, {} of all threads\n",
            secs(base),
            cpu_text(base_cpu),
            secs(one),
            cpu_text(one_cpu),
            secs(one) / secs(base),
            secs(full),
            cpu_text(full_cpu)
        ),
    );
    emit(&mut md,
        "\nBootstrap cost against resamples (1000 sheets); bootstrap = total - no-bootstrap time:\n\n\
         | resamples | total (s) | bootstrap (s) | per resample (ms) |\n|---|---|---|---|"
            .into(),
    );
    for (r, t, b) in &by_resamples {
        emit(
            &mut md,
            format!("| {r} | {t:.3} | {b:.3} | {:.2} |", b / *r as f64 * 1e3),
        );
    }
    emit(
        &mut md,
        "\nBootstrap cost against sheets (100 resamples):\n\n\
         | sheets | no bootstrap (s) | with (s) | bootstrap (s) | per resample-sheet (us) |\n\
         |---|---|---|---|---|"
            .into(),
    );
    for (n, t0, t, b) in &by_sheets {
        emit(
            &mut md,
            format!(
                "| {n} | {t0:.3} | {t:.3} | {b:.3} | {:.2} |",
                b / (100.0 * *n as f64) * 1e6
            ),
        );
    }
    emit(&mut md, String::new());
    write_report(&md);
}
