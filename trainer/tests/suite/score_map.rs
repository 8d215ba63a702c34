//! The fully-convolutional score map against its naive twin (classifying each
//! window on its own), over random weights and random sheets, and the pixel
//! alignment of grid cells at the sheet edges.

use candle_core::DType;
use proptest::prelude::*;
use symtrust_labels::SeededRng;
use symtrust_labels::site::ModelSettings;
use symtrust_trainer::blank::ink_fraction;
use symtrust_trainer::model::Network;
use symtrust_trainer::scoremap::grid_size;
use symtrust_trainer::{Architecture, Classifier, ScoreMap, ScoreMapOptions};

fn classifier(arch: &Architecture, seed: u64) -> Classifier {
    let names = (0..arch.classes).map(|i| format!("c{i}")).collect();
    Classifier::from_network(Network::init(arch, seed, DType::F32).unwrap(), names).unwrap()
}

/// A random sheet: noise plus a few dark strokes, so ReLUs and pools vary.
fn sheet(width: usize, height: usize, seed: u64) -> Vec<u8> {
    let mut rng = SeededRng::new(seed);
    let mut px: Vec<u8> = (0..width * height)
        .map(|_| 200 + rng.below(56) as u8)
        .collect();
    for _ in 0..(width + height) / 6 {
        let (x, y) = (
            rng.below(width as u64) as usize,
            rng.below(height as u64) as usize,
        );
        let len = rng.below(20) as usize;
        for d in 0..len {
            if rng.chance(0.5) && x + d < width {
                px[y * width + x + d] = rng.below(60) as u8;
            } else if y + d < height {
                px[(y + d) * width + x] = rng.below(60) as u8;
            }
        }
    }
    px
}

fn crop(px: &[u8], width: usize, x: usize, y: usize, side: usize) -> Vec<u8> {
    (y..y + side)
        .flat_map(|r| px[r * width + x..r * width + x + side].iter().copied())
        .collect()
}

/// Asserts every cell equals the per-window classification of its window.
fn assert_matches_naive(clf: &Classifier, px: &[u8], width: usize, height: usize, map: &ScoreMap) {
    let side = clf.window();
    assert_eq!(
        (map.cols, map.rows),
        grid_size(width, height, side, map.stride)
    );
    let mut windows = Vec::new();
    for r in 0..map.rows {
        for c in 0..map.cols {
            let (x, y) = map.window_origin(r, c);
            assert!(
                x + side <= width && y + side <= height,
                "cell ({r}, {c}) is inside the sheet"
            );
            windows.push(crop(px, width, x, y, side));
        }
    }
    let refs: Vec<&[u8]> = windows.iter().map(Vec::as_slice).collect();
    let naive = clf.classify(&refs).unwrap();
    for r in 0..map.rows {
        for c in 0..map.cols {
            let want = &naive[r * map.cols + c];
            for (k, (a, b)) in map.cell(r, c).iter().zip(want).enumerate() {
                assert!(
                    (a - b).abs() <= 1e-4,
                    "cell ({r}, {c}) class {k}: map {a} vs window {b}"
                );
            }
        }
    }
}

fn two_layer() -> Architecture {
    Architecture {
        window: 22,
        conv_channels: vec![3, 5],
        conv_kernels: vec![3, 3],
        hidden: 7,
        dropout: 0.0,
        classes: 3,
    }
}

fn three_layer() -> Architecture {
    // 38 -3+1 = 36 -> 18 -3+1 = 16 -> 8 -3+1 = 6 -> 3 (hand calculation).
    Architecture {
        window: 38,
        conv_channels: vec![4, 4, 6],
        conv_kernels: vec![3, 3, 3],
        hidden: 9,
        dropout: 0.0,
        classes: 4,
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 24, ..ProptestConfig::default() })]

    #[test]
    fn score_map_equals_per_window_classification(
        weight_seed in 0u64..1000,
        image_seed in 0u64..1000,
        deep in any::<bool>(),
        extra_w in 0usize..30,
        extra_h in 0usize..30,
        stride_div in 0u32..3,
        tile_cells in prop::sample::select(vec![1usize, 2, 3, 64]),
    ) {
        let arch = if deep { three_layer() } else { two_layer() };
        let clf = classifier(&arch, weight_seed);
        let (w, h) = (arch.window + extra_w, arch.window + extra_h);
        let px = sheet(w, h, image_seed);
        let stride = arch.native_stride() >> stride_div;
        let map = clf.score_map(&px, w, h, &ScoreMapOptions { stride, tile_cells, skip_below_ink: None }).unwrap();
        assert_matches_naive(&clf, &px, w, h, &map);
    }
}

#[test]
fn default_network_score_map_matches_and_aligns_at_the_edges() {
    // Default architecture on a 100-pixel window, native stride 8. Width 100 + 3*8 + 7:
    // four columns (x = 0, 8, 16, 24); x = 32 would end at 132 > 131.
    let arch = Architecture::from_settings(&ModelSettings::default(), 100, 3).unwrap();
    let clf = classifier(&arch, 5);
    let (w, h) = (131, 108);
    let px = sheet(w, h, 6);
    let map = clf
        .score_map(&px, w, h, &ScoreMapOptions::native(&clf))
        .unwrap();
    assert_eq!((map.cols, map.rows), (4, 2));
    assert_eq!(map.window_origin(1, 3), (24, 8));
    assert_matches_naive(&clf, &px, w, h, &map);
    let fine = clf
        .score_map(
            &px,
            w,
            h,
            &ScoreMapOptions {
                stride: 2,
                tile_cells: 1,
                skip_below_ink: None,
            },
        )
        .unwrap();
    assert_eq!((fine.cols, fine.rows), (16, 5));
    assert_matches_naive(&clf, &px, w, h, &fine);
    // Cells shared by both grids agree: fine (r, c) at 4x the native index.
    for r in 0..map.rows {
        for c in 0..map.cols {
            for (a, b) in map.cell(r, c).iter().zip(fine.cell(4 * r, 4 * c)) {
                assert!((a - b).abs() <= 1e-5);
            }
        }
    }
}

