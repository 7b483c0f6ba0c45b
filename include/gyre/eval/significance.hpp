#pragma once
// Summary statistics over seeds and paired significance tests for comparing two models on the
// same evaluation examples (the engine of `gyre compare`). Pure functions, no I/O.

#include <cstdint>
#include <functional>
#include <span>
#include <vector>

namespace gyre::eval {

/// Mean and sample standard deviation (divisor n - 1, Bessel's correction) of a set of numbers.
/// std is 0 for fewer than two values; count 0 gives mean 0.
struct SampleSummary {
  std::size_t count = 0;
  double mean = 0.0;
  double std = 0.0;
};
SampleSummary summarize(std::span<const double> values);

/// McNemar's test (McNemar 1947) in its exact form: under H0 the discordant pairs split
/// Binomial(b + c, 1/2). Two-sided p = min(1, 2 * P[X <= min(b, c)]); p = 1 when b + c = 0.
struct McNemarResult {
  std::int64_t only_a = 0;  // b: examples A gets right and B gets wrong
  std::int64_t only_b = 0;  // c: examples B gets right and A gets wrong
  double p_value = 1.0;
};
/// Exact two-sided p-value from the discordant counts. Throws gyre::Error on negative counts.
double mcnemar_exact_p(std::int64_t only_a, std::int64_t only_b);
/// Counts discordant pairs in per-example correctness (same length, same example order) and tests.
McNemarResult mcnemar_exact(std::span<const std::uint8_t> correct_a, std::span<const std::uint8_t> correct_b);

/// Paired bootstrap resampling (Koehn 2004, "Statistical significance tests for machine
/// translation evaluation"): draw `samples` resamples of the example indices with replacement
/// and count how often A's accuracy beats B's strictly. p_value = 1 - wins / samples is the
/// share of resamples where A is not better (Koehn: A is better at 95% when wins >= 95%).
struct BootstrapResult {
  int samples = 0;
  int wins_a = 0;  // resamples with accuracy(A) > accuracy(B)
  int wins_b = 0;  // resamples with accuracy(B) > accuracy(A)
  double p_value = 1.0;
};
/// Deterministic for a given seed. Throws gyre::Error on empty or unequal inputs.
BootstrapResult paired_bootstrap(std::span<const std::uint8_t> correct_a,
                                 std::span<const std::uint8_t> correct_b, int samples = 1000,
                                 std::uint64_t seed = 1);

/// One run's per-example additive counts on an evaluation set, row-major [examples x width]: the
/// metric is a function of the column sums, so resampling examples is resampling rows.
/// Accuracy: [correct, 1]; token accuracy: [correct tokens, tokens]; span F1: [tp, fp, fn];
/// macro F1: [tp, fp, fn] per class.
struct ExampleCounts {
  std::size_t width = 0;
  std::vector<double> values;
  std::size_t examples() const noexcept { return width == 0 ? 0 : values.size() / width; }
};
/// Maps column sums (size = width) to the metric.
using CountMetric = std::function<double(std::span<const double> sums)>;
/// The metric of one run on the whole set.
double metric_of(const ExampleCounts& counts, const CountMetric& metric);

/// Two-level (hierarchical) bootstrap of the difference mean_seeds(metric A) - mean_seeds(metric B)
/// between two configurations, each trained with several seeds and scored on the same examples.
/// Each resample draws the runs of A and of B with replacement (seed level: seeds of different
/// architectures are not paired) and then one set of example indices with replacement that is
/// used for every run of both (example level, paired by example), as in the hierarchical
/// bootstrap of Davison & Hinkley (1997, sec. 3.8) and its use for seed variation by Bouthillier
/// et al. (2021, "Accounting for variance in machine learning benchmarks"). The interval is the
/// percentile interval (Efron & Tibshirani 1993, ch. 13).
struct HierarchicalBootstrapResult {
  double difference = 0.0;  // observed: mean over A's runs - mean over B's runs, whole set
  double low = 0.0, high = 0.0;
  double level = 0.95;
  int samples = 0;
  std::size_t runs_a = 0, runs_b = 0, examples = 0;
};
/// Throws gyre::Error when a side has no runs, the runs differ in examples or width, or samples < 1.
/// Deterministic for a seed.
HierarchicalBootstrapResult hierarchical_bootstrap(std::span<const ExampleCounts> a,
                                                   std::span<const ExampleCounts> b,
                                                   const CountMetric& metric, int samples = 2000,
                                                   double level = 0.95, std::uint64_t seed = 1);

/// Two-sample permutation test (Fisher 1935; Pitman 1937) on the per-seed scores of two
/// configurations: statistic mean(a) - mean(b), two-sided p = share of the relabellings of the
/// pooled scores whose |statistic| is at least the observed one (observed included). Exact over
/// all C(na + nb, na) relabellings when there are at most `max_exact`; otherwise `samples`
/// random relabellings plus the observed one, p = (hits + 1) / (samples + 1) (Phipson & Smyth
/// 2010). The smallest possible exact p is 2 / C(na + nb, na) (0.0079 for 5 + 5 seeds).
struct PermutationResult {
  double difference = 0.0;
  double p_value = 1.0;
  bool exact = true;
  std::size_t relabellings = 0;  // counted (exact: all of them)
};
PermutationResult permutation_test(std::span<const double> a, std::span<const double> b,
                                   std::size_t max_exact = 200000, int samples = 20000,
                                   std::uint64_t seed = 1);

/// Rough number of seeds per configuration a two-sample comparison of means needs to detect a
/// true difference `difference` between configurations whose per-seed scores have standard
/// deviations std_a and std_b, two-sided at `alpha` with power `power`: the normal-approximation
/// sample size n = (z_{1-alpha/2} + z_{power})^2 (std_a^2 + std_b^2) / difference^2 (e.g. Cohen
/// 1988, ch. 2), rounded up, at least 2. Returns 0 when difference is 0 (no finite number).
long long seeds_to_detect(double difference, double std_a, double std_b, double alpha = 0.05,
                          double power = 0.8);

/// Standard normal quantile: Phi(x) = erfc(-x / sqrt 2) / 2 inverted by bisection (to double
/// precision). p in (0, 1); throws gyre::Error otherwise.
double normal_quantile(double p);

}  // namespace gyre::eval
