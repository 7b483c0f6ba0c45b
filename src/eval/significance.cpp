#include "gyre/eval/significance.hpp"

#include <algorithm>
#include <cmath>
#include <string>
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

namespace gyre::eval {
namespace {

void check_runs(std::span<const ExampleCounts> runs, std::size_t width, std::size_t examples,
                const char* side) {
  GYRE_CHECK(!runs.empty(), std::string("the bootstrap needs at least one run of ") + side);
  for (const auto& r : runs) {
    GYRE_CHECK(
        r.width == width && r.values.size() == width * examples,
        std::string("every run of the bootstrap must count the same examples the same way (") + side + ")");
  }
}

// Linear interpolation between order statistics (Hyndman & Fan 1996 type 7, NumPy's default).
double quantile_sorted(const std::vector<double>& sorted, double q) {
  const double h = q * static_cast<double>(sorted.size() - 1);
  const auto lo = static_cast<std::size_t>(std::floor(h));
  const std::size_t hi = std::min(lo + 1, sorted.size() - 1);
  return sorted[lo] + (h - static_cast<double>(lo)) * (sorted[hi] - sorted[lo]);
}

}  // namespace

double metric_of(const ExampleCounts& counts, const CountMetric& metric) {
  std::vector<double> sums(counts.width, 0.0);
  for (std::size_t i = 0; i < counts.values.size(); ++i) sums[i % counts.width] += counts.values[i];
  return metric(sums);
}

HierarchicalBootstrapResult hierarchical_bootstrap(std::span<const ExampleCounts> a,
                                                   std::span<const ExampleCounts> b,
                                                   const CountMetric& metric, int samples, double level,
                                                   std::uint64_t seed) {
  GYRE_CHECK(!a.empty() && !b.empty(), "the bootstrap needs at least one run of each configuration");
  GYRE_CHECK(samples > 0, "the bootstrap needs at least one resample");
  GYRE_CHECK(level > 0.0 && level < 1.0, "the interval level must be in (0, 1)");
  const std::size_t width = a.front().width, n = a.front().examples();
  GYRE_CHECK(width > 0 && n > 0, "the bootstrap needs at least one example");
  check_runs(a, width, n, "A");
  check_runs(b, width, n, "B");

  HierarchicalBootstrapResult r;
  r.samples = samples;
  r.level = level;
  r.runs_a = a.size();
  r.runs_b = b.size();
  r.examples = n;
  double mean_a = 0.0, mean_b = 0.0;
  for (const auto& x : a) mean_a += metric_of(x, metric);
  for (const auto& x : b) mean_b += metric_of(x, metric);
  r.difference = mean_a / static_cast<double>(a.size()) - mean_b / static_cast<double>(b.size());

  Rng rng(seed);
  std::vector<double> diffs(static_cast<std::size_t>(samples));
  std::vector<std::uint32_t> weight(n);  // how often each example is drawn in this resample
  std::vector<double> sums(width);
  auto run_metric = [&](const ExampleCounts& x) {
    std::fill(sums.begin(), sums.end(), 0.0);
    for (std::size_t i = 0; i < n; ++i) {
      if (weight[i] == 0) continue;
      const double w = weight[i];
      const double* row = x.values.data() + i * width;
      for (std::size_t k = 0; k < width; ++k) sums[k] += w * row[k];
    }
    return metric(sums);
  };
  for (int s = 0; s < samples; ++s) {
    // Seed level first (which runs), then example level (which examples, shared by all runs).
    std::vector<std::size_t> pick_a(a.size()), pick_b(b.size());
    for (auto& p : pick_a) p = static_cast<std::size_t>(rng.below(a.size()));
    for (auto& p : pick_b) p = static_cast<std::size_t>(rng.below(b.size()));
    std::fill(weight.begin(), weight.end(), 0u);
    for (std::size_t i = 0; i < n; ++i) ++weight[rng.below(n)];
    double ma = 0.0, mb = 0.0;
    for (const auto p : pick_a) ma += run_metric(a[p]);
    for (const auto p : pick_b) mb += run_metric(b[p]);
    diffs[static_cast<std::size_t>(s)] =
        ma / static_cast<double>(a.size()) - mb / static_cast<double>(b.size());
  }
  std::sort(diffs.begin(), diffs.end());
  r.low = quantile_sorted(diffs, (1.0 - level) / 2.0);
  r.high = quantile_sorted(diffs, 1.0 - (1.0 - level) / 2.0);
  return r;
}

PermutationResult permutation_test(std::span<const double> a, std::span<const double> b,
                                   std::size_t max_exact, int samples, std::uint64_t seed) {
  GYRE_CHECK(!a.empty() && !b.empty(), "the permutation test needs scores on both sides");
  GYRE_CHECK(samples > 0, "the permutation test needs at least one relabelling");
  const std::size_t na = a.size(), n = a.size() + b.size();
  std::vector<double> pooled(a.begin(), a.end());
  pooled.insert(pooled.end(), b.begin(), b.end());
  double total = 0.0;
  for (const double v : pooled) total += v;
  // mean(A') - mean(B') from the sum of the values labelled A.
  auto statistic = [&](double sum_a) {
    return sum_a / static_cast<double>(na) - (total - sum_a) / static_cast<double>(n - na);
  };
  double observed_sum = 0.0;
  for (const double v : a) observed_sum += v;
  PermutationResult r;
  r.difference = statistic(observed_sum);
  // Relabellings whose |statistic| ties the observed one count as extreme; the tolerance absorbs
  // summation-order rounding (common practice, no source).
  const double threshold = std::fabs(r.difference) - 1e-12 * (1.0 + std::fabs(r.difference));

  // C(n, na), capped so the count does not overflow.
  double combinations = 1.0;
  for (std::size_t k = 1; k <= na; ++k)
    combinations = combinations * static_cast<double>(n - na + k) / static_cast<double>(k);
  if (combinations <= static_cast<double>(max_exact)) {
    // Every choice of na indices out of n, in lexicographic order.
    std::vector<std::size_t> idx(na);
    for (std::size_t k = 0; k < na; ++k) idx[k] = k;
    std::size_t hits = 0, count = 0;
    while (true) {
      double sum = 0.0;
      for (const auto k : idx) sum += pooled[k];
      ++count;
      if (std::fabs(statistic(sum)) >= threshold) ++hits;
      std::size_t k = na;
      while (k > 0 && idx[k - 1] == n - na + k - 1) --k;
      if (k == 0) break;
      ++idx[k - 1];
      for (std::size_t j = k; j < na; ++j) idx[j] = idx[j - 1] + 1;
    }
    r.exact = true;
    r.relabellings = count;
    r.p_value = static_cast<double>(hits) / static_cast<double>(count);
    return r;
  }
  Rng rng(seed);
  std::vector<double> shuffled = pooled;
  std::size_t hits = 0;
  for (int s = 0; s < samples; ++s) {
    rng.shuffle(std::span<double>(shuffled));
    double sum = 0.0;
    for (std::size_t k = 0; k < na; ++k) sum += shuffled[k];
    if (std::fabs(statistic(sum)) >= threshold) ++hits;
  }
  r.exact = false;
  r.relabellings = static_cast<std::size_t>(samples);
  r.p_value = static_cast<double>(hits + 1) / static_cast<double>(samples + 1);
  return r;
}

double normal_quantile(double p) {
  GYRE_CHECK(p > 0.0 && p < 1.0, "a normal quantile needs p in (0, 1)");
  double lo = -40.0, hi = 40.0;
  for (int i = 0; i < 200 && hi - lo > 1e-15; ++i) {
    const double mid = 0.5 * (lo + hi);
    if (0.5 * std::erfc(-mid / std::sqrt(2.0)) < p)
      lo = mid;
    else
      hi = mid;
  }
  return 0.5 * (lo + hi);
}

long long seeds_to_detect(double difference, double std_a, double std_b, double alpha, double power) {
  GYRE_CHECK(alpha > 0.0 && alpha < 1.0 && power > 0.0 && power < 1.0, "alpha and power must be in (0, 1)");
  if (!(std::fabs(difference) > 0.0)) return 0;
  const double z = normal_quantile(1.0 - alpha / 2.0) + normal_quantile(power);
  const double n = z * z * (std_a * std_a + std_b * std_b) / (difference * difference);
  if (!(n < 1e12)) return 1000000000000LL;
  return std::max(2LL, static_cast<long long>(std::ceil(n - 1e-9)));
}

}  // namespace gyre::eval
