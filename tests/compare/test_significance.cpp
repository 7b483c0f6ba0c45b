// Summary statistics and paired significance tests (gyre/eval/significance.hpp).

#include <catch2/catch.hpp>

#include <vector>

#include "gyre/core/error.hpp"
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
