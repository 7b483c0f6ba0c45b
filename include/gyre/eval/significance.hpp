#pragma once
// Summary statistics over seeds and paired significance tests for comparing two models on the
// same evaluation examples (the engine of `gyre compare`). Pure functions, no I/O.

#include <cstdint>
#include <span>

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

}  // namespace gyre::eval
