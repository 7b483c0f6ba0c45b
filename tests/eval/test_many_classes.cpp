// Metrics that scale to many classes (issue 10 item 3): memory O(C + distinct confusions), not
// O(C^2) or O(N x C); beyond eval::kDenseConfusionLimit labels the JSON and the text table give
// the largest off-diagonal cells instead of the matrix. The dense C x C matrix of 100k labels
// needed 80 GB; 5k labels wrote 600 MB of JSON.

#include <catch2/catch.hpp>

#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/eval/classification.hpp"

using gyre::eval::ClassificationAccumulator;
using gyre::eval::kDenseConfusionLimit;
using gyre::eval::kTopConfusions;

namespace {

std::vector<std::string> label_names(std::size_t n) {
  std::vector<std::string> out;
  out.reserve(n);
  for (std::size_t i = 0; i < n; ++i) out.push_back("label" + std::to_string(100000 + i));  // sorted
  return out;
}

}  // namespace

TEST_CASE("100000 classes: metrics without a dense confusion matrix", "[eval]") {
  const std::size_t C = 100000;
  const auto names = label_names(C);
  // Example i: gold i % C. Predicted = gold, except every 4th example goes to (gold + 1) % C and,
  // among the first 300, every 10th to label 7 as well (so cell (g, 7) appears several times).
  std::vector<std::int32_t> gold, pred;
  for (std::int32_t i = 0; i < 2000; ++i) {
    const std::int32_t g = i % static_cast<std::int32_t>(C);
    gold.push_back(g);
    pred.push_back(i % 4 == 0 ? (g + 1) % static_cast<std::int32_t>(C) : g);
  }
  for (std::int32_t i = 0; i < 300; i += 10) {
    gold.push_back(3);
    pred.push_back(7);
  }
  const auto m = gyre::eval::classification_metrics(gold, pred, names);
  // Counted by construction: 1500 right of 2030; cells: 1500 diagonal + 500 (g, g+1) + 1 (3, 7).
  CHECK(m.correct == 1500);
  CHECK(m.confusion.size() == 2001);
  CHECK(m.confusion_at(3, 7) == 30);
  CHECK(m.confusion_at(0, 1) == 1);
  CHECK(m.confusion_at(5, 5) == 1);
  CHECK(m.confusion_at(99999, 0) == 0);
  const auto top = m.top_confusions(3);
  REQUIRE(top.size() == 3);
  CHECK((top[0].gold == 3 && top[0].predicted == 7 && top[0].count == 30));
  CHECK((top[1].gold == 0 && top[1].predicted == 1));  // ties: lowest gold id first
  CHECK((top[2].gold == 4 && top[2].predicted == 5));

  const nlohmann::json j = m.to_json();
  REQUIRE(j["confusion"].contains("top"));
  CHECK_FALSE(j["confusion"].contains("counts"));
  CHECK(j["confusion"]["top"].size() == kTopConfusions);
  CHECK(j["confusion"]["top"][0] ==
        nlohmann::json{{"gold", "label100003"}, {"predicted", "label100007"}, {"count", 30}});
  CHECK(j["confusion"]["off_diagonal_cells"] == 501);
  // One entry per class plus 100 cells: ~15 MB for 100k classes, never C^2.
  CHECK(j.dump().size() < 200 * C);
  const std::string table = m.confusion_table();
  CHECK(table.find("the 100 most frequent of 501 confusions") != std::string::npos);
  CHECK(table.find("label100003") != std::string::npos);
}

TEST_CASE("the accumulator scores with probabilities one example at a time", "[eval]") {
  // Same numbers as classification_metrics over the whole [N x C] matrix (which it replaces in
  // train::evaluate, so no caller holds N x C floats).
  const std::size_t C = 5;
  const auto names = label_names(C);
  std::vector<std::int32_t> gold{0, 1, 2, 3, 4, 0, 1};
  std::vector<std::int32_t> pred{0, 2, 2, 3, 0, 0, 1};
  std::vector<float> probs;
  ClassificationAccumulator acc(names, true);
  for (std::size_t i = 0; i < gold.size(); ++i) {
    std::vector<float> row(C, 0.05f);
    row[static_cast<std::size_t>(pred[i])] = 0.8f;
    probs.insert(probs.end(), row.begin(), row.end());
    acc.add(gold[i], pred[i], row);
  }
  const auto a = acc.finish();
  const auto b = gyre::eval::classification_metrics(gold, pred, names, probs);
  CHECK(a.to_json() == b.to_json());
  CHECK_THROWS_AS(acc.add(0, 9, std::vector<float>(C, 0.2f)), gyre::Error);
  CHECK_THROWS_AS(acc.add(0, 0, std::vector<float>(C - 1, 0.2f)), gyre::Error);
}

TEST_CASE("the full confusion matrix up to kDenseConfusionLimit labels, the top cells beyond", "[eval]") {
  for (const std::size_t C : {kDenseConfusionLimit, kDenseConfusionLimit + 1}) {
    const auto names = label_names(C);
    const std::vector<std::int32_t> gold{0, 1, 1};
    const std::vector<std::int32_t> pred{0, 0, 1};
    const auto j = gyre::eval::classification_metrics(gold, pred, names).to_json();
    INFO("classes " << C);
    if (C <= kDenseConfusionLimit) {
      REQUIRE(j["confusion"]["counts"].size() == C);
      CHECK(j["confusion"]["counts"][1][0] == 1);
      CHECK(
          gyre::eval::classification_metrics(gold, pred, names).confusion_table().find("gold \\ predicted") !=
          std::string::npos);
    } else {
      REQUIRE(j["confusion"]["top"].size() == 1);
      CHECK(j["confusion"]["top"][0]["count"] == 1);
    }
  }
}

TEST_CASE("multi-label accumulator: one example at a time equals the matrix form", "[eval]") {
  const std::vector<std::string> names{"a", "b", "c"};
  const std::vector<std::uint8_t> gold{1, 0, 1, 0, 1, 0, 1, 1, 0};
  const std::vector<float> scores{0.9f, 0.2f, 0.4f, 0.1f, 0.7f, 0.6f, 0.8f, 0.5f, 0.1f};
  gyre::eval::MultiLabelAccumulator acc(names, 0.5);
  for (std::size_t i = 0; i < 3; ++i)
    acc.add_scores(std::span(gold).subspan(i * 3, 3), std::span(scores).subspan(i * 3, 3));
  CHECK(acc.finish().to_json() == gyre::eval::multilabel_metrics(gold, scores, names, 0.5).to_json());
  // Counted by hand: example 0 misses c, example 1 adds c, example 2 is exact -> exact match 1/3.
  CHECK(acc.finish().exact_match == Approx(1.0 / 3.0).margin(1e-12));
}
