"""Generates eval/tests/reference/reference.json, the external reference values
that eval/tests/reference.rs checks symtrust-eval against.

Run from the repository root in a throwaway virtual environment:

    python3 -m venv /tmp/refenv
    /tmp/refenv/bin/pip install scikit-learn pycocotools scipy numpy mean-average-precision
    /tmp/refenv/bin/python eval/tests/reference/make_reference.py [OUTPUT.json]

OUTPUT.json defaults to reference.json next to this script;
eval/tests/reference/check_live.sh passes a temporary path and compares.

All inputs are synthetic (a fictional plant's symbol classes, random boxes and
scores from a seeded numpy generator) and are written into the JSON next to the
values the reference libraries compute from them, together with the library
versions, so the Rust tests need nothing but the JSON.
"""

import io
import contextlib
import json
import math
import os
import sys

import numpy as np
import pycocotools
import scipy
import sklearn
from importlib.metadata import version
from pycocotools.coco import COCO
from pycocotools.cocoeval import COCOeval
from scipy.stats import binomtest, chi2
from sklearn.calibration import calibration_curve
from sklearn.linear_model import LogisticRegression
from mean_average_precision import MetricBuilder
from sklearn.metrics import (
    average_precision_score,
    brier_score_loss,
    confusion_matrix,
    precision_recall_curve,
    precision_recall_fscore_support,
    roc_auc_score,
)

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "reference.json")
CLASSES = ["background", "gate_valve", "pump", "instrument_bubble"]


def nan_to_none(x):
    if isinstance(x, float) and math.isnan(x):
        return None
    return x


def crop_reference(rng):
    """Crop-level data: true class and per-class probability rows."""
    n = 80
    truth = rng.integers(0, len(CLASSES), size=n)
    logits = rng.normal(size=(n, len(CLASSES)))
    logits[np.arange(n), truth] += 1.2
    probs = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
    # Two decimals, so tied scores occur (tie handling is part of the check).
    probs = np.round(probs, 2)
    return crop_case(truth, probs)


def crop_case(truth, probs):
    """Every crop-level reference figure of one set of crops."""
    pred = probs.argmax(axis=1)  # numpy argmax: ties to the lowest index
    labels = list(range(len(CLASSES)))
    cm = confusion_matrix(truth, pred, labels=labels)
    p, r, f, s = precision_recall_fscore_support(
        truth, pred, labels=labels, zero_division=np.nan
    )
    per_class = []
    for k in labels:
        y = (truth == k).astype(int)
        sc = probs[:, k]
        if y.sum() == 0:
            # A class absent from the truth: AP and ROC AUC are undefined
            # (scikit-learn warns or raises); symtrust reports "no data".
            per_class.append(
                {
                    "average_precision_score": None,
                    "roc_auc_score": None,
                    "pr_thresholds": None,
                    "pr_precision": None,
                    "pr_recall": None,
                    "precision": nan_to_none(float(p[k])),
                    "recall": nan_to_none(float(r[k])),
                    "f1": nan_to_none(float(f[k])),
                    "support": int(s[k]),
                }
            )
            continue
        prec, rec, thr = precision_recall_curve(y, sc)
        per_class.append(
            {
                "average_precision_score": float(average_precision_score(y, sc)),
                "roc_auc_score": float(roc_auc_score(y, sc)),
                # precision_recall_curve in descending threshold order, without
                # the final (precision 1, recall 0) point it appends.
                "pr_thresholds": [float(t) for t in thr[::-1]],
                "pr_precision": [float(v) for v in prec[:-1][::-1]],
                "pr_recall": [float(v) for v in rec[:-1][::-1]],
                "precision": nan_to_none(float(p[k])),
                "recall": nan_to_none(float(r[k])),
                "f1": nan_to_none(float(f[k])),
                "support": int(s[k]),
            }
        )
    return {
        "classes": CLASSES,
        "truth": [int(t) for t in truth],
        "scores": [[float(v) for v in row] for row in probs],
        "confusion_matrix": cm.tolist(),
        "per_class": per_class,
    }


def degenerate_crop_references(rng):
    """Degenerate crop sets: every score equal (one threshold, all crops
    predicted background by the lowest-index tie rule), and one class absent
    from the truth."""
    n = 30
    equal = crop_case(rng.integers(0, len(CLASSES), size=n), np.full((n, len(CLASSES)), 0.25))
    n = 40
    truth = rng.integers(0, len(CLASSES) - 1, size=n)
    logits = rng.normal(size=(n, len(CLASSES)))
    logits[np.arange(n), truth] += 1.0
    probs = np.round(np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True), 2)
    absent = crop_case(truth, probs)
    return [{"case": "all scores equal", **equal}, {"case": "instrument_bubble absent", **absent}]


