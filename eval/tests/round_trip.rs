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

#[test]
fn comparison_and_verdict_round_trip_through_json() {
    use symtrust_eval::compare::{
        ApKind, PairedApComparison, Verdict, VerdictRule, paired_bootstrap_ap, verdict,
    };
    use symtrust_eval::matching::MatchCriterion;
    use symtrust_eval::sheet_eval::outcomes_of;
    let names: Vec<String> = vec!["gate_valve".into(), "pump".into()];
    let sheet = |id: &str, shift: f64| SheetInput {
        sheet: id.into(),
        truths: vec![TruthSymbol {
            class: "pump".into(),
            bbox: BBox::new(0.0, 0.0, 20.0, 20.0),
        }],
        detections: vec![Detection {
            sheet: id.into(),
            class: "pump".into(),
            score: 0.8,
            x: shift,
            y: 0.0,
            w: 20.0,
            h: 20.0,
        }],
        ignore: vec![],
    };
    let champion = outcomes_of(
        &[sheet("s1", 0.0), sheet("s2", 0.0)],
        &names,
        &MatchCriterion::default(),
    )
    .unwrap();
    // The challenger's box on s2 is shifted by 15 px: IoU 5/35, a miss.
    let challenger = outcomes_of(
        &[sheet("s1", 0.0), sheet("s2", 15.0)],
        &names,
        &MatchCriterion::default(),
    )
    .unwrap();
    let cfg = BootstrapConfig {
        resamples: 100,
        seed: 8,
        level: 0.95,
    };
    let c = paired_bootstrap_ap(&champion, &challenger, &names, ApKind::AllPoint, &cfg).unwrap();
    // Champion: both pumps found at 0.8, AP 1. Challenger: one hit and one miss
    // tied at 0.8 form one point (P = R = 0.5), AP 0.25. Gate valve has no
    // ground truth and drops out of the mean, so the mAP difference is -0.75.
    assert_eq!(c.map.difference.estimate, Some(-0.75));
    let back: PairedApComparison =
        serde_json::from_str(&serde_json::to_string(&c).unwrap()).unwrap();
    assert_eq!(back, c);
    let v = verdict(&c, 0.1, VerdictRule::NonInferiority).unwrap();
    assert!(!v.promote);
    let back: Verdict = serde_json::from_str(&serde_json::to_string(&v).unwrap()).unwrap();
    assert_eq!(back, v);
}
