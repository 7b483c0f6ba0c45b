// Hyperband / successive-halving arithmetic of `gyre hone` (gyre/train/hone.hpp) and the sampling
// of its search space.

#include <catch2/catch.hpp>

#include <cmath>
#include <set>

#include "gyre/train/config.hpp"
#include "gyre/train/hone.hpp"

using gyre::train::HoneBracket;
using gyre::train::hyperband_brackets;

namespace {

std::vector<std::pair<int, int>> rungs_of(const HoneBracket& b) {
  std::vector<std::pair<int, int>> out;
  for (const auto& r : b.rungs) out.emplace_back(r.trials, r.epochs);
  return out;
}

}  // namespace

TEST_CASE("hone: Hyperband brackets for R = 81, eta = 3 match the paper's worked example", "[hone]") {
  // ref: Li, Jamieson, DeSalvo, Rostamizadeh, Talwalkar, "Hyperband: A Novel Bandit-Based
  // Approach to Hyperparameter Optimization", JMLR 18(185) 2018, Table 1 (R = 81, eta = 3):
  // (n_i, r_i) per bracket s. Values transcribed from memory of the table; each also follows by
  // hand from Algorithm 1's n = ceil(B/R eta^s/(s+1)), r = R eta^-s, n_i = floor(n eta^-i).
  const auto b = hyperband_brackets(81, 3);
  REQUIRE(b.size() == 5);
  CHECK(b[0].s == 4);
  CHECK(rungs_of(b[0]) == std::vector<std::pair<int, int>>{{81, 1}, {27, 3}, {9, 9}, {3, 27}, {1, 81}});
  CHECK(b[1].s == 3);
  CHECK(rungs_of(b[1]) == std::vector<std::pair<int, int>>{{34, 3}, {11, 9}, {3, 27}, {1, 81}});
  CHECK(b[2].s == 2);
  CHECK(rungs_of(b[2]) == std::vector<std::pair<int, int>>{{15, 9}, {5, 27}, {1, 81}});
  CHECK(b[3].s == 1);
  CHECK(rungs_of(b[3]) == std::vector<std::pair<int, int>>{{8, 27}, {2, 81}});
  CHECK(b[4].s == 0);
  CHECK(rungs_of(b[4]) == std::vector<std::pair<int, int>>{{5, 81}});
}

TEST_CASE("hone: s_max is floor(log_eta R) exactly, including exact powers", "[hone]") {
  // log(81)/log(3) is 3.999... in doubles; the integer computation must give 4.
  CHECK(gyre::train::hyperband_s_max(81, 3) == 4);
  CHECK(gyre::train::hyperband_s_max(80, 3) == 3);
  CHECK(gyre::train::hyperband_s_max(1, 3) == 0);
  CHECK(gyre::train::hyperband_s_max(1000, 10) == 3);
  CHECK(gyre::train::hyperband_s_max(8, 2) == 3);
  REQUIRE_THROWS_AS(gyre::train::hyperband_s_max(0, 3), gyre::ConfigError);
  REQUIRE_THROWS_AS(gyre::train::hyperband_s_max(9, 1), gyre::ConfigError);
}

TEST_CASE("hone: R not a power of eta rounds rung epochs down and ends every bracket at R", "[hone]") {
  // R = 10, eta = 3: s_max = 2, B = 30. s = 2: n = ceil(3*9/3) = 9, r = 10/9 -> 1 epoch;
  // rungs 9@1, 3@floor(10/3)=3, 1@10. s = 1: n = ceil(3*3/2) = 5: 5@3, 1@10. s = 0: n = 3: 3@10.
  // (Worked by hand from Algorithm 1.)
  const auto b = hyperband_brackets(10, 3);
  REQUIRE(b.size() == 3);
  CHECK(rungs_of(b[0]) == std::vector<std::pair<int, int>>{{9, 1}, {3, 3}, {1, 10}});
  CHECK(rungs_of(b[1]) == std::vector<std::pair<int, int>>{{5, 3}, {1, 10}});
  CHECK(rungs_of(b[2]) == std::vector<std::pair<int, int>>{{3, 10}});
  for (const auto& br : b) CHECK(br.rungs.back().epochs == 10);
}

TEST_CASE("hone: a bracket cut by the trial budget still halves and keeps at least one", "[hone]") {
  const auto b = hyperband_brackets(9, 3)[0];  // 9@1, 3@3, 1@9
  REQUIRE(rungs_of(b) == std::vector<std::pair<int, int>>{{9, 1}, {3, 3}, {1, 9}});
  CHECK(rungs_of(gyre::train::shrink_bracket(b, 5, 3)) ==
        std::vector<std::pair<int, int>>{{5, 1}, {1, 3}, {1, 9}});
  CHECK(rungs_of(gyre::train::shrink_bracket(b, 2, 3)) ==
        std::vector<std::pair<int, int>>{{2, 1}, {1, 3}, {1, 9}});
}

TEST_CASE("hone: sampled settings are deterministic, inside the space and valid settings", "[hone]") {
  const auto& space = gyre::train::default_hone_space();
  gyre::Rng a(7), b(7), c(8);
  std::set<std::string> distinct;
  std::set<bool> chars_seen;
  for (int i = 0; i < 200; ++i) {
    const auto sa = gyre::train::sample_settings(space, a);
    CHECK(sa == gyre::train::sample_settings(space, b));
    distinct.insert(sa.dump());
    const double lr = sa.at("learning_rate").get<double>();
    CHECK(lr >= 3e-4 * (1 - 1e-9));
    CHECK(lr <= 1e-2 * (1 + 1e-9));
    const double dropout = sa.at("dropout").get<double>();
    CHECK(dropout >= 0.0);
    CHECK(dropout <= 0.5);
    chars_seen.insert(sa.at("char_encoder").get<bool>());  // issue 12: the character encoder on/off
    // Every sample is a valid training config (the settings table checks types and ranges).
    auto j = gyre::train::default_config_json();
    j["train"] = "x.tsv";
    for (const auto& [k, v] : sa.items()) j[k] = v;
    CHECK_NOTHROW(gyre::train::validate(gyre::train::config_from_json(j)));
  }
  CHECK(chars_seen.size() == 2);
  CHECK(distinct.size() > 150);  // 4*3*3*2 choices times two continuous ranges: nearly all distinct
  CHECK(gyre::train::sample_settings(space, c) != gyre::train::sample_settings(space, a));
}