def calibration_reference(rng):
    """Scores and outcomes for Brier, reliability bins and ECE."""
    n_bins = 10
    s = np.round(rng.uniform(0.0, 1.0, size=300), 4)
    # Keep away from bin edges: scikit-learn puts an edge value in the lower
    # bin, symtrust in the upper one (both documented), so edges are avoided.
    edges = np.linspace(0, 1, n_bins + 1)
    s = np.where(np.min(np.abs(s[:, None] - edges[None, :]), axis=1) < 1e-3, s + 0.002, s)
    y = (rng.uniform(size=s.size) < s**1.3).astype(int)
    prob_true, prob_pred = calibration_curve(y, s, n_bins=n_bins, strategy="uniform")
    counts = np.bincount(np.searchsorted(edges[1:-1], s), minlength=n_bins)
    nonzero = counts[counts > 0]
    ece = float(np.sum(nonzero / s.size * np.abs(prob_true - prob_pred)))
    return {
        "scores": [float(v) for v in s],
        "outcomes": [bool(v) for v in y],
        "n_bins": n_bins,
        "brier_score_loss": float(brier_score_loss(y, s)),
        "calibration_curve_prob_true": [float(v) for v in prob_true],
        "calibration_curve_prob_pred": [float(v) for v in prob_pred],
        "bin_counts_nonempty": [int(v) for v in nonzero],
        "ece_from_calibration_curve": ece,
    }


def platt_reference(rng):
    """Validation scores for Platt scaling, fitted by unpenalised logistic regression."""
    s = rng.uniform(0.02, 0.98, size=400)
    z = 1.7 * np.log(s / (1 - s)) - 0.4
    y = (rng.uniform(size=s.size) < 1 / (1 + np.exp(-z))).astype(int)
    x = np.log(s / (1 - s)).reshape(-1, 1)
    lr = LogisticRegression(C=np.inf, tol=1e-12, max_iter=100000).fit(x, y)
    return {
        "scores": [float(v) for v in s],
        "outcomes": [bool(v) for v in y],
        "a": float(lr.coef_[0, 0]),
        "b": float(lr.intercept_[0]),
    }


def mcnemar_reference():
    """(b, c) discordant counts -> exact binomial or corrected chi-square p-values."""
    rows = []
    for b, c in [(1, 5), (0, 6), (3, 12), (7, 7), (10, 14), (12, 13), (30, 45), (100, 140), (60, 20)]:
        n = b + c
        row = {"b": b, "c": c, "exact_p": float(binomtest(b, n, 0.5).pvalue)}
        stat = (abs(b - c) - 1) ** 2 / n
        row["chi2_statistic"] = float(stat)
        row["chi2_p"] = float(chi2.sf(stat, 1))
        rows.append(row)
    return rows


def quantile_reference(rng):
    v = rng.normal(size=37)
    qs = [0.0, 0.025, 0.25, 0.5, 0.8, 0.975, 1.0]
    return {
        "values": [float(x) for x in v],
        "levels": qs,
        "numpy_percentile_linear": [float(np.percentile(v, 100 * q)) for q in qs],
    }


COCO_CLASSES = ["gate_valve", "pump", "instrument_bubble", "reducer"]
SWEEP = [0.5, 0.6, 0.7, 0.8, 0.9]
# The IoU sweep of symtrust.
SYMTRUST_SWEEP = [0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9]
# Every IoU the generated data must keep clear of: the symtrust sweep and
# COCOeval's thresholds 0.50, 0.55, ..., 0.95.
GUARDED = SYMTRUST_SWEEP + [0.55, 0.65, 0.75, 0.85, 0.95]


def iou(a, b):
    ax2, ay2, bx2, by2 = a[0] + a[2], a[1] + a[3], b[0] + b[2], b[1] + b[3]
    w = min(ax2, bx2) - max(a[0], b[0])
    h = min(ay2, by2) - max(a[1], b[1])
    if w <= 0 or h <= 0:
        return 0.0
    inter = w * h
    return inter / (a[2] * a[3] + b[2] * b[3] - inter)


