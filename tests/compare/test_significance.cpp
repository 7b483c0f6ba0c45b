// Summary statistics and paired significance tests (gyre/eval/significance.hpp).

#include <catch2/catch.hpp>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <sstream>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/eval/significance.hpp"

using Catch::Matchers::WithinAbs;
using gyre::eval::mcnemar_exact;
using gyre::eval::mcnemar_exact_p;
using gyre::eval::paired_bootstrap;
using gyre::eval::summarize;

TEST_CASE("summarize gives the mean and the n-1 sample standard deviation", "[significance]") {
  // Hand-computed: mean (0.8 + 0.9 + 0.85) / 3 = 0.85; squared deviations 0.0025 + 0.0025 + 0 =
  // 0.005; / (3 - 1) = 0.0025; sqrt = 0.05.
  const std::vector<double> v{0.8, 0.9, 0.85};
  const auto s = summarize(v);
  REQUIRE(s.count == 3);
  REQUIRE_THAT(s.mean, WithinAbs(0.85, 1e-12));
  REQUIRE_THAT(s.std, WithinAbs(0.05, 1e-12));
  SECTION("one value has no spread") {
    const std::vector<double> one{0.7};
    REQUIRE_THAT(summarize(one).std, WithinAbs(0.0, 0.0));
    REQUIRE_THAT(summarize(one).mean, WithinAbs(0.7, 1e-15));
  }
  SECTION("no values") {
    REQUIRE(summarize(std::vector<double>{}).count == 0);
  }
}

TEST_CASE("McNemar's exact test matches hand-computed binomial tails", "[significance]") {
  // McNemar (1947); exact form: discordant pairs ~ Binomial(n = b + c, 1/2) under H0,
  // two-sided p = 2 * P[X <= min(b, c)] capped at 1. Hand-computed:
  //   b=1, c=6:  n=7,  (C(7,0) + C(7,1)) / 2^7 = 8/128 = 0.0625 -> p = 0.125
  REQUIRE_THAT(mcnemar_exact_p(1, 6), WithinAbs(0.125, 1e-12));
  REQUIRE_THAT(mcnemar_exact_p(6, 1), WithinAbs(0.125, 1e-12));
  //   b=2, c=10: n=12, (1 + 12 + 66) / 4096 = 79/4096 -> p = 158/4096 = 0.03857421875
  REQUIRE_THAT(mcnemar_exact_p(2, 10), WithinAbs(0.03857421875, 1e-12));
  //   b=0, c=3:  n=3,  1/8 -> p = 0.25
  REQUIRE_THAT(mcnemar_exact_p(0, 3), WithinAbs(0.25, 1e-12));
  //   b=5, c=5: the tail passes 1/2, capped -> p = 1
  REQUIRE_THAT(mcnemar_exact_p(5, 5), WithinAbs(1.0, 1e-12));
  //   no discordant pairs: no evidence either way
  REQUIRE_THAT(mcnemar_exact_p(0, 0), WithinAbs(1.0, 0.0));
  //   b=10, c=20: 2 * sum_{k<=10} C(30,k) / 2^30 = 0.098737146705389 (exact integer sums,
  //   Python math.comb, computed by hand at the prompt)
  REQUIRE_THAT(mcnemar_exact_p(10, 20), WithinAbs(0.09873714670538902, 1e-12));
  // Large n stays finite (log-space terms): symmetric split -> 1.
  REQUIRE_THAT(mcnemar_exact_p(5000, 5000), WithinAbs(1.0, 1e-9));
  REQUIRE_THROWS_AS(mcnemar_exact_p(-1, 2), gyre::Error);

  SECTION("counting discordant pairs from per-example correctness") {
    // Per-example correctness of two models on nine examples.
    const std::vector<std::uint8_t> a{1, 0, 0, 0, 1, 1, 1, 0, 0};
    const std::vector<std::uint8_t> b{0, 1, 1, 1, 1, 1, 1, 1, 0};
    const auto r = mcnemar_exact(a, b);
    REQUIRE(r.only_a == 1);  // index 0
    REQUIRE(r.only_b == 4);  // indices 1, 2, 3, 7
    // n=5: 2 * (1 + 5) / 32 = 0.375
    REQUIRE_THAT(r.p_value, WithinAbs(0.375, 1e-12));
    const std::vector<std::uint8_t> shorter{1, 0};
    REQUIRE_THROWS_AS(mcnemar_exact(a, shorter), gyre::Error);
  }
}

