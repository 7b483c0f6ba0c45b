#!/usr/bin/python3
"""Writes tests/fixtures/significance/significance.json: reference values from SciPy for the
statistics of `gyre compare` (gyre/eval/significance.hpp), read by tests/compare/test_significance.cpp.

Run with Debian's interpreter and python3-scipy (the fixture records the versions used):
    /usr/bin/python3 tools/make_significance_fixtures.py

Contents:
  permutation   per-seed scores of two configurations (equal seed counts, as compare trains) and
                scipy.stats.permutation_test(..., permutation_type="independent",
                n_resamples=inf, alternative="two-sided") with statistic mean(a) - mean(b): the
                exact two-sample permutation p-value. With equal sizes the null distribution is
                symmetric, so SciPy's 2 * min(one-sided) equals the |statistic| convention gyre uses.
  permutation_unequal  unequal sizes: the |statistic| p-value by brute-force enumeration with
                itertools.combinations (a second implementation, not an outside reference).
  mcnemar       discordant counts (b, c) and scipy.stats.binomtest(min(b, c), b + c, 0.5).pvalue,
                the exact McNemar test.
  normal_quantile  scipy.stats.norm.ppf(p).
  seeds_to_detect  n = (z_{1-a/2} + z_power)^2 (sa^2 + sb^2) / d^2 rounded up (at least 2), with
                SciPy's quantiles (the same formula; checks the quantiles and rounding).
  paired_bootstrap  one run per side (the two-level bootstrap then reduces to the paired example
                bootstrap): per-example correctness of two models on 400 examples drawn here from
                a fixed seed, and scipy.stats.bootstrap((a, b), mean(a) - mean(b), paired=True,
                method="percentile", n_resamples=100000, confidence_level=0.95) interval.
"""

import itertools
import json
import os

import numpy as np
import scipy
from scipy import stats

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "fixtures", "significance",
                   "significance.json")


def mean_diff(x, y, axis=-1):
    return np.mean(x, axis=axis) - np.mean(y, axis=axis)


def main():
    rng = np.random.default_rng(20261202)
    fixture = {"generator": "tools/make_significance_fixtures.py", "numpy": np.__version__,
               "scipy": scipy.__version__}

    perm = []
    cases = [
        ([0.81, 0.83, 0.80, 0.84, 0.82], [0.78, 0.80, 0.79, 0.77, 0.81]),  # clearly apart
        ([0.81, 0.79, 0.80, 0.82, 0.78], [0.80, 0.81, 0.79, 0.78, 0.80]),  # overlapping
        ([0.70, 0.74, 0.72], [0.69, 0.71, 0.75]),
        ([0.9, 0.7], [0.6, 0.5]),
    ]
    for _ in range(2):
        a = np.round(rng.normal(0.80, 0.02, 6), 4)
        b = np.round(rng.normal(0.78, 0.02, 6), 4)
        cases.append((a.tolist(), b.tolist()))
    for a, b in cases:
        res = stats.permutation_test((np.array(a), np.array(b)), mean_diff, permutation_type="independent",
                                     n_resamples=np.inf, alternative="two-sided", vectorized=True)
        perm.append({"a": a, "b": b, "statistic": float(res.statistic), "p_value": float(res.pvalue)})
    fixture["permutation"] = perm

    unequal = []
    for a, b in [([0.81, 0.83, 0.80], [0.78, 0.80, 0.79, 0.77, 0.81]), ([0.5, 0.9, 0.6, 0.7], [0.55, 0.65])]:
        pooled = a + b
        obs = abs(np.mean(a) - np.mean(b))
        hits = total = 0
        for idx in itertools.combinations(range(len(pooled)), len(a)):
            xa = [pooled[i] for i in idx]
            xb = [pooled[i] for i in range(len(pooled)) if i not in idx]
            total += 1
            if abs(np.mean(xa) - np.mean(xb)) >= obs - 1e-12:
                hits += 1
        unequal.append({"a": a, "b": b, "p_value": hits / total, "relabellings": total})
    fixture["permutation_unequal"] = unequal

    fixture["mcnemar"] = [{"only_a": b, "only_b": c, "p_value": float(stats.binomtest(min(b, c), b + c, 0.5).pvalue)}
                          for b, c in [(1, 6), (2, 10), (10, 20), (37, 55), (120, 151), (400, 460)]]

    fixture["normal_quantile"] = [{"p": p, "x": float(stats.norm.ppf(p))}
                                  for p in [0.5, 0.8, 0.9, 0.975, 0.995, 0.025, 1e-6]]

    std = []
    for d, sa, sb in [(0.012, 0.01, 0.015), (0.05, 0.02, 0.02), (0.001, 0.03, 0.03), (0.2, 0.01, 0.01)]:
        z = stats.norm.ppf(0.975) + stats.norm.ppf(0.8)
        n = z * z * (sa * sa + sb * sb) / (d * d)
        std.append({"difference": d, "std_a": sa, "std_b": sb, "seeds": int(max(2, np.ceil(n - 1e-9)))})
    fixture["seeds_to_detect"] = std

    n = 400
    latent = rng.random(n)
    a = (latent < 0.80).astype(int)  # model A right on the 80% easiest examples ...
    b = a.copy()
    flip = rng.random(n) < 0.12  # ... B disagrees with A on about 12% of them
    b[flip] = 1 - b[flip]
    res = stats.bootstrap((a.astype(float), b.astype(float)), mean_diff, paired=True, vectorized=True,
                          method="percentile", n_resamples=100000, confidence_level=0.95,
                          random_state=np.random.default_rng(7))
    fixture["paired_bootstrap"] = {"a": a.tolist(), "b": b.tolist(), "difference": float(np.mean(a) - np.mean(b)),
                                   "low": float(res.confidence_interval.low),
                                   "high": float(res.confidence_interval.high)}

    os.makedirs(os.path.dirname(OUT), exist_ok=True)
    with open(OUT, "w") as f:
        json.dump(fixture, f, indent=1)
        f.write("\n")
    print("wrote", OUT)


if __name__ == "__main__":
    main()