def make_sheets(rng):
    """Synthetic held-out sheets: ground truth and detections with jitter,
    duplicates, class confusions and false alarms. 'reducer' has detections
    but no ground truth (its AP is undefined and left out of the mean)."""
    sheets = []
    for s in range(6):
        gts, dets = [], []
        for _ in range(int(rng.integers(5, 10))):
            c = int(rng.integers(0, 3))
            w, h = float(rng.uniform(30, 70)), float(rng.uniform(30, 70))
            box = [round(float(rng.uniform(0, 900)), 1), round(float(rng.uniform(0, 600)), 1), round(w, 1), round(h, 1)]
            gts.append({"class": COCO_CLASSES[c], "bbox": box})
            for dup in range(2):
                if (dup == 0 and rng.uniform() < 0.85) or (dup == 1 and rng.uniform() < 0.2):
                    # Mostly tight boxes, some sloppy ones, so the IoU sweep
                    # sees matches come and go across 0.5 to 0.9.
                    tight = rng.uniform() < 0.7
                    jx, jy = rng.uniform(-0.06, 0.06, size=2) if tight else rng.uniform(-0.3, 0.3, size=2)
                    sx, sy = rng.uniform(0.95, 1.05, size=2) if tight else rng.uniform(0.8, 1.25, size=2)
                    dbox = [round(box[0] + jx * box[2], 1), round(box[1] + jy * box[3], 1), round(box[2] * sx, 1), round(box[3] * sy, 1)]
                    dc = c if rng.uniform() < 0.85 else int(rng.integers(0, 3))
                    dets.append({"class": COCO_CLASSES[dc], "bbox": dbox, "score": float(rng.uniform(0.3, 1.0))})
        for _ in range(3):
            c = int(rng.integers(0, 4))
            box = [round(float(rng.uniform(0, 900)), 1), round(float(rng.uniform(0, 600)), 1), 40.0, 40.0]
            dets.append({"class": COCO_CLASSES[c], "bbox": box, "score": float(rng.uniform(0.05, 0.7))})
        for d in dets:
            d["score"] = round(d["score"], 6)
        sheets.append({"sheet": f"held-{s:02d}", "truths": gts, "detections": dets})
    return sheets


def sheets_are_unambiguous(sheets):
    scores = [d["score"] for s in sheets for d in s["detections"]]
    if len(set(scores)) != len(scores):
        return False  # no score ties: COCOeval ranks per detection
    for s in sheets:
        for d in s["detections"]:
            ious = sorted(iou(d["bbox"], g["bbox"]) for g in s["truths"])
            if any(abs(i - t) < 1e-6 for i in ious for t in GUARDED):
                return False
            if any(a > 0 and abs(a - b) < 1e-9 for a, b in zip(ious, ious[1:])):
                return False  # exactly equal IoUs: tie rules differ
    return True


def coco_reference(rng):
    while True:
        sheets = make_sheets(rng)
        if sheets_are_unambiguous(sheets):
            break
    cats = [{"id": i + 1, "name": n} for i, n in enumerate(COCO_CLASSES)]
    images, anns, dets = [], [], []
    for i, s in enumerate(sheets):
        images.append({"id": i + 1, "file_name": s["sheet"] + ".png", "width": 1000, "height": 700})
        for g in s["truths"]:
            anns.append(
                {
                    "id": len(anns) + 1,
                    "image_id": i + 1,
                    "category_id": COCO_CLASSES.index(g["class"]) + 1,
                    "bbox": g["bbox"],
                    "area": g["bbox"][2] * g["bbox"][3],
                    "iscrowd": 0,
                }
            )
        for d in s["detections"]:
            dets.append(
                {"image_id": i + 1, "category_id": COCO_CLASSES.index(d["class"]) + 1, "bbox": d["bbox"], "score": d["score"]}
            )
    with contextlib.redirect_stdout(io.StringIO()):
        gt = COCO()
        gt.dataset = {"images": images, "annotations": anns, "categories": cats}
        gt.createIndex()
        dt = gt.loadRes(dets)
        ev = COCOeval(gt, dt, iouType="bbox")
        # maxDets large enough that no sheet's detections are cut; stats[1]
        # uses maxDets[2] and area range 'all', which spans every box here.
        ev.params.maxDets = [1, 10, 1000]
        ev.evaluate()
        ev.accumulate()
        ev.summarize()
    prec = ev.eval["precision"]  # [iou, recall, class, area, maxDets]
    thr = list(ev.params.iouThrs)
    # summarize() computes stats[0] with a hard-coded maxDets=100, which is not
    # among the maxDets set above (it reports -1); the same formula
    # (mean of the defined entries) at maxDets[2] = 1000 and area "all":
    p_all = prec[:, :, :, 0, 2]
    ap50_95 = float(np.mean(p_all[p_all > -1]))

    def class_ap(t_index, k):
        p = prec[t_index, :, k, 0, 2]
        return None if np.all(p == -1) else float(np.mean(p))

    sweep = []
    for t in SWEEP:
        ti = int(np.argmin(np.abs(np.array(thr) - t)))
        per = [class_ap(ti, k) for k in range(len(COCO_CLASSES))]
        defined = [v for v in per if v is not None]
        sweep.append({"min_iou": t, "per_class_ap101": per, "map101": float(np.mean(defined))})
    return sheets, {
        "classes": COCO_CLASSES,
        "sheets": sheets,
        "stats_1_ap50_101point": float(ev.stats[1]),
        # AP averaged over IoU 0.50:0.05:0.95 (101-point, area "all", maxDets[2]),
        # and the thresholds as COCOeval holds them (numpy linspace values).
        "ap50_95_101point": ap50_95,
        "iou_thresholds": [float(t) for t in thr],
        "iou_sweep": sweep,
    }


