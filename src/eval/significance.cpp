#include "gyre/eval/significance.hpp"

#include <algorithm>
#include <cmath>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"

namespace gyre::eval {

SampleSummary summarize(std::span<const double> values) {
  SampleSummary s;
  s.count = values.size();
  if (values.empty()) return s;
  double sum = 0.0;
  for (const double v : values) sum += v;
  s.mean = sum / static_cast<double>(values.size());
  if (values.size() < 2) return s;
  double squares = 0.0;
  for (const double v : values) squares += (v - s.mean) * (v - s.mean);
  s.std = std::sqrt(squares / static_cast<double>(values.size() - 1));
  return s;
}

double mcnemar_exact_p(std::int64_t only_a, std::int64_t only_b) {
  GYRE_CHECK(only_a >= 0 && only_b >= 0, "McNemar counts must not be negative");
  const std::int64_t n = only_a + only_b;
  if (n == 0) return 1.0;
  const std::int64_t k_max = std::min(only_a, only_b);
  // P[X <= k] for X ~ Binomial(n, 1/2), terms in log space so large n does not overflow:
  // log C(n, k) = lgamma(n+1) - lgamma(k+1) - lgamma(n-k+1).
  const double log_half_n = static_cast<double>(n) * std::log(0.5);
  const double lg_n1 = std::lgamma(static_cast<double>(n) + 1.0);
  double tail = 0.0;
  for (std::int64_t k = 0; k <= k_max; ++k) {
    const double log_term = lg_n1 - std::lgamma(static_cast<double>(k) + 1.0) -
                            std::lgamma(static_cast<double>(n - k) + 1.0) + log_half_n;
    tail += std::exp(log_term);
  }
  return std::min(1.0, 2.0 * tail);
}

McNemarResult mcnemar_exact(std::span<const std::uint8_t> correct_a,
                            std::span<const std::uint8_t> correct_b) {
  GYRE_CHECK(correct_a.size() == correct_b.size(), "McNemar test needs the same examples for both models");
  McNemarResult r;
  for (std::size_t i = 0; i < correct_a.size(); ++i) {
    const bool a = correct_a[i] != 0;
    const bool b = correct_b[i] != 0;
    if (a && !b) ++r.only_a;
    if (b && !a) ++r.only_b;
  }
  r.p_value = mcnemar_exact_p(r.only_a, r.only_b);
  return r;
}

BootstrapResult paired_bootstrap(std::span<const std::uint8_t> correct_a,
                                 std::span<const std::uint8_t> correct_b, int samples, std::uint64_t seed) {
  GYRE_CHECK(!correct_a.empty(), "paired bootstrap needs at least one example");
  GYRE_CHECK(correct_a.size() == correct_b.size(),
             "paired bootstrap needs the same examples for both models");
  GYRE_CHECK(samples > 0, "paired bootstrap needs at least one resample");
  // Only the per-example difference matters: +1 (A only), -1 (B only), 0 (agree). With the same
  // resample size for both, comparing accuracies = comparing the sums of differences.
  std::vector<int> diff(correct_a.size());
  for (std::size_t i = 0; i < diff.size(); ++i) diff[i] = int(correct_a[i] != 0) - int(correct_b[i] != 0);
  Rng rng(seed);
  BootstrapResult r;
  r.samples = samples;
  const std::uint64_t n = diff.size();
  for (int s = 0; s < samples; ++s) {
    long long total = 0;
    for (std::uint64_t i = 0; i < n; ++i) total += diff[rng.below(n)];
    if (total > 0) ++r.wins_a;
    if (total < 0) ++r.wins_b;
  }
  r.p_value = 1.0 - static_cast<double>(r.wins_a) / static_cast<double>(samples);
  return r;
}

}  // namespace gyre::eval
