#!/usr/bin/python3
"""Writes tests/fixtures/metrics/*.json: classification metrics computed by scikit-learn on fixed,
seeded predictions, for tests/eval/test_classification.cpp.

Run with Debian's interpreter and python3-sklearn (the fixtures record the version used):
    /usr/bin/python3 tools/make_metric_fixtures.py

Scenarios (single-label ones carry float32 probability rows; values are written as the exact
float64 value of each float32, so the C++ side reads the same numbers):
  all_present      4 classes, every class in gold and predictions, one gold probability exactly 0
                   (exercises log-loss clipping)
  never_predicted  4 classes, class 2 is in gold but never predicted (precision 0 by sklearn's
                   zero_division default)
  absent_from_gold 5 classes, class 3 is predicted but never gold (recall 0), class 4 is in
                   neither (sklearn leaves it out of the averages when no labels= is given)
  multilabel       5 labels, indicator matrices; label 3 never predicted, label 4 never gold;
                   decisions are score >= 0.5

Log loss uses eps = float32 machine epsilon (2^-23), what sklearn 1.2's eps="auto" chooses for
float32 input; the float64 copies are passed with that eps so the reference is computed in
double. ECE has no sklearn function: it is computed here with NumPy from Guo et al. 2017, eq. 3
(15 equal-width bins on max probability, bin m = ((m-1)/M, m/M]); that is a second, independent
implementation, not an outside reference.
"""

import json
import os
import warnings

import numpy as np
import sklearn
from sklearn.metrics import (accuracy_score, classification_report, confusion_matrix, f1_score,
                             log_loss, precision_recall_fscore_support, precision_score,
                             recall_score)

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "fixtures", "metrics")
F32_EPS = float(np.finfo(np.float32).eps)
BINS = 15


def softmax32(logits):
    z = logits - logits.max(axis=1, keepdims=True)
    e = np.exp(z)
    return (e / e.sum(axis=1, keepdims=True)).astype(np.float32)


def ece(gold, probs, bins=BINS):
    conf = probs.max(axis=1)
    pred = probs.argmax(axis=1)  # first maximum on ties, as the C++ code
    m = np.clip(np.ceil(conf * bins).astype(np.int64), 1, bins) - 1
    total = 0.0
    n = len(gold)
    for k in range(bins):
        sel = m == k
        if sel.sum() == 0:
            continue
        acc = float((pred[sel] == gold[sel]).mean())
        c = float(conf[sel].mean())
        total += sel.sum() / n * abs(acc - c)
    return total


def single_label(name, gold, probs, class_names, note):
    probs64 = probs.astype(np.float64)
    pred = probs.argmax(axis=1)
    c = len(class_names)
    all_labels = list(range(c))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # UndefinedMetricWarning is the point of two scenarios
        p, r, f, s = precision_recall_fscore_support(gold, pred, labels=all_labels, average=None)
        avg = {}
        for mode in ("macro", "micro", "weighted"):
            # No labels=: sklearn averages over the labels present in gold or predictions.
            avg[mode] = {
                "precision": precision_score(gold, pred, average=mode),
                "recall": recall_score(gold, pred, average=mode),
                "f1": f1_score(gold, pred, average=mode),
            }
        report = classification_report(gold, pred, output_dict=True)
    data = {
        "made_by": "tools/make_metric_fixtures.py",
        "sklearn_version": sklearn.__version__,
        "numpy_version": np.__version__,
        "scenario": name,
        "note": note,
        "class_names": class_names,
        "gold": [int(x) for x in gold],
        "predicted": [int(x) for x in pred],
        "probabilities": [[float(v) for v in row] for row in probs64],
        "expected": {
            "accuracy": accuracy_score(gold, pred),
            "per_class": {
                "precision": [float(x) for x in p],
                "recall": [float(x) for x in r],
                "f1": [float(x) for x in f],
                "support": [int(x) for x in s],
            },
            "average": avg,
            "classification_report": report,
            "confusion_matrix": confusion_matrix(gold, pred, labels=all_labels).tolist(),
            "log_loss": log_loss(gold, probs64, eps=F32_EPS, labels=all_labels),
            "log_loss_eps": F32_EPS,
            "ece_numpy_guo2017": ece(gold, probs64),
            "ece_bins": BINS,
        },
    }
    with open(os.path.join(OUT, name + ".json"), "w") as fh:
        json.dump(data, fh, indent=1)
        fh.write("\n")