TEST_CASE("paired bootstrap win rates match hand-computed resampling probabilities", "[significance]") {
  // Koehn (2004) paired bootstrap: resample the test set with replacement, count how often A
  // beats B. For tiny sets the exact win probability can be enumerated by hand; 20000 resamples
  // put the Monte-Carlo error at about sqrt(p(1-p)/20000) < 0.004, tolerance 0.015.
  SECTION("two examples, A alone right on one: A loses only if that one is never drawn") {
    // P(example 0 absent in 2 draws) = (1/2)^2 = 1/4 -> P(A wins) = 3/4.
    const std::vector<std::uint8_t> a{1, 1};
    const std::vector<std::uint8_t> b{0, 1};
    const auto r = paired_bootstrap(a, b, 20000, 7);
    REQUIRE(r.samples == 20000);
    REQUIRE(r.wins_b == 0);
    REQUIRE_THAT(r.wins_a / 20000.0, WithinAbs(0.75, 0.015));
    REQUIRE_THAT(r.p_value, WithinAbs(0.25, 0.015));
  }
  SECTION("three examples, one discordant each way: A wins iff it draws its example more often") {
    // 27 equally likely draws (c0, c1, c2). Ties c0 == c1: (0,0,3) once, (1,1,1) 3! = 6 times ->
    // 7/27. By symmetry P(A wins) = (1 - 7/27) / 2 = 10/27 = 0.37037.
    const std::vector<std::uint8_t> a{1, 0, 1};
    const std::vector<std::uint8_t> b{0, 1, 1};
    const auto r = paired_bootstrap(a, b, 20000, 3);
    REQUIRE_THAT(r.wins_a / 20000.0, WithinAbs(10.0 / 27.0, 0.015));
    REQUIRE_THAT(r.wins_b / 20000.0, WithinAbs(10.0 / 27.0, 0.015));
  }
  SECTION("identical predictions never win; a perfect model always wins") {
    const std::vector<std::uint8_t> same{1, 0, 1, 1};
    const auto tie = paired_bootstrap(same, same, 500, 1);
    REQUIRE(tie.wins_a == 0);
    REQUIRE_THAT(tie.p_value, WithinAbs(1.0, 0.0));
    const std::vector<std::uint8_t> all{1, 1, 1, 1};
    const std::vector<std::uint8_t> none{0, 0, 0, 0};
    REQUIRE(paired_bootstrap(all, none, 500, 1).wins_a == 500);
  }
  SECTION("deterministic for a seed; bad input refused") {
    const std::vector<std::uint8_t> a{1, 0, 1, 0, 1, 1, 0};
    const std::vector<std::uint8_t> b{0, 0, 1, 1, 1, 0, 0};
    REQUIRE(paired_bootstrap(a, b, 300, 9).wins_a == paired_bootstrap(a, b, 300, 9).wins_a);
    REQUIRE_THROWS_AS(paired_bootstrap(std::vector<std::uint8_t>{}, std::vector<std::uint8_t>{}),
                      gyre::Error);
    REQUIRE_THROWS_AS(paired_bootstrap(a, std::vector<std::uint8_t>{1}), gyre::Error);
  }
}

// ---- head-to-head statistics of `gyre compare` (issue 14) ----


namespace {

nlohmann::json significance_fixture() {
  std::ifstream in(std::string(GYRE_FIXTURES_DIR) + "/significance/significance.json");
  REQUIRE(in.good());
  std::stringstream ss;
  ss << in.rdbuf();
  return nlohmann::json::parse(ss.str());
}

// Accuracy from additive counts [correct, 1].
double accuracy_metric(std::span<const double> sums) {
  return sums[1] > 0 ? sums[0] / sums[1] : 0.0;
}

gyre::eval::ExampleCounts accuracy_counts(const std::vector<int>& correct) {
  gyre::eval::ExampleCounts c;
  c.width = 2;
  for (const int x : correct) {
    c.values.push_back(x);
    c.values.push_back(1.0);
  }
  return c;
}

}  // namespace