def voc_reference(sheets):
    """All-point interpolated AP (Pascal VOC 2010 on) from the
    mean-average-precision package on the same sheets as the COCO check.

    The package uses the VOC devkit's +1 pixel box convention, so boxes are
    passed as [x, y, x + w - 1, y + h - 1], which makes its areas and
    intersections equal to symtrust's half-open [x, x + w) boxes. mpolicy="soft"
    is its COCO-style matching (best-IoU unmatched ground truth), the rule
    symtrust uses; its strict IoU > t equals our IoU >= t here because no IoU
    lies within 1e-6 of a threshold. _evaluate_class is called directly because
    value() stores APs as float32 (metric_fn is the
    evaluator behind the default adapter).
    """
    metric = MetricBuilder.build_evaluation_metric("map_2d", async_mode=False, num_classes=len(COCO_CLASSES))
    for s in sheets:
        def corners(b):
            return [b[0], b[1], b[0] + b[2] - 1, b[1] + b[3] - 1]

        preds = np.array(
            [corners(d["bbox"]) + [COCO_CLASSES.index(d["class"]), d["score"]] for d in s["detections"]], dtype=np.float64
        ).reshape(-1, 6)
        gt = np.array(
            [corners(g["bbox"]) + [COCO_CLASSES.index(g["class"]), 0, 0] for g in s["truths"]], dtype=np.float64
        ).reshape(-1, 7)
        metric.add(preds, gt)
    has_truth = [any(g["class"] == c for s in sheets for g in s["truths"]) for c in COCO_CLASSES]
    sweep = []
    for t in SYMTRUST_SWEEP:
        per = []
        for k in range(len(COCO_CLASSES)):
            ap, _, _ = metric.metric_fn._evaluate_class(k, t, None, "soft")
            per.append(float(ap) if has_truth[k] else None)
        defined = [v for v in per if v is not None]
        sweep.append({"min_iou": t, "per_class_ap_all_point": per, "map_all_point": float(np.mean(defined))})
    return {"iou_sweep": sweep}


def main():
    rng = np.random.default_rng(20261201)
    out = {
        "generator": "eval/tests/reference/make_reference.py",
        "versions": {
            "python": sys.version.split()[0],
            "numpy": np.__version__,
            "scikit-learn": sklearn.__version__,
            "scipy": scipy.__version__,
            "pycocotools": version("pycocotools"),
        },
        "crops": crop_reference(rng),
        "calibration": calibration_reference(rng),
        "platt": platt_reference(rng),
        "mcnemar": mcnemar_reference(),
        "quantile": quantile_reference(rng),
    }
    sheets, out["coco"] = coco_reference(rng)
    out["voc"] = voc_reference(sheets)
    # A generator of its own, so the data above stays as it was.
    out["crops_degenerate"] = degenerate_crop_references(np.random.default_rng(20261202))
    out["versions"]["mean-average-precision"] = version("mean-average-precision")
    path = sys.argv[1] if len(sys.argv) > 1 else OUT
    with open(path, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