def multilabel(name, gold, scores, label_names, threshold, note):
    pred = (scores.astype(np.float64) >= threshold).astype(np.int64)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p, r, f, s = precision_recall_fscore_support(gold, pred, average=None)
        avg = {}
        for mode in ("macro", "micro", "weighted"):
            ap, ar, af, _ = precision_recall_fscore_support(gold, pred, average=mode)
            avg[mode] = {"precision": float(ap), "recall": float(ar), "f1": float(af)}
            avg[mode]["f1_score"] = f1_score(gold, pred, average=mode)
    data = {
        "made_by": "tools/make_metric_fixtures.py",
        "sklearn_version": sklearn.__version__,
        "numpy_version": np.__version__,
        "scenario": name,
        "note": note,
        "label_names": label_names,
        "threshold": threshold,
        "gold": gold.tolist(),
        "scores": [[float(v) for v in row] for row in scores.astype(np.float64)],
        "predicted": pred.tolist(),
        "expected": {
            "per_label": {
                "precision": [float(x) for x in p],
                "recall": [float(x) for x in r],
                "f1": [float(x) for x in f],
                "support": [int(x) for x in s],
            },
            "average": avg,
            "subset_accuracy": accuracy_score(gold, pred),
        },
    }
    with open(os.path.join(OUT, name + ".json"), "w") as fh:
        json.dump(data, fh, indent=1)
        fh.write("\n")


def main():
    os.makedirs(OUT, exist_ok=True)
    rng = np.random.RandomState(20261201)

    # all_present: 4 classes, 60 examples, logits favour the gold class.
    n, c = 60, 4
    gold = rng.randint(0, c, size=n)
    logits = rng.normal(0.0, 1.0, size=(n, c))
    logits[np.arange(n), gold] += 1.2
    probs = softmax32(logits)
    wrong = np.flatnonzero(probs.argmax(axis=1) != gold)
    probs[wrong[0], gold[wrong[0]]] = 0.0  # exactly zero: log loss must clip
    single_label("all_present", gold, probs, ["repair", "refund", "parts", "other"],
                 "4 classes all present; one gold probability is exactly 0")

    # never_predicted: class 2 never has the largest probability.
    n, c = 50, 4
    gold = rng.randint(0, c, size=n)
    logits = rng.normal(0.0, 1.0, size=(n, c))
    logits[np.arange(n), gold] += 1.0
    logits[:, 2] -= 6.0
    probs = softmax32(logits)
    assert (probs.argmax(axis=1) != 2).all() and (gold == 2).any()
    single_label("never_predicted", gold, probs, ["kettle", "toaster", "blender", "oven"],
                 "class 2 occurs in gold but is never predicted")

    # absent_from_gold: gold only uses classes 0-2; class 3 is predicted sometimes; class 4 never.
    n, c = 45, 5
    gold = rng.randint(0, 3, size=n)
    logits = rng.normal(0.0, 1.0, size=(n, c))
    logits[np.arange(n), gold] += 1.0
    logits[:, 4] -= 8.0
    logits[::7, 3] += 3.0
    probs = softmax32(logits)
    pred = probs.argmax(axis=1)
    assert (pred == 3).any() and not (gold == 3).any() and not (pred == 4).any()
    single_label("absent_from_gold", gold, probs, ["low", "mid", "high", "urgent", "unused"],
                 "class 3 predicted but never gold; class 4 neither gold nor predicted")

    # multilabel: 40 examples x 5 labels.
    n, l = 40, 5
    gold = (rng.uniform(size=(n, l)) < 0.35).astype(np.int64)
    gold[:, 4] = 0
    noise = rng.normal(0.0, 0.25, size=(n, l))
    scores = np.clip(0.25 + 0.45 * gold + noise, 0.0, 1.0).astype(np.float32)
    scores[:, 3] = np.minimum(scores[:, 3], np.float32(0.45))
    scores[3, 2] = np.float32(0.5)  # exactly at the threshold: predicted (>=)
    assert gold[:, 3].any() and gold[:, 4].sum() == 0
    multilabel("multilabel", gold, scores, ["noise", "leak", "smell", "spark", "rattle"], 0.5,
               "label 3 never predicted, label 4 never gold; predicted = score >= 0.5")


if __name__ == "__main__":
    main()