TEST_CASE("permutation test over per-seed scores matches SciPy", "[significance]") {
  // ref: tests/fixtures/significance/significance.json (tools/make_significance_fixtures.py,
  // scipy.stats.permutation_test, exact enumeration, independent samples)
  const auto f = significance_fixture();
  for (const auto& c : f["permutation"]) {
    const auto a = c["a"].get<std::vector<double>>(), b = c["b"].get<std::vector<double>>();
    INFO(c.dump());
    const auto r = gyre::eval::permutation_test(a, b);
    REQUIRE(r.exact);
    REQUIRE_THAT(r.difference, WithinAbs(c["statistic"].get<double>(), 1e-12));
    REQUIRE_THAT(r.p_value, WithinAbs(c["p_value"].get<double>(), 1e-12));
  }
  // ref: same file, brute-force enumeration in Python (unequal sizes, |statistic| convention)
  for (const auto& c : f["permutation_unequal"]) {
    const auto a = c["a"].get<std::vector<double>>(), b = c["b"].get<std::vector<double>>();
    INFO(c.dump());
    const auto r = gyre::eval::permutation_test(a, b);
    REQUIRE(r.relabellings == c["relabellings"].get<std::size_t>());
    REQUIRE_THAT(r.p_value, WithinAbs(c["p_value"].get<double>(), 1e-12));
  }
  SECTION("Monte-Carlo relabellings approach the exact p-value") {
    const auto& c = f["permutation"][0];
    const auto a = c["a"].get<std::vector<double>>(), b = c["b"].get<std::vector<double>>();
    const auto r = gyre::eval::permutation_test(a, b, /*max_exact=*/10, 20000, 3);
    REQUIRE(!r.exact);
    // Monte-Carlo error sqrt(p (1 - p) / 20000) ~ 0.0014 at p = 0.04; tolerance 0.006.
    REQUIRE_THAT(r.p_value, WithinAbs(c["p_value"].get<double>(), 0.006));
  }
  SECTION("one seed per side cannot show anything") {
    REQUIRE_THAT(gyre::eval::permutation_test(std::vector<double>{0.9}, std::vector<double>{0.1}).p_value,
                 WithinAbs(1.0, 0.0));
  }
}

TEST_CASE("McNemar's exact test matches SciPy's binomial test", "[significance]") {
  // ref: significance.json, scipy.stats.binomtest(min(b, c), b + c, 0.5).pvalue
  // The fixture is kept in a local: a range-for over a member of a temporary would read freed memory.
  const auto f = significance_fixture();
  for (const auto& c : f["mcnemar"]) {
    INFO(c.dump());
    REQUIRE_THAT(mcnemar_exact_p(c["only_a"].get<std::int64_t>(), c["only_b"].get<std::int64_t>()),
                 WithinAbs(c["p_value"].get<double>(), 1e-10));
  }
}

TEST_CASE("normal quantiles and the seeds-needed estimate match SciPy", "[significance]") {
  const auto f = significance_fixture();
  // ref: significance.json, scipy.stats.norm.ppf
  for (const auto& c : f["normal_quantile"])
    REQUIRE_THAT(gyre::eval::normal_quantile(c["p"].get<double>()), WithinAbs(c["x"].get<double>(), 1e-9));
  // ref: significance.json, the normal-approximation sample size with SciPy's quantiles
  for (const auto& c : f["seeds_to_detect"]) {
    INFO(c.dump());
    REQUIRE(gyre::eval::seeds_to_detect(c["difference"].get<double>(), c["std_a"].get<double>(),
                                        c["std_b"].get<double>()) == c["seeds"].get<long long>());
  }
  REQUIRE(gyre::eval::seeds_to_detect(0.0, 0.01, 0.01) == 0);
  REQUIRE_THROWS_AS(gyre::eval::normal_quantile(1.0), gyre::Error);
}

TEST_CASE("two-level bootstrap with one run per side is SciPy's paired bootstrap", "[significance]") {
  // ref: significance.json, scipy.stats.bootstrap(paired=True, method="percentile",
  // n_resamples=100000). Both are Monte-Carlo: with 20000 resamples here the interval ends move
  // by about 0.001 between generators; tolerance 0.004.
  const auto f = significance_fixture()["paired_bootstrap"];
  const std::vector<gyre::eval::ExampleCounts> a{accuracy_counts(f["a"].get<std::vector<int>>())};
  const std::vector<gyre::eval::ExampleCounts> b{accuracy_counts(f["b"].get<std::vector<int>>())};
  const auto r = gyre::eval::hierarchical_bootstrap(a, b, accuracy_metric, 20000, 0.95, 11);
  REQUIRE(r.examples == 400);
  REQUIRE_THAT(r.difference, WithinAbs(f["difference"].get<double>(), 1e-12));
  REQUIRE_THAT(r.low, WithinAbs(f["low"].get<double>(), 0.004));
  REQUIRE_THAT(r.high, WithinAbs(f["high"].get<double>(), 0.004));

  SECTION("bad input is refused") {
    const std::vector<gyre::eval::ExampleCounts> none;
    REQUIRE_THROWS_AS(gyre::eval::hierarchical_bootstrap(none, b, accuracy_metric), gyre::Error);
    const std::vector<gyre::eval::ExampleCounts> shorter{accuracy_counts({1, 0, 1})};
    REQUIRE_THROWS_AS(gyre::eval::hierarchical_bootstrap(a, shorter, accuracy_metric), gyre::Error);
  }
  SECTION("deterministic for a seed") {
    const auto again = gyre::eval::hierarchical_bootstrap(a, b, accuracy_metric, 500, 0.95, 5);
    const auto same = gyre::eval::hierarchical_bootstrap(a, b, accuracy_metric, 500, 0.95, 5);
    REQUIRE_THAT(again.low, WithinAbs(same.low, 0.0));
    REQUIRE_THAT(again.high, WithinAbs(same.high, 0.0));
  }
}

