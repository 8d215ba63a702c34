//! Every result type goes into `metrics.json`: check that a full evaluation
//! survives a JSON round trip unchanged (no NaN or infinity that JSON cannot hold).

use symtrust_eval::bootstrap::BootstrapConfig;
use symtrust_eval::crop_eval::{CropEvaluation, evaluate_crops};
use symtrust_eval::sheet_eval::{
    SheetEvalConfig, SheetEvaluation, SheetInput, TruthSymbol, evaluate_sheets,
};
use symtrust_labels::BBox;
use symtrust_labels::detections::Detection;

#[test]
fn sheet_evaluation_round_trips_through_json() {
    let names: Vec<String> = vec!["gate_valve".into(), "pump".into(), "reducer".into()];
    let b = |x: f64| BBox::new(x, 10.0, 20.0, 20.0);
    let d = |class: &str, score: f64, x: f64| Detection {
        sheet: "north-01".into(),
        class: class.into(),
        score,
        x,
        y: 10.0,
        w: 20.0,
        h: 20.0,
    };
    let sheets = vec![SheetInput {
        sheet: "north-01".into(),
        truths: vec![
            TruthSymbol {
                class: "gate_valve".into(),
                bbox: b(0.0),
            },
            TruthSymbol {
                class: "pump".into(),
                bbox: b(100.0),
            },
        ],
        detections: vec![
            d("gate_valve", 0.9, 1.0),
            d("pump", 0.4, 300.0),
            d("reducer", 0.3, 100.0),
        ],
        ignore: vec![BBox::new(900.0, 900.0, 10.0, 10.0)],
    }];
    let cfg = SheetEvalConfig {
        bootstrap: Some(BootstrapConfig {
            resamples: 50,
            seed: 2,
            level: 0.95,
        }),
        ..SheetEvalConfig::default()
    };
    let e = evaluate_sheets(&sheets, &names, &cfg).unwrap();
    let text = serde_json::to_string(&e).unwrap();
    let back: SheetEvaluation = serde_json::from_str(&text).unwrap();
    assert_eq!(back, e);
    // 'reducer' has no ground truth: its AP is null, not NaN.
    assert!(text.contains("\"all_point\":null"), "{text}");
}

#[test]
fn crop_evaluation_round_trips_through_json() {
    let names: Vec<String> = vec!["background".into(), "pump".into()];
    let e = evaluate_crops(
        &[0, 1, 1],
        &[vec![0.7, 0.3], vec![0.2, 0.8], vec![0.6, 0.4]],
        &names,
    )
    .unwrap();
    let back: CropEvaluation = serde_json::from_str(&serde_json::to_string(&e).unwrap()).unwrap();
    assert_eq!(back, e);
}
