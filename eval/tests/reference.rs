//! Cross-checks against general-purpose reference libraries.
//!
//! Every expected value here comes from `tests/reference/reference.json`, written
//! by `tests/reference/make_reference.py` with scikit-learn 1.9.1, pycocotools
//! 2.0.11, mean-average-precision 2024.1.5.0, scipy 1.17.1 and numpy 2.4.6 (the
//! versions are also stored in the JSON
//! and checked below, so a regenerated file with other versions is noticed).
//! Tolerances: 1e-12 absolute where both sides compute the same closed formula
//! in double precision; looser where the reference is iterative (stated at the
//! check).

use serde_json::Value;
use symtrust_eval::bootstrap::quantile;
use symtrust_eval::calibration::{calibration, fit_platt};
use symtrust_eval::compare::{McNemarMethod, mcnemar};
use symtrust_eval::crop_eval::evaluate_crops;
use symtrust_eval::matching::MatchCriterion;
use symtrust_eval::sheet_eval::{SheetEvalConfig, SheetInput, TruthSymbol, evaluate_sheets};
use symtrust_labels::BBox;
use symtrust_labels::detections::Detection;

fn reference() -> Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/reference.json"
    );
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{path}: {e}"));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{path}: {e}"))
}

fn f(v: &Value) -> f64 {
    v.as_f64()
        .unwrap_or_else(|| panic!("expected a number, got {v}"))
}

fn opt(v: &Value) -> Option<f64> {
    v.as_f64()
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(f).collect()
}

fn close(what: &str, got: f64, want: f64, tol: f64) {
    assert!(
        (got - want).abs() <= tol,
        "{what}: got {got}, reference {want} (tolerance {tol})"
    );
}

fn close_opt(what: &str, got: Option<f64>, want: Option<f64>, tol: f64) {
    match (got, want) {
        (Some(g), Some(w)) => close(what, g, w, tol),
        (g, w) => assert_eq!(g, w, "{what}"),
    }
}

#[test]
fn reference_file_names_its_library_versions() {
    let r = reference();
    let v = &r["versions"];
    assert_eq!(v["scikit-learn"], "1.9.1");
    assert_eq!(v["pycocotools"], "2.0.11");
    assert_eq!(v["scipy"], "1.17.1");
    assert_eq!(v["numpy"], "2.4.6");
    assert_eq!(v["mean-average-precision"], "2024.1.5.0");
}

/// scikit-learn 1.9.1: confusion_matrix, precision_recall_fscore_support
/// (zero_division=nan), average_precision_score (step sum), precision_recall_curve,
/// roc_auc_score, one-vs-rest per class on 80 crops with tied scores.
#[test]
fn crop_metrics_match_scikit_learn() {
    check_crops(&reference()["crops"]);
}

/// scikit-learn 1.9.1, degenerate crop sets: every score equal (one threshold;
/// AP is the prevalence, ROC AUC 0.5, and numpy's argmax sends every crop to
/// the first class), and one class absent from the truth (its AP and ROC AUC
/// undefined: scikit-learn warns or raises, symtrust says "no data"; its
/// precision is 0 from the crops wrongly called it, its recall undefined).
#[test]
fn degenerate_crop_metrics_match_scikit_learn() {
    let r = reference();
    let cases = r["crops_degenerate"].as_array().unwrap();
    assert_eq!(cases.len(), 2);
    for c in cases {
        check_crops(c);
    }
}

