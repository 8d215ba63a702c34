//! Training end to end on a generated crop library: accuracy, exact
//! reproducibility, interruption and resume, the model folder and its card.

use super::library::{WINDOW, classes, tiny_arch, write_library};
use symtrust_trainer::blank::ink_fraction;
use symtrust_trainer::card::{LOG_FILE, ModelInputs, load_model, weights_bytes, write_model};
use symtrust_trainer::train::blank_threshold;
use symtrust_trainer::train::{Flow, Silent, TrainObserver};
use symtrust_trainer::{
    Classifier, Dataset, ModelCard, ScoreMapOptions, TrainOptions, TrainerError, train,
};

fn options(seed: u64, epochs: usize) -> TrainOptions {
    TrainOptions {
        epochs,
        batch_size: 16,
        learning_rate: 3e-3,
        weight_decay: 1e-4,
        patience: 0,
        seed,
        augment: true,
    }
}

/// Stops after `after` batches, as a Ctrl-C or a killed job would.
struct StopAfter {
    after: usize,
    seen: usize,
}

impl TrainObserver for StopAfter {
    fn batch_done(&mut self, _epoch: usize, _batch: usize, _loss: f64) -> Flow {
        self.seen += 1;
        if self.seen >= self.after {
            Flow::Stop
        } else {
            Flow::Continue
        }
    }
}

#[test]
fn learns_the_test_symbols_reproducibly_and_writes_a_checked_model() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(&tmp.path().join("crops"), 7, 40, None);
    let data = Dataset::load(&dir, &classes(), WINDOW).unwrap();
    assert_eq!(data.classes, ["ring", "cross", "box", "background"]);
    let arch = tiny_arch(4);
    let opts = options(3, 8);
    let models = tmp.path().join("models");

    let a = train(&data, &arch, &opts, Some(&models), false, &mut Silent).unwrap();
    // The task is easy on purpose: a working loop must get nearly all of it.
    assert!(
        a.validation.accuracy >= 0.9,
        "validation accuracy {}",
        a.validation.accuracy
    );
    assert_eq!(a.log.len(), 8);
    assert!(a.log[7].train_loss < a.log[0].train_loss, "{:?}", a.log);

    // Same seed, same machine: byte-identical weights.
    let b = train(&data, &arch, &opts, None, false, &mut Silent).unwrap();
    assert_eq!(
        weights_bytes(&a.network).unwrap(),
        weights_bytes(&b.network).unwrap()
    );
    // Another seed gives other weights (the check above can fail).
    let c = train(&data, &arch, &options(4, 1), None, false, &mut Silent).unwrap();
    let a1 = train(&data, &arch, &options(3, 1), None, false, &mut Silent).unwrap();
    assert_ne!(
        weights_bytes(&a1.network).unwrap(),
        weights_bytes(&c.network).unwrap()
    );

    let inputs = ModelInputs {
        classes: &data.classes,
        source: &data.source,
        options: &opts,
        train_counts: data.class_counts(&data.train),
        validation_counts: data.class_counts(&data.validation),
    };
    let (card, folder) = write_model(&models, &a, &inputs).unwrap();
    // Blank-paper threshold: no positive training crop would have been skipped.
    let t = card.blank_ink_fraction;
    assert!(t > 0.0 && t == blank_threshold(&data), "{t}");
    let positives: Vec<&[u8]> = data
        .train
        .iter()
        .filter(|s| s.class != 3)
        .map(|s| s.pixels.as_slice())
        .collect();
    assert!(!positives.is_empty());
    let least = positives
        .iter()
        .map(|p| ink_fraction(p))
        .fold(1.0, f64::min);
    assert!((2.0 * t - least).abs() < 1e-12 && positives.iter().all(|p| ink_fraction(p) >= t));
    // A card written before the field existed loads with skipping off.
    let mut old = serde_json::to_value(&card).unwrap();
    old.as_object_mut().unwrap().remove("blank_ink_fraction");
    let old: ModelCard = serde_json::from_value(old).unwrap();
    assert_eq!(old.blank_ink_fraction, 0.0);
    assert_eq!(folder, models.join(&card.id));
    assert_eq!(
        card.data.crop_library,
        dir.file_name().unwrap().to_str().unwrap()
    );
    assert_eq!(card.native_stride, 4);
    let log = std::fs::read_to_string(folder.join(LOG_FILE)).unwrap();
    assert_eq!(log.lines().count(), 9, "header plus one row per epoch");
    let (loaded_card, net) = load_model(&folder).unwrap();
    assert_eq!(
        (&loaded_card.id, &loaded_card.weights_sha256),
        (&card.id, &card.weights_sha256)
    );
    assert_eq!(loaded_card.architecture, card.architecture);
    assert!((loaded_card.validation.macro_f1 - card.validation.macro_f1).abs() < 1e-12);
    assert_eq!(
        weights_bytes(&net).unwrap(),
        weights_bytes(&a.network).unwrap()
    );

    // The loaded model agrees with the validation figure on the validation crops.
    let clf = Classifier::load(&folder).unwrap();
    assert_eq!(ScoreMapOptions::native(&clf).skip_below_ink, Some(t));
    assert_eq!(ScoreMapOptions::dense(&clf).skip_below_ink, None);
    let windows: Vec<&[u8]> = data
        .validation
        .iter()
        .map(|s| s.pixels.as_slice())
        .collect();
    let probs = clf.classify(&windows).unwrap();
    let right = probs
        .iter()
        .zip(&data.validation)
        .filter(|(p, s)| symtrust_trainer::train::argmax(p) == s.class)
        .count();
    assert!((right as f64 / windows.len() as f64 - card.validation.accuracy).abs() < 1e-9);
    for p in &probs {
        assert!((p.iter().sum::<f32>() - 1.0).abs() < 1e-5);
    }
}

#[test]
fn an_interrupted_run_writes_no_model_and_resumes_to_the_same_weights() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(&tmp.path().join("crops"), 8, 16, None);
    let data = Dataset::load(&dir, &classes(), WINDOW).unwrap();
    let arch = tiny_arch(4);
    let opts = options(5, 3);
    let models = tmp.path().join("models");
    let full = train(&data, &arch, &opts, None, false, &mut Silent).unwrap();

    // Batches per epoch: 16 * 3 + 32 = 80 crops / 16 = 5; stop in epoch 2.
    let err = train(
        &data,
        &arch,
        &opts,
        Some(&models),
        false,
        &mut StopAfter { after: 7, seen: 0 },
    )
    .unwrap_err();
    assert!(
        matches!(err, TrainerError::Interrupted { epochs_done: 1, .. }),
        "{err}"
    );
    assert!(!err.is_bad_input());
    let visible: Vec<_> = std::fs::read_dir(&models)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| !n.starts_with('.'))
        .collect();
    assert!(
        visible.is_empty(),
        "nothing that looks like a model: {visible:?}"
    );

    let resumed = train(&data, &arch, &opts, Some(&models), true, &mut Silent).unwrap();
    assert_eq!(resumed.log.len(), 3);
    assert_eq!(
        weights_bytes(&resumed.network).unwrap(),
        weights_bytes(&full.network).unwrap(),
        "resume repeats the uninterrupted run exactly"
    );

    // Other settings have no checkpoint to resume.
    let err = train(
        &data,
        &arch,
        &options(6, 3),
        Some(&models),
        true,
        &mut Silent,
    )
    .unwrap_err();
    assert!(matches!(err, TrainerError::NothingToResume { .. }), "{err}");
    assert!(err.is_bad_input());
}
