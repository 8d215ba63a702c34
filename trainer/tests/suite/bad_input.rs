//! Bad input: clear errors that name the file, nothing half-written.

use super::library::{WINDOW, classes, tiny_arch, write_library};
use symtrust_trainer::card::{ModelInputs, WEIGHTS_FILE, write_model};
use symtrust_trainer::train::Silent;
use symtrust_trainer::{Classifier, Dataset, TrainOptions, TrainerError, train};

fn quick() -> TrainOptions {
    TrainOptions {
        epochs: 1,
        batch_size: 32,
        learning_rate: 1e-3,
        weight_decay: 0.0,
        patience: 0,
        seed: 1,
        augment: false,
    }
}

#[test]
fn a_changed_crop_image_is_refused_with_its_file() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(tmp.path(), 1, 8, None);
    let victim = dir.join("images/000003.png");
    let mut bytes = std::fs::read(&victim).unwrap();
    bytes.push(0);
    std::fs::write(&victim, bytes).unwrap();
    let err = Dataset::load(&dir, &classes(), WINDOW).unwrap_err();
    assert!(err.to_string().contains("000003.png"), "{err}");
    assert!(err.is_bad_input());
}

#[test]
fn an_edited_index_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(tmp.path(), 1, 8, None);
    let index = dir.join("index.csv");
    let text = std::fs::read_to_string(&index)
        .unwrap()
        .replacen("ring", "box", 1);
    std::fs::write(&index, text).unwrap();
    let err = Dataset::load(&dir, &classes(), WINDOW).unwrap_err();
    assert!(err.to_string().contains("index.csv"), "{err}");
    assert!(err.is_bad_input());
}

#[test]
fn a_window_that_does_not_match_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(tmp.path(), 1, 8, None);
    let err = Dataset::load(&dir, &classes(), 100).unwrap_err();
    assert!(matches!(err, TrainerError::WindowMismatch { .. }), "{err}");
    assert!(err.to_string().contains("manifest.json"), "{err}");

    let data = Dataset::load(&dir, &classes(), WINDOW).unwrap();
    let mut arch = tiny_arch(4);
    arch.window = 30;
    let err = train(&data, &arch, &quick(), None, false, &mut Silent).unwrap_err();
    assert!(matches!(err, TrainerError::WindowMismatch { .. }), "{err}");

    let clf = Classifier::from_network(
        symtrust_trainer::model::Network::init(&tiny_arch(4), 1, candle_core::DType::F32).unwrap(),
        data.classes.clone(),
    )
    .unwrap();
    let short = vec![255u8; 10];
    let err = clf.classify(&[&short]).unwrap_err();
    assert!(err.to_string().contains("window 0"), "{err}");
}

#[test]
fn an_empty_class_is_refused_by_name() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(tmp.path(), 1, 8, Some(2));
    let err = Dataset::load(&dir, &classes(), WINDOW).unwrap_err();
    assert!(err.to_string().contains("\"box\""), "{err}");
    assert!(err.is_bad_input());
}

#[test]
fn site_classes_that_differ_from_the_library_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(tmp.path(), 1, 8, None);
    let mut cls = classes();
    cls.pop();
    let err = Dataset::load(&dir, &cls, WINDOW).unwrap_err();
    assert!(err.to_string().contains("site.toml"), "{err}");
}

#[test]
fn missing_or_tampered_weights_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = write_library(&tmp.path().join("crops"), 2, 8, None);
    let data = Dataset::load(&dir, &classes(), WINDOW).unwrap();
    let opts = quick();
    let outcome = train(&data, &tiny_arch(4), &opts, None, false, &mut Silent).unwrap();
    let inputs = ModelInputs {
        classes: &data.classes,
        source: &data.source,
        options: &opts,
        train_counts: data.class_counts(&data.train),
        validation_counts: data.class_counts(&data.validation),
    };
    let (_, folder) = write_model(&tmp.path().join("models"), &outcome, &inputs).unwrap();
    let weights = folder.join(WEIGHTS_FILE);
    let mut bytes = std::fs::read(&weights).unwrap();
    let last = bytes.len() - 1;
    bytes[last] ^= 1;
    std::fs::write(&weights, &bytes).unwrap();
    let err = Classifier::load(&folder).unwrap_err();
    assert!(matches!(err, TrainerError::WeightsTampered { .. }), "{err}");
    assert!(err.to_string().contains(WEIGHTS_FILE));

    std::fs::remove_file(&weights).unwrap();
    let err = Classifier::load(&folder).unwrap_err();
    assert!(err.to_string().contains(WEIGHTS_FILE), "{err}");
    assert!(err.is_bad_input());

    let err = Classifier::load(&tmp.path().join("models")).unwrap_err();
    assert!(err.to_string().contains("card.json"), "{err}");
}