fn check_crops(c: &Value) {
    let case = c["case"].as_str().unwrap_or("crops");
    let names: Vec<String> = c["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    let truth: Vec<usize> = c["truth"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap() as usize)
        .collect();
    let scores: Vec<Vec<f64>> = c["scores"].as_array().unwrap().iter().map(floats).collect();
    let e = evaluate_crops(&truth, &scores, &names).unwrap();
    let cm: Vec<Vec<u64>> = c["confusion_matrix"]
        .as_array()
        .unwrap()
        .iter()
        .map(|row| {
            row.as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_u64().unwrap())
                .collect()
        })
        .collect();
    assert_eq!(e.confusion.counts, cm, "confusion_matrix");
    for (k, want) in c["per_class"].as_array().unwrap().iter().enumerate() {
        let name = &format!("{case}: {}", names[k]);
        let fig = &e.per_class[k];
        assert_eq!(
            fig.support,
            want["support"].as_u64().unwrap(),
            "{name} support"
        );
        close_opt(
            &format!("{name} precision"),
            fig.precision,
            opt(&want["precision"]),
            1e-12,
        );
        close_opt(
            &format!("{name} recall"),
            fig.recall,
            opt(&want["recall"]),
            1e-12,
        );
        close_opt(&format!("{name} f1"), fig.f1, opt(&want["f1"]), 1e-12);
        let ovr = &e.one_vs_rest[k];
        if want["average_precision_score"].is_null() {
            // Absent from the truth: no data, not 0 or 1.
            assert_eq!(ovr.ap.step_sum, None, "{name} AP");
            assert_eq!(ovr.roc_auc, None, "{name} ROC AUC");
            continue;
        }
        close(
            &format!("{name} average_precision_score"),
            ovr.ap.step_sum.unwrap(),
            f(&want["average_precision_score"]),
            1e-12,
        );
        close(
            &format!("{name} roc_auc_score"),
            ovr.roc_auc.unwrap(),
            f(&want["roc_auc_score"]),
            1e-12,
        );
        let (t, p, rc) = (
            floats(&want["pr_thresholds"]),
            floats(&want["pr_precision"]),
            floats(&want["pr_recall"]),
        );
        assert_eq!(
            ovr.pr.points.len(),
            t.len(),
            "{name} precision_recall_curve length"
        );
        for (i, pt) in ovr.pr.points.iter().enumerate() {
            assert_eq!(pt.threshold, t[i], "{name} threshold #{i}");
            close(&format!("{name} precision #{i}"), pt.precision, p[i], 1e-12);
            close(&format!("{name} recall #{i}"), pt.recall, rc[i], 1e-12);
        }
    }
}

