//! External check: the optical handwritten digits data set (UCI "Optical
//! Recognition of Handwritten Digits", test half: 1797 images of 8 x 8, values
//! 0-16), as bundled with scikit-learn (`sklearn.datasets.load_digits`) and
//! embedded by `smartcore` 0.4 (`smartcore::dataset::digits`).
//!
//! Split as the scikit-learn example "Recognizing hand-written digits" does:
//! first half train, second half test, no shuffle. That example reports an
//! accuracy of 0.97 for an RBF support vector machine on this split (from
//! memory, scikit-learn 1.x documentation); the default architecture must
//! reach at least that on the held-out half.
//!
//! What this test chooses, and why: images are upsampled 4x (nearest
//! neighbour, 32 x 32) inside a 2-pixel paper border, a 36 x 36 window instead
//! of the site default 100, so that five trainings take seconds. 36 is the
//! smallest window near 32 that the default network sees whole
//! (32 -> 16 -> 12 -> 6 -> 4 -> 2); the default layer widths, kernels, hidden
//! size and dropout are kept. The last 90 images of the training half are used
//! for early stopping, so the test half is never seen before the final score.
//!
//! One training's held-out accuracy moves by a few points with the seed (0.93
//! to 0.98 measured over seeds 1-5 at the earlier settings, mostly from early
//! stopping on only 90 images), and the same seed rounds differently on
//! another instruction set (AVX-512 or AVX2 kernels). So five seeds are
//! trained, and the **median** of their accuracies must reach 0.97: one
//! unlucky run does not fail the test, a worse network does.

use symtrust_labels::site::ModelSettings;
use symtrust_trainer::data::DataSource;
use symtrust_trainer::train::Silent;
use symtrust_trainer::{Architecture, Classifier, Dataset, Sample, TrainOptions, train};

const UP: usize = 4;
const BORDER: usize = 2;
const SIDE: usize = 8 * UP + 2 * BORDER;

/// 8-bit window (paper 255, ink 0) from a digits row (0 = paper, 16 = full ink):
/// 4x nearest-neighbour upsampling inside a 2-pixel paper border.
fn window(row: &[f32]) -> Vec<u8> {
    let mut out = vec![255u8; SIDE * SIDE];
    for y in 0..8 * UP {
        for x in 0..8 * UP {
            let v = row[(y / UP) * 8 + x / UP];
            out[(y + BORDER) * SIDE + x + BORDER] = 255 - (v * 255.0 / 16.0).round() as u8;
        }
    }
    out
}

#[test]
fn digits_held_out_accuracy_reaches_the_scikit_learn_example() {
    let ds = smartcore::dataset::digits::load_dataset();
    assert_eq!((ds.num_samples, ds.num_features), (1797, 64));
    // scikit-learn's load_digits().target starts 0, 1, ..., 9 (from memory).
    let first: Vec<usize> = ds.target[..10].iter().map(|t| *t as usize).collect();
    assert_eq!(first, (0..10).collect::<Vec<_>>());
    let samples: Vec<Sample> = (0..ds.num_samples)
        .map(|i| Sample {
            pixels: window(&ds.data[i * 64..(i + 1) * 64]),
            class: ds.target[i] as usize,
        })
        .collect();
    let half = ds.num_samples / 2; // 898, as `train_test_split(..., test_size=0.5, shuffle=False)`
    let (train_half, test_half) = samples.split_at(half);
    let (fit, early_stop) = train_half.split_at(half - 90);
    let data = Dataset {
        classes: (0..10).map(|d| d.to_string()).collect(),
        rotatable: vec![false; 10],
        window: SIDE,
        train: fit.to_vec(),
        validation: early_stop.to_vec(),
        source: DataSource {
            crop_library: "uci-optdigits-sklearn-load_digits".to_string(),
            manifest_sha256: String::new(),
            index_sha256: String::new(),
            dpi: 0.0,
        },
    };
    let arch = Architecture::from_settings(&ModelSettings::default(), SIDE, 10).unwrap();
    let windows: Vec<&[u8]> = test_half.iter().map(|s| s.pixels.as_slice()).collect();
    let mut accuracies: Vec<f64> = (1..=5)
        .map(|seed| {
            let opts = TrainOptions {
                epochs: 40,
                batch_size: 16,
                learning_rate: 1e-3,
                weight_decay: 1e-4,
                patience: 10,
                seed,
                augment: true,
            };
            let outcome = train(&data, &arch, &opts, None, false, &mut Silent).unwrap();
            let clf = Classifier::from_network(outcome.network, data.classes.clone()).unwrap();
            let probs = clf.classify(&windows).unwrap();
            let right = probs
                .iter()
                .zip(test_half)
                .filter(|(p, s)| symtrust_trainer::train::argmax(p) == s.class)
                .count();
            let accuracy = right as f64 / test_half.len() as f64;
            eprintln!(
                "digits: seed {seed}, held-out accuracy {accuracy:.4} after {} epochs",
                outcome.epochs_run
            );
            accuracy
        })
        .collect();
    accuracies.sort_by(f64::total_cmp);
    let median = accuracies[2];
    assert!(
        median >= 0.97,
        "median held-out accuracy of five seeds {median:.4} < 0.97 ({accuracies:?})"
    );
}
