// Per-label decision thresholds of a multi-label classifier, tuned for each label's F1
// (eval::tune_label_thresholds). References: hand-counted F1 = 2TP / (2TP + FP + FN) (the
// harmonic mean of precision and recall, van Rijsbergen 1979) and a brute-force search over every
// threshold that changes a decision, scored by eval::multilabel_metrics (itself checked against
// sklearn 1.2.1 in test_classification.cpp).

#include <catch2/catch.hpp>

#include <cstdint>
#include <random>
#include <set>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/eval/classification.hpp"

namespace {

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;

// One label's column as an [N x 1] matrix.
struct Column {
  std::vector<std::uint8_t> gold;
  std::vector<float> scores;
};

Column column(const std::vector<std::pair<float, int>>& rows) {
  Column c;
  for (const auto& [s, g] : rows) {
    c.scores.push_back(s);
    c.gold.push_back(static_cast<std::uint8_t>(g));
  }
  return c;
}

float tune_one(const Column& c, float global) {
  const auto t = gyre::eval::tune_label_thresholds(c.gold, c.scores, 1, global);
  REQUIRE(t.size() == 1);
  return t[0];
}

// The float a threshold between two scores is (their midpoint, as the tuner computes it).
float midpoint(float lo, float hi) {
  return static_cast<float>((static_cast<double>(lo) + static_cast<double>(hi)) / 2);
}

}  // namespace

TEST_CASE("label thresholds: hand-counted F1 picks the best interval, at its midpoint", "[eval]") {
  // Hand count (F1 = 2TP / (2TP + FP + FN), 3 positives): choosing the rows with score >= t gives
  //   t in (0.8, 0.9]: 2/(2+0+2) = 0.5      t in (0.4, 0.7]: 4/(4+1+1) = 0.667 (0.5 is here)
  //   t in (0.3, 0.4]: 6/(6+1+0) = 0.857    t in (0.2, 0.3]: 6/(6+2) = 0.75
  // The best is (0.3, 0.4]; the tuner returns its midpoint.
  const Column c = column({{0.9f, 1}, {0.8f, 0}, {0.7f, 1}, {0.4f, 1}, {0.3f, 0}, {0.2f, 0}});
  CHECK(tune_one(c, 0.5f) == midpoint(0.3f, 0.4f));
  CHECK_THAT(tune_one(c, 0.5f), WithinAbs(0.35, 1e-6));
}

TEST_CASE("label thresholds: ties keep the global threshold, else the nearest best interval", "[eval]") {
  SECTION("the global threshold is among the best: kept exactly") {
    // t = 0.5 chooses both positives and no negative: F1 = 1, which nothing beats.
    const Column c = column({{0.9f, 1}, {0.6f, 1}, {0.1f, 0}});
    CHECK(tune_one(c, 0.5f) == 0.5f);
    CHECK(tune_one(c, 0.3f) == 0.3f);
  }
  SECTION("a label with no positive (F1 0 at every threshold) keeps it") {
    const Column c = column({{0.9f, 0}, {0.2f, 0}});
    CHECK(tune_one(c, 0.5f) == 0.5f);
  }
  SECTION("no rows at all keep it") {
    CHECK(gyre::eval::tune_label_thresholds({}, {}, 3, 0.4f) == std::vector<float>{0.4f, 0.4f, 0.4f});
  }
  SECTION("two best intervals: the one nearer the global threshold") {
    // Hand count, 2 positives: (0.7, 0.9] gives 2/(2+0+1) = 2/3; (0.3, 0.4] gives 4/(4+2+0) = 2/3;
    // 0.5 lies in (0.4, 0.55]: 2/(2+2+1) = 0.4. (0.3, 0.4] is 0.1 from 0.5, (0.7, 0.9] is 0.2.
    const Column c = column({{0.9f, 1}, {0.7f, 0}, {0.55f, 0}, {0.4f, 1}, {0.3f, 0}, {0.2f, 0}});
    CHECK(tune_one(c, 0.5f) == midpoint(0.3f, 0.4f));
    // Seen from 0.95 (which chooses nothing: F1 0) the upper interval is the nearer one.
    CHECK(tune_one(c, 0.95f) == midpoint(0.7f, 0.9f));
    // 0.75 lies in the upper interval itself: a tie, kept.
    CHECK(tune_one(c, 0.75f) == 0.75f);
  }
  SECTION("choosing every row is a candidate too (a threshold below the lowest score)") {
    // The negatives score high and the one positive low: at 0.5 F1 = 0; choosing every row gives
    // 2/(2+2+0) = 0.5, the best.
    const Column c = column({{0.9f, 0}, {0.8f, 0}, {0.1f, 1}});
    CHECK(tune_one(c, 0.5f) == midpoint(0.0f, 0.1f));
  }
}