/// scikit-learn 1.9.1: brier_score_loss and calibration_curve(strategy="uniform",
/// n_bins=10); ECE computed from calibration_curve with numpy bin counts.
#[test]
fn calibration_matches_scikit_learn() {
    let r = reference();
    let c = &r["calibration"];
    let s = floats(&c["scores"]);
    let y: Vec<bool> = c["outcomes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_bool().unwrap())
        .collect();
    let items: Vec<(f64, bool)> = s.into_iter().zip(y).collect();
    let cal = calibration(&items, c["n_bins"].as_u64().unwrap() as usize).unwrap();
    close(
        "brier_score_loss",
        cal.brier,
        f(&c["brier_score_loss"]),
        1e-12,
    );
    let nonempty: Vec<_> = cal.bins.iter().filter(|b| b.count > 0).collect();
    let (pt, pp) = (
        floats(&c["calibration_curve_prob_true"]),
        floats(&c["calibration_curve_prob_pred"]),
    );
    let counts: Vec<u64> = c["bin_counts_nonempty"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap())
        .collect();
    assert_eq!(nonempty.len(), pt.len(), "non-empty bins");
    for (i, b) in nonempty.iter().enumerate() {
        assert_eq!(b.count, counts[i], "bin count #{i}");
        close(
            &format!("prob_true #{i}"),
            b.observed.unwrap(),
            pt[i],
            1e-12,
        );
        close(
            &format!("prob_pred #{i}"),
            b.mean_score.unwrap(),
            pp[i],
            1e-12,
        );
    }
    close("ECE", cal.ece, f(&c["ece_from_calibration_curve"]), 1e-12);
}

/// scikit-learn 1.9.1: LogisticRegression(C=inf, tol=1e-12) on logit(score).
/// Tolerance 1e-5: lbfgs stops on a gradient tolerance, Newton converges further.
#[test]
fn platt_scaling_matches_unpenalised_logistic_regression() {
    let r = reference();
    let c = &r["platt"];
    let s = floats(&c["scores"]);
    let y: Vec<bool> = c["outcomes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_bool().unwrap())
        .collect();
    let items: Vec<(f64, bool)> = s.into_iter().zip(y).collect();
    let fit = fit_platt(&items).unwrap();
    close("Platt slope", fit.a, f(&c["a"]), 1e-5);
    close("Platt offset", fit.b, f(&c["b"]), 1e-5);
}

/// scipy 1.17.1: binomtest(b, b + c, 0.5).pvalue (two-sided) and
/// chi2.sf((|b - c| - 1)^2 / (b + c), 1). Relative tolerance 1e-10.
#[test]
fn mcnemar_matches_scipy() {
    let r = reference();
    for row in r["mcnemar"].as_array().unwrap() {
        let (b, c) = (
            row["b"].as_u64().unwrap() as usize,
            row["c"].as_u64().unwrap() as usize,
        );
        // b crops only the champion gets right, c only the challenger, 3 both right.
        let mut champ = vec![true; b];
        champ.extend(vec![false; c]);
        champ.extend([true; 3]);
        let mut chall = vec![false; b];
        chall.extend(vec![true; c]);
        chall.extend([true; 3]);
        let exact = mcnemar(&champ, &chall, u64::MAX).unwrap();
        assert_eq!(exact.method, McNemarMethod::ExactBinomial);
        let want = f(&row["exact_p"]);
        assert!(
            (exact.p_value - want).abs() <= 1e-10 * want,
            "b={b} c={c}: exact {} vs scipy {want}",
            exact.p_value
        );
        let chi = mcnemar(&champ, &chall, 0).unwrap();
        assert_eq!(chi.method, McNemarMethod::ChiSquareCorrected);
        close(
            &format!("b={b} c={c} statistic"),
            chi.statistic.unwrap(),
            f(&row["chi2_statistic"]),
            1e-12,
        );
        let want = f(&row["chi2_p"]);
        assert!(
            (chi.p_value - want).abs() <= 1e-10 * want,
            "b={b} c={c}: chi2 {} vs scipy {want}",
            chi.p_value
        );
        // The default switch at 25 discordant crops picks one of the two.
        let auto = mcnemar(&champ, &chall, 25).unwrap();
        let expect = if b + c < 25 {
            McNemarMethod::ExactBinomial
        } else {
            McNemarMethod::ChiSquareCorrected
        };
        assert_eq!(auto.method, expect);
    }
}

/// numpy 2.4.6: percentile with the default linear method.
#[test]
fn quantile_matches_numpy_percentile() {
    let r = reference();
    let q = &r["quantile"];
    let v = floats(&q["values"]);
    for (level, want) in floats(&q["levels"])
        .into_iter()
        .zip(floats(&q["numpy_percentile_linear"]))
    {
        close(
            &format!("quantile {level}"),
            quantile(&v, level).unwrap(),
            want,
            1e-12,
        );
    }
}

fn coco_sheets(c: &Value) -> Vec<SheetInput> {
    let bbox = |v: &Value| {
        let b = floats(v);
        BBox::new(b[0], b[1], b[2], b[3])
    };
    c["sheets"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| {
            let sheet = s["sheet"].as_str().unwrap().to_string();
            SheetInput {
                truths: s["truths"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|t| TruthSymbol {
                        class: t["class"].as_str().unwrap().into(),
                        bbox: bbox(&t["bbox"]),
                    })
                    .collect(),
                detections: s["detections"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|d| {
                        let b = bbox(&d["bbox"]);
                        Detection {
                            sheet: sheet.clone(),
                            class: d["class"].as_str().unwrap().into(),
                            score: f(&d["score"]),
                            x: b.x,
                            y: b.y,
                            w: b.w,
                            h: b.h,
                        }
                    })
                    .collect(),
                ignore: vec![],
                sheet,
            }
        })
        .collect()
}

/// pycocotools 2.0.11: COCOeval(iouType="bbox") with maxDets [1, 10, 1000] on six
/// synthetic sheets; `stats[1]` (AP at IoU 0.5, 101-point, area "all") against
/// our mAP 101-point, the per-category precision arrays at IoU 0.5 against our
/// per-class 101-point AP, and the IoU thresholds 0.5..0.9 against our sweep.
/// The generator ensures no score ties and no IoU within 1e-6 of a threshold,
/// where the two tie rules (documented in matching.rs) would differ.
#[test]
fn sheet_ap_matches_cocoeval() {
    let r = reference();
    let c = &r["coco"];
    let names: Vec<String> = c["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    let cfg = SheetEvalConfig {
        bootstrap: None,
        ..SheetEvalConfig::default()
    };
    let e = evaluate_sheets(&coco_sheets(c), &names, &cfg).unwrap();
    close(
        "COCOeval stats[1]",
        e.map_101.unwrap(),
        f(&c["stats_1_ap50_101point"]),
        1e-12,
    );
    let sweep = c["iou_sweep"].as_array().unwrap();
    let at_half = sweep[0]["per_class_ap101"].as_array().unwrap();
    for (k, want) in at_half.iter().enumerate() {
        close_opt(
            &format!("{} AP101 at IoU 0.5", names[k]),
            e.per_class[k].figures.ap.points_101,
            opt(want),
            1e-12,
        );
    }
    // 'reducer' has detections but no ground truth: undefined, left out of the mean.
    assert_eq!(e.per_class[3].figures.ap.points_101, None);
    for row in sweep {
        let t = f(&row["min_iou"]);
        let ours = e
            .iou_sweep
            .iter()
            .find(|s| (s.min_iou - t).abs() < 1e-12)
            .unwrap();
        close(
            &format!("mAP101 at IoU {t}"),
            ours.map_101.unwrap(),
            f(&row["map101"]),
            1e-12,
        );
    }
}

/// pycocotools 2.0.11: AP averaged over COCOeval's ten IoU thresholds
/// 0.50:0.05:0.95 (101-point, area "all", maxDets 1000) on the same six sheets,
/// against the mean over the same thresholds of our 101-point mAP; tolerance 1e-6
/// (both sides sum the same values in another order, so agreement is far closer).
///
/// COCOeval's known quirks, and how symtrust handles each rather than copying it:
/// - **maxDets cap**: it keeps at most `maxDets` detections per image and
///   category (100 by default), so a dense P&ID sheet silently loses recall and
///   AP; and `summarize()` computes this very figure (`stats[0]`) with a
///   hard-coded 100, whatever `params.maxDets` says. symtrust has no cap by
///   default (`detect --max-per-sheet` is a visible setting); the reference is
///   computed with maxDets 1000, above every sheet's count, from `eval["precision"]`.
/// - **area ranges**: COCOeval also reports small/medium/large (32^2 and 96^2
///   px^2), ignoring ground truth outside the range. Symbol sizes on a sheet
///   say nothing about difficulty, so symtrust has no area ranges; the
///   reference uses "all", which spans every box.
/// - **crowd regions**: a detection on an `iscrowd` annotation is neither a
///   true nor a false positive, and a crowd region can absorb many detections.
///   symtrust's counterpart is the ignore region of a label document (legend,
///   title block), applied by box centre to ground truth and detections alike
///   before matching; the reference has no crowd annotations.
/// - **101-point recall grid**: precision is read at `linspace(0, 1, 101)` with
///   `searchsorted(..., side="left")`: the first point whose recall reaches the
///   level, 0 where it is never reached. `ap::ap_101` does the same on the
///   same grid, computed as numpy's linspace computes it (`ap::recall_levels_101`).
/// - **monotone precision**: COCOeval replaces each precision by the largest
///   at any higher recall before sampling (the envelope); `ap::ap_101` samples
///   the same envelope. COCOeval ranks every detection on its own (mergesort by
///   score), where symtrust groups tied scores into one point so AP does not
///   depend on input order; and when two free ground-truth boxes fit equally
///   well COCOeval takes the later one, symtrust the first. The generator keeps
///   scores distinct and IoUs clear of every threshold, where the rules agree.
/// - **thresholds**: COCOeval matches at `IoU >= t` with `t` from numpy's
///   linspace (0.8999999999999999 for 0.9); the thresholds are taken from the
///   reference file as it holds them.
#[test]
fn sheet_ap_over_iou_050_095_matches_cocoeval() {
    let r = reference();
    let c = &r["coco"];
    let names: Vec<String> = c["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    let thresholds = floats(&c["iou_thresholds"]);
    assert_eq!(thresholds.len(), 10, "COCOeval iouThrs 0.50:0.05:0.95");
    let sheets = coco_sheets(c);
    let mut sum = 0.0;
    for &t in &thresholds {
        let cfg = SheetEvalConfig {
            criterion: MatchCriterion::Iou { min_iou: t },
            bootstrap: None,
            ..SheetEvalConfig::default()
        };
        sum += evaluate_sheets(&sheets, &names, &cfg)
            .unwrap()
            .map_101
            .unwrap();
    }
    close(
        "COCOeval AP at IoU 0.50:0.95",
        sum / thresholds.len() as f64,
        f(&c["ap50_95_101point"]),
        1e-6,
    );
}

/// mean-average-precision 2024.1.5.0 (its all-point interpolation, the Pascal
/// VOC 2010 definition, with mpolicy="soft"; boxes passed in its +1 pixel
/// convention so areas agree, see make_reference.py) on the same six sheets:
/// per-class all-point AP and the all-point mAP at every IoU of our sweep.
#[test]
fn sheet_all_point_ap_matches_mean_average_precision() {
    let r = reference();
    let c = &r["coco"];
    let names: Vec<String> = c["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    let cfg = SheetEvalConfig {
        bootstrap: None,
        ..SheetEvalConfig::default()
    };
    let e = evaluate_sheets(&coco_sheets(c), &names, &cfg).unwrap();
    for row in r["voc"]["iou_sweep"].as_array().unwrap() {
        let t = f(&row["min_iou"]);
        let ours = e
            .iou_sweep
            .iter()
            .find(|s| (s.min_iou - t).abs() < 1e-12)
            .unwrap();
        close(
            &format!("all-point mAP at IoU {t}"),
            ours.map_all_point.unwrap(),
            f(&row["map_all_point"]),
            1e-12,
        );
        if (t - 0.5).abs() < 1e-12 {
            for (k, want) in row["per_class_ap_all_point"]
                .as_array()
                .unwrap()
                .iter()
                .enumerate()
            {
                close_opt(
                    &format!("{} all-point AP at IoU 0.5", names[k]),
                    e.per_class[k].figures.ap.all_point,
                    opt(want),
                    1e-12,
                );
            }
        }
    }
}