// Coverage simulation: synthetic per-example correctness with a known difference. Run j of a
// configuration with probit mean m gets example i right when
//   m + o_j + rho * z_i + sqrt(1 - rho^2) * e_ji > 0,  o_j ~ N(0, tau^2), z_i, e_ji ~ N(0, 1),
// with z_i shared by both configurations (the same examples are easy for both: pairing) and o_j
// the seed effect. Marginally P(right) = Phi(m / sqrt(1 + tau^2)), so the true difference of the
// expected accuracies is Phi(mA / s) - Phi(mB / s), s = sqrt(1 + tau^2) (Gaussian convolution,
// textbook identity). The 95% interval must contain it in about 95% of the experiments.
TEST_CASE("two-level bootstrap interval covers a known difference", "[significance]") {
  const int experiments = 200, seeds = 5, examples = 300, resamples = 300;
  const double m_a = 0.9, m_b = 0.8, tau = 0.12, rho = 0.6;
  const double s = std::sqrt(1.0 + tau * tau);
  auto phi = [](double x) { return 0.5 * std::erfc(-x / std::sqrt(2.0)); };
  const double truth = phi(m_a / s) - phi(m_b / s);
  gyre::Rng rng(20261202);
  int covered = 0, covered_example_only = 0;
  double width_sum = 0.0;
  for (int e = 0; e < experiments; ++e) {
    std::vector<double> z(examples);
    for (auto& v : z) v = rng.normal();
    auto runs = [&](double m) {
      std::vector<gyre::eval::ExampleCounts> out;
      for (int j = 0; j < seeds; ++j) {
        const double o = tau * rng.normal();
        std::vector<int> correct(examples);
        for (int i = 0; i < examples; ++i)
          correct[static_cast<std::size_t>(i)] =
              m + o + rho * z[static_cast<std::size_t>(i)] + std::sqrt(1.0 - rho * rho) * rng.normal() > 0.0;
        out.push_back(accuracy_counts(correct));
      }
      return out;
    };
    const auto a = runs(m_a), b = runs(m_b);
    const auto r = gyre::eval::hierarchical_bootstrap(a, b, accuracy_metric, resamples, 0.95,
                                                      static_cast<std::uint64_t>(e + 1));
    if (r.low <= truth && truth <= r.high) ++covered;
    width_sum += r.high - r.low;
    // The old evidence: one seed's runs, examples resampled only.
    const auto one =
        gyre::eval::hierarchical_bootstrap(std::span(a).first(1), std::span(b).first(1), accuracy_metric,
                                           resamples, 0.95, static_cast<std::uint64_t>(e + 1));
    if (one.low <= truth && truth <= one.high) ++covered_example_only;
  }
  const double coverage = covered / double(experiments);
  const double coverage_one = covered_example_only / double(experiments);
  INFO("true difference " << truth << ", coverage " << coverage << " (one seed, examples only: "
                          << coverage_one << "), mean width " << width_sum / experiments);
  std::printf("two-level bootstrap coverage %.3f (one seed, examples only: %.3f), true difference %.4f\n",
              coverage, coverage_one, truth);
  // Standard error of a coverage of 0.95 over 200 experiments: sqrt(.95 * .05 / 200) = 0.015.
  CHECK(coverage >= 0.90);
  CHECK(coverage <= 0.99);
  // Leaving the seeds out must show: the example-only interval covers clearly less.
  CHECK(coverage_one < coverage - 0.05);
}