#[test]
fn the_bottom_right_cell_sees_the_last_pixels_and_nothing_beyond() {
    // Ink only in the bottom-right corner pixel block: only cells whose windows
    // reach it may differ from a blank sheet's scores.
    // Window 46: 44 -> 22 -> 20 -> 10 -> 8 -> 4, even at every pooling, so every
    // pixel of the window reaches the features (hand calculation).
    let arch = Architecture {
        window: 46,
        ..three_layer()
    };
    let clf = classifier(&arch, 11);
    let (w, h) = (46 + 16, 46 + 8); // exact multiples: last window ends on the last pixel
    let mut px = vec![255u8; w * h];
    for y in h - 3..h {
        for x in w - 3..w {
            px[y * w + x] = 0;
        }
    }
    let map = clf
        .score_map(&px, w, h, &ScoreMapOptions::native(&clf))
        .unwrap();
    assert_eq!((map.cols, map.rows), (3, 2));
    let blank = clf.classify(&[&vec![255u8; 46 * 46]]).unwrap().remove(0);
    let corner = map.cell(1, 2);
    assert!(
        corner.iter().zip(&blank).any(|(a, b)| (a - b).abs() > 1e-6),
        "corner cell sees the ink"
    );
    for (r, c) in [(0, 0), (0, 2), (1, 0), (1, 1)] {
        for (a, b) in map.cell(r, c).iter().zip(&blank) {
            assert!(
                (a - b).abs() <= 1e-5,
                "cell ({r}, {c}) must not see the corner"
            );
        }
    }
}

#[test]
fn bad_sheets_and_strides_are_refused() {
    let clf = classifier(&two_layer(), 1);
    let px = vec![255u8; 21 * 30];
    assert!(
        clf.score_map(&px, 21, 30, &ScoreMapOptions::native(&clf))
            .is_err()
    );
    let px = vec![255u8; 30 * 30];
    let three = ScoreMapOptions {
        stride: 3,
        tile_cells: 8,
        skip_below_ink: None,
    };
    assert!(
        clf.score_map(&px, 30, 30, &three)
            .unwrap_err()
            .to_string()
            .contains("stride 3")
    );
    assert!(
        clf.score_map(&px[1..], 30, 30, &ScoreMapOptions::native(&clf))
            .is_err()
    );
}

#[test]
fn blank_skipping_changes_only_windows_below_the_threshold_and_counts_them() {
    // Paper with a few ink blocks: windows over a block keep their dense
    // scores, windows with less ink than the threshold get the all-paper
    // window's scores, and `skipped` is the brute-force count of the latter.
    let arch = three_layer();
    let clf = classifier(&arch, 13);
    let (w, h) = (150, 120);
    let mut px = vec![255u8; w * h];
    let mut rng = SeededRng::new(14);
    for _ in 0..3 {
        let (x0, y0) = (rng.below(140) as usize, rng.below(110) as usize);
        for y in y0..(y0 + 9).min(h) {
            for x in x0..(x0 + 9).min(w) {
                px[y * w + x] = rng.below(100) as u8;
            }
        }
    }
    let t = 0.02;
    let blank = clf.classify(&[&vec![255u8; 38 * 38]]).unwrap().remove(0);
    for (stride, tile_cells) in [(8, 64), (4, 3), (2, 1)] {
        let dense = ScoreMapOptions {
            stride,
            tile_cells,
            skip_below_ink: None,
        };
        let dense = clf.score_map(&px, w, h, &dense).unwrap();
        assert_eq!(dense.skipped, 0);
        let opts = ScoreMapOptions {
            stride,
            tile_cells,
            skip_below_ink: Some(t),
        };
        let map = clf.score_map(&px, w, h, &opts).unwrap();
        assert_eq!(map.skip_below_ink, Some(t));
        let mut below = 0;
        for r in 0..map.rows {
            for c in 0..map.cols {
                let (x, y) = map.window_origin(r, c);
                let skip = ink_fraction(&crop(&px, w, x, y, 38)) < t;
                below += usize::from(skip);
                let want = if skip {
                    blank.as_slice()
                } else {
                    dense.cell(r, c)
                };
                for (a, b) in map.cell(r, c).iter().zip(want) {
                    assert!(
                        (a - b).abs() <= 1e-5,
                        "stride {stride} cell ({r}, {c}) skipped {skip}"
                    );
                }
            }
        }
        assert_eq!(map.skipped, below, "stride {stride}");
        assert!(
            below > 0 && below < map.cells(),
            "stride {stride}: {below} of {}",
            map.cells()
        );
    }
    let bad = ScoreMapOptions {
        stride: 8,
        tile_cells: 8,
        skip_below_ink: Some(1.5),
    };
    assert!(
        clf.score_map(&px, w, h, &bad)
            .unwrap_err()
            .to_string()
            .contains("1.5")
    );
}
