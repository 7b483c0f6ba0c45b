#!/usr/bin/python3
"""Writes tests/fixtures/calibration/temperature.json: temperatures fitted by SciPy on fixed,
seeded scores, for tests/eval/test_calibration.cpp (gyre's own fit is Newton on 1/T; SciPy's
is Brent's bounded method on T: two different minimisers of the same objective).

Run with Debian's interpreter and python3-scipy (the fixture records the versions used):
    /usr/bin/python3 tools/make_calibration_fixtures.py

Objective (Guo et al. 2017, section 4.2): mean negative log-likelihood of softmax(z / T) for
softmax outputs, of sigmoid(z / T) for one sigmoid label, minimised over T in [0.01, 100]
(gyre's kMinTemperature, kMaxTemperature). Scores are float32 values written as their exact
float64 value, so both sides read the same numbers.

Cases:
  overconfident   600 examples, 6 classes, logits scaled up by 3 after sampling the gold label
                  from the unscaled ones: the fit must give T > 1 (about 3)
  underconfident  400 examples, 4 classes, logits scaled by 0.4: T < 1
  log_probs       the overconfident case given as log-softmax rows (a CRF tagger's input):
                  same T, since softmax is shift-invariant per row
  sigmoid         500 examples of one label, logits scaled by 2.5 after sampling gold
  separable       every example right with a margin: the NLL falls as T -> 0, so T = 0.01
"""

import json
import os

import numpy as np
import scipy
from scipy.optimize import minimize_scalar
from scipy.special import log_softmax, logsumexp, log_expit

T_MIN, T_MAX = 0.01, 100.0
OUT = os.path.join(os.path.dirname(__file__), "..", "tests", "fixtures", "calibration", "temperature.json")


def f32(a):
    return np.asarray(a, dtype=np.float32).astype(np.float64)


def softmax_nll(z, y):
    def f(t):
        s = z / t
        return float(np.mean(logsumexp(s, axis=1) - s[np.arange(len(y)), y]))
    return f


def sigmoid_nll(z, y):
    def f(t):
        s = z / t
        return float(-np.mean(y * log_expit(s) + (1 - y) * log_expit(-s)))
    return f


def fit(f):
    r = minimize_scalar(f, bounds=(T_MIN, T_MAX), method="bounded", options={"xatol": 1e-10, "maxiter": 1000})
    return float(r.x), float(f(1.0)), float(r.fun)


def sample_softmax(rng, n, c, scale):
    base = rng.normal(0.0, 1.5, size=(n, c))
    p = np.exp(log_softmax(base, axis=1))
    y = np.array([rng.choice(c, p=row) for row in p])
    return f32(base * scale), y


def main():
    rng = np.random.default_rng(20171)
    cases = []
    z, y = sample_softmax(rng, 600, 6, 3.0)
    t, before, after = fit(softmax_nll(z, y))
    cases.append({"name": "overconfident", "kind": "softmax", "classes": 6, "scores": z.ravel().tolist(),
                  "gold": y.tolist(), "temperature": t, "nll_before": before, "nll_after": after})
    lp = f32(log_softmax(z, axis=1))
    t2, b2, a2 = fit(softmax_nll(lp, y))
    cases.append({"name": "log_probs", "kind": "softmax", "classes": 6, "scores": lp.ravel().tolist(),
                  "gold": y.tolist(), "temperature": t2, "nll_before": b2, "nll_after": a2})
    z, y = sample_softmax(rng, 400, 4, 0.4)
    t, before, after = fit(softmax_nll(z, y))
    cases.append({"name": "underconfident", "kind": "softmax", "classes": 4, "scores": z.ravel().tolist(),
                  "gold": y.tolist(), "temperature": t, "nll_before": before, "nll_after": after})
    base = rng.normal(0.0, 2.0, size=500)
    y = (rng.random(500) < 1.0 / (1.0 + np.exp(-base))).astype(np.int64)
    z = f32(base * 2.5)
    t, before, after = fit(sigmoid_nll(z, y))
    cases.append({"name": "sigmoid", "kind": "sigmoid", "classes": 1, "scores": z.tolist(),
                  "gold": y.tolist(), "temperature": t, "nll_before": before, "nll_after": after})
    y = rng.integers(0, 3, size=50)
    z = rng.normal(0.0, 0.3, size=(50, 3))
    z[np.arange(50), y] += 2.0
    z = f32(z)
    t, before, after = fit(softmax_nll(z, y))
    cases.append({"name": "separable", "kind": "softmax", "classes": 3, "scores": z.ravel().tolist(),
                  "gold": y.tolist(), "temperature": t, "nll_before": before, "nll_after": after})
    doc = {"made_by": "tools/make_calibration_fixtures.py", "scipy": scipy.__version__, "numpy": np.__version__,
           "bounds": [T_MIN, T_MAX], "cases": cases}
    with open(OUT, "w") as fh:
        json.dump(doc, fh)
        fh.write("\n")
    for c in cases:
        print(c["name"], c["temperature"], c["nll_before"], c["nll_after"])


if __name__ == "__main__":
    main()
