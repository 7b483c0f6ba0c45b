// Which texts to label next: uncertainty measures, duplicate collapsing, and the greedy k-center
// rule, on hand-made predictions (no model needed).

#include <catch2/catch.hpp>

#include <cmath>
#include <set>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/train/label_next.hpp"

using Catch::Matchers::WithinAbs;
namespace train = gyre::train;

namespace {

gyre::data::EncodedExample text(std::vector<std::int32_t> ids) {
  gyre::data::EncodedExample e;
  e.ids = std::move(ids);
  return e;
}

train::ExamplePrediction prediction(std::vector<float> probs, std::vector<float> features) {
  train::ExamplePrediction p;
  p.probs = std::move(probs);
  p.features = std::move(features);
  return p;
}

}  // namespace

TEST_CASE("uncertainty measures", "[train][label-next]") {
  const std::vector<float> sure{0.9f, 0.05f, 0.05f}, torn{0.45f, 0.44f, 0.11f},
      flat{1 / 3.f, 1 / 3.f, 1 / 3.f};
  // margin = 1 - (p1 - p2), by hand: 1 - 0.85, 1 - 0.01, 1 - 0.
  CHECK_THAT(train::uncertainty(sure, false, train::Uncertainty::kMargin), WithinAbs(0.15, 1e-6));
  CHECK_THAT(train::uncertainty(torn, false, train::Uncertainty::kMargin), WithinAbs(0.99, 1e-6));
  // entropy / log C: a uniform row is 1.
  CHECK_THAT(train::uncertainty(flat, false, train::Uncertainty::kEntropy), WithinAbs(1.0, 1e-6));
  // -(0.9 ln 0.9 + 2 * 0.05 ln 0.05) / ln 3, by hand.
  const double h = -(0.9 * std::log(0.9) + 2 * 0.05 * std::log(0.05)) / std::log(3.0);
  CHECK_THAT(train::uncertainty(sure, false, train::Uncertainty::kEntropy), WithinAbs(h, 1e-6));
  // Multi-label margin: the label closest to 1/2 decides; 0.6 -> 1 - 2 * 0.1.
  const std::vector<float> labels{0.95f, 0.6f, 0.02f};
  CHECK_THAT(train::uncertainty(labels, true, train::Uncertainty::kMargin), WithinAbs(0.8, 1e-6));
}

TEST_CASE("pick: duplicates collapse, uncertain first, k-center spreads the batch", "[train][label-next]") {
  // Texts 0 and 3 have the same ids (exact duplicates); text 5 differs from 1 by one token of
  // six (Jaccard 5/7 < 0.8: kept) and text 6 is text 1 reordered (Jaccard 1: a near duplicate).
  const std::vector<gyre::data::EncodedExample> pool{
      text({2, 3, 4}),    text({5, 6, 7, 8, 9, 10}), text({11, 12}),           text({2, 3, 4}),
      text({13, 14, 15}), text({5, 6, 7, 8, 9, 16}), text({10, 9, 8, 7, 6, 5})};
  // Uncertainty order (margin): 0/3 most, then 1 and 6, then 5, then 4, then 2. Features: 0, 1, 5, 6
  // sit together; 4 is far away.
  const std::vector<train::ExamplePrediction> preds{
      prediction({0.5f, 0.5f}, {1.0f, 0.0f}),    prediction({0.6f, 0.4f}, {0.99f, 0.1f}),
      prediction({0.99f, 0.01f}, {0.0f, -1.0f}), prediction({0.5f, 0.5f}, {1.0f, 0.0f}),
      prediction({0.8f, 0.2f}, {-1.0f, 0.05f}),  prediction({0.7f, 0.3f}, {0.98f, 0.12f}),
      prediction({0.6f, 0.4f}, {0.99f, 0.1f})};
  train::PickOptions o;
  o.count = 3;
  SECTION("uncertain: the three most uncertain distinct texts") {
    o.rule = train::PickRule::kUncertain;
    const auto picks = train::pick_to_label(pool, preds, {}, o);
    REQUIRE(picks.size() == 3);
    CHECK(picks[0].index == 0);
    CHECK(picks[0].copies == std::vector<std::size_t>{3});
    CHECK(picks[1].index == 1);
    CHECK(picks[1].copies == std::vector<std::size_t>{6});
    CHECK(picks[2].index == 5);
  }
  SECTION("diverse: after the most uncertain, the farthest candidate, not its neighbours") {
    o.rule = train::PickRule::kDiverse;
    const auto picks = train::pick_to_label(pool, preds, {}, o);
    REQUIRE(picks.size() == 3);
    CHECK(picks[0].index == 0);
    // Farthest from text 0 ([1, 0]) is text 4 (about [-1, 0.05], distance ~2); then the candidate
    // farthest from both is text 2 ([0, -1]), at distance sqrt(2) from text 0.
    CHECK(picks[1].index == 4);
    CHECK(picks[2].index == 2);
    CHECK_THAT(picks[2].distance, WithinAbs(std::sqrt(2.0), 1e-6));
  }
  SECTION("diverse with a labelled set: keeps away from what is labelled") {
    o.rule = train::PickRule::kDiverse;
    o.count = 1;
    const std::vector<std::vector<float>> labelled{{0.0f, -1.0f}, {-1.0f, 0.0f}};
    const auto picks = train::pick_to_label(pool, preds, labelled, o);
    REQUIRE(picks.size() == 1);
    // Text 5 (about [0.99, 0.12]) is farthest from both labelled points; texts 2 and 4 sit on them.
    CHECK(picks[0].index == 5);
  }
  SECTION("random: seeded, a permutation of the distinct texts") {
    o.rule = train::PickRule::kRandom;
    o.count = 10;
    const auto a = train::pick_to_label(pool, preds, {}, o);
    const auto b = train::pick_to_label(pool, preds, {}, o);
    REQUIRE(a.size() == b.size());
    std::set<std::size_t> seen;
    for (std::size_t i = 0; i < a.size(); ++i) {
      CHECK(a[i].index == b[i].index);
      seen.insert(a[i].index);
    }
    CHECK(seen.size() == a.size());
    CHECK_FALSE(seen.count(3));  // the exact duplicate of text 0 is never offered
  }
  SECTION("mismatched sizes are refused") {
    const std::vector<train::ExamplePrediction> fewer(preds.begin(), preds.end() - 1);
    REQUIRE_THROWS_AS(train::pick_to_label(pool, fewer, {}, o), gyre::Error);
  }
}