TEST_CASE("label thresholds equal a brute-force search scored by multilabel_metrics", "[eval]") {
  // Scores on a 0.01 grid (many equal scores), gold drawn with probability = score: 5 labels,
  // 300 rows, three seeds and three global thresholds.
  constexpr std::size_t kLabels = 5, kRows = 300;
  const std::vector<std::string> names = {"a", "b", "c", "d", "e"};
  for (const unsigned seed : {1u, 2u, 3u}) {
    std::mt19937 rng(seed);
    std::uniform_int_distribution<int> cents(0, 100);
    std::uniform_real_distribution<double> u(0, 1);
    std::vector<float> scores(kRows * kLabels);
    std::vector<std::uint8_t> gold(kRows * kLabels);
    for (std::size_t i = 0; i < scores.size(); ++i) {
      scores[i] = static_cast<float>(cents(rng)) / 100.0f;
      // Label e is rare and badly ranked, so its best threshold is far from 0.5.
      const double p = i % kLabels == 4 ? 0.1 * (1.0 - scores[i]) : scores[i];
      gold[i] = u(rng) < p ? 1 : 0;
    }
    for (const float global : {0.5f, 0.3f, 0.77f}) {
      INFO("seed " << seed << " global " << global);
      const auto tuned = gyre::eval::tune_label_thresholds(gold, scores, kLabels, global);
      REQUIRE(tuned.size() == kLabels);
      const auto at_tuned = gyre::eval::multilabel_metrics(gold, scores, names, global, tuned);
      // Brute force: every score value (a threshold equal to a score chooses it), midpoints, a
      // 0.001 grid, and values just above the highest score (choosing nothing).
      std::set<float> candidates(scores.begin(), scores.end());
      for (int k = 1; k < 1000; ++k) candidates.insert(static_cast<float>(k) / 1000.0f);
      candidates.insert(0.999999f);
      candidates.erase(0.0f);
      candidates.erase(1.0f);
      std::vector<double> best(kLabels, -1.0);
      for (const float t : candidates) {
        const auto m = gyre::eval::multilabel_metrics(gold, scores, names, t);
        for (std::size_t l = 0; l < kLabels; ++l) best[l] = std::max(best[l], m.labels[l].f1);
      }
      const auto at_global = gyre::eval::multilabel_metrics(gold, scores, names, global);
      for (std::size_t l = 0; l < kLabels; ++l) {
        INFO("label " << names[l] << " tuned " << tuned[l]);
        CHECK(tuned[l] > 0.0f);
        CHECK(tuned[l] < 1.0f);
        CHECK_THAT(at_tuned.labels[l].f1, WithinAbs(best[l], 1e-12));
        // Ties keep the global threshold (distinct F1 values over 300 rows differ by > 1e-6).
        if (at_global.labels[l].f1 > best[l] - 1e-9)
          CHECK(tuned[l] == global);
        else
          CHECK(tuned[l] != global);
      }
    }
  }
}

TEST_CASE("per-label thresholds in multi-label metrics, JSON and table", "[eval]") {
  const std::vector<std::string> names = {"billing", "repair"};
  // Row-major [3 x 2]; billing decided at 0.3, repair at 0.8.
  const std::vector<std::uint8_t> gold = {1, 0, 1, 1, 0, 1};
  const std::vector<float> scores = {0.4f, 0.7f, 0.35f, 0.9f, 0.2f, 0.85f};
  const std::vector<float> thresholds = {0.3f, 0.8f};
  const auto m = gyre::eval::multilabel_metrics(gold, scores, names, 0.5, thresholds);
  CHECK(m.labels[0].predicted == 2);  // 0.4, 0.35 >= 0.3
  CHECK(m.labels[0].correct == 2);
  CHECK(m.labels[1].predicted == 2);  // 0.9, 0.85 >= 0.8
  CHECK(m.labels[1].correct == 2);
  CHECK(m.exact_match == 1.0);
  CHECK(m.to_json()["label_thresholds"].size() == 2);
  CHECK_THAT(m.to_table(), Contains("decision thresholds per label: billing 0.30, repair 0.80"));
  // The global threshold alone would miss billing's 0.4 and 0.35 and choose repair's 0.7.
  const auto g = gyre::eval::multilabel_metrics(gold, scores, names, 0.5);
  CHECK(g.labels[0].predicted == 0);
  CHECK(g.labels[1].predicted == 3);
  CHECK_FALSE(g.to_json().contains("label_thresholds"));
}

TEST_CASE("label threshold tuning refuses bad input", "[eval]") {
  const std::vector<std::uint8_t> gold = {1, 0};
  const std::vector<float> scores = {0.5f, 1.5f};
  CHECK_THROWS_WITH(gyre::eval::tune_label_thresholds(gold, scores, 1, 0.5f), Contains("not a probability"));
  CHECK_THROWS_WITH(gyre::eval::tune_label_thresholds(gold, std::vector<float>{0.5f}, 1, 0.5f),
                    Contains("1 scores"));
  CHECK_THROWS_WITH(
      gyre::eval::tune_label_thresholds(std::vector<std::uint8_t>{2}, std::vector<float>{0.5f}, 1, 0.5f),
      Contains("not 0 or 1"));
  CHECK_THROWS(gyre::eval::tune_label_thresholds(gold, std::vector<float>{0.5f, 0.5f}, 1, 1.0f));
}
