#!/usr/bin/python3
"""Writes tests/fixtures/baseline/logreg.json: L2 logistic regression fitted by python3-sklearn on
seeded random sparse data, for tests/eval/test_linear_baseline.cpp (gyre's L-BFGS solver must
reach the same optimum).

Run with Debian's interpreter and python3-sklearn (the fixture records the version):
    /usr/bin/python3 tools/make_baseline_fixtures.py

Cases: "multiclass" (4 classes, C=1), "binary" (2 classes, C=10; sklearn fits one weight vector
w = w_1 - w_0, the test compares that difference), "weak_penalty" (3 classes, C=100). Each: 120
rows, 40 features, about 15% non-zero, values uniform in [0, 1) (float64, written with repr
precision), labels drawn from a linear model plus noise so the optimum is finite and
unambiguous. LogisticRegression(penalty="l2", solver="lbfgs", tol=1e-10, max_iter=10000):
coefficients, intercepts, and the penalised objective sum_i -log p(y_i) + ||W||^2 / (2C).
"""

import json
import os

import numpy as np
import sklearn
from sklearn.linear_model import LogisticRegression

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "fixtures", "baseline")


def case(rng, classes, c):
    rows, features = 120, 40
    mask = rng.random((rows, features)) < 0.15
    x = np.where(mask, rng.random((rows, features)), 0.0)
    true_w = rng.normal(size=(features, classes)) * 2
    scores = x @ true_w + rng.gumbel(size=(rows, classes))
    y = scores.argmax(axis=1)
    model = LogisticRegression(C=c, solver="lbfgs", tol=1e-10, max_iter=10000).fit(x, y)
    p = model.predict_proba(x)
    loss = -np.log(p[np.arange(rows), y]).sum()
    coef = model.coef_
    penalty = (coef ** 2).sum() / (2 * c)  # binary: coef is the one vector w
    cols, vals, starts = [], [], [0]
    for r in range(rows):
        nz = np.nonzero(x[r])[0]
        cols.extend(int(j) for j in nz)
        vals.extend(float(x[r, j]) for j in nz)
        starts.append(len(cols))
    return {"classes": classes, "c": c, "features": features, "row_start": starts, "columns": cols,
            "values": vals, "labels": [int(v) for v in y],
            "coef": coef.tolist(), "intercept": model.intercept_.tolist(),
            "objective": float(loss + penalty), "predictions": [int(v) for v in model.predict(x)]}


def main():
    rng = np.random.default_rng(20261202)
    fixture = {"made_by": "/usr/bin/python3 tools/make_baseline_fixtures.py",
               "sklearn_version": sklearn.__version__,
               "cases": {"multiclass": case(rng, 4, 1.0), "binary": case(rng, 2, 10.0),
                         "weak_penalty": case(rng, 3, 100.0)}}
    os.makedirs(OUT, exist_ok=True)
    path = os.path.join(OUT, "logreg.json")
    with open(path, "w", encoding="utf-8") as f:
        json.dump(fixture, f, indent=1)
        f.write("\n")
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
