#include <catch2/catch.hpp>

#include <cmath>
#include <fstream>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/eval/classification.hpp"

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;

namespace {

nlohmann::json load_fixture(const std::string& name) {
  const std::string path = std::string(GYRE_FIXTURES_DIR) + "/metrics/" + name + ".json";
  std::ifstream in(path);
  REQUIRE(in.good());
  return nlohmann::json::parse(in);
}

// Fixture probabilities are float64 copies of float32 values, so the cast back is exact.
std::vector<float> flatten_floats(const nlohmann::json& rows) {
  std::vector<float> out;
  for (const auto& row : rows)
    for (const auto& v : row) out.push_back(static_cast<float>(v.get<double>()));
  return out;
}

constexpr double kTol = 1e-9;

}  // namespace

// ref: tests/fixtures/metrics/*.json, made by tools/make_metric_fixtures.py with Debian's
// python3-sklearn 1.2.1 (precision_recall_fscore_support, precision/recall/f1_score with
// average=macro|micro|weighted, classification_report, confusion_matrix, log_loss).
TEST_CASE("classification metrics equal sklearn 1.2.1 on fixed predictions", "[eval]") {
  for (const std::string scenario : {"all_present", "never_predicted", "absent_from_gold"}) {
    SECTION(scenario) {
      const auto fx = load_fixture(scenario);
      INFO("scenario " << scenario << ", sklearn " << fx["sklearn_version"].get<std::string>());
      const auto names = fx["class_names"].get<std::vector<std::string>>();
      const auto gold = fx["gold"].get<std::vector<std::int32_t>>();
      const auto pred = fx["predicted"].get<std::vector<std::int32_t>>();
      const auto probs = flatten_floats(fx["probabilities"]);
      const auto& ex = fx["expected"];

      const auto m = gyre::eval::classification_metrics(gold, pred, names, probs);
      REQUIRE(m.num_classes() == names.size());
      REQUIRE_THAT(m.accuracy, WithinAbs(ex["accuracy"].get<double>(), kTol));
      for (std::size_t c = 0; c < names.size(); ++c) {
        INFO("class " << c);
        REQUIRE_THAT(m.classes[c].precision, WithinAbs(ex["per_class"]["precision"][c].get<double>(), kTol));
        REQUIRE_THAT(m.classes[c].recall, WithinAbs(ex["per_class"]["recall"][c].get<double>(), kTol));
        REQUIRE_THAT(m.classes[c].f1, WithinAbs(ex["per_class"]["f1"][c].get<double>(), kTol));
        REQUIRE(m.classes[c].support == ex["per_class"]["support"][c].get<std::int64_t>());
        for (std::size_t p = 0; p < names.size(); ++p)
          REQUIRE(m.confusion_at(c, p) == ex["confusion_matrix"][c][p].get<std::int64_t>());
      }
      const auto& avg = ex["average"];
      const std::pair<const char*, const gyre::eval::AverageScores*> modes[] = {
          {"macro", &m.macro}, {"micro", &m.micro}, {"weighted", &m.weighted}};
      for (const auto& [mode, a] : modes) {
        INFO("average " << mode);
        REQUIRE_THAT(a->precision, WithinAbs(avg[mode]["precision"].get<double>(), kTol));
        REQUIRE_THAT(a->recall, WithinAbs(avg[mode]["recall"].get<double>(), kTol));
        REQUIRE_THAT(a->f1, WithinAbs(avg[mode]["f1"].get<double>(), kTol));
      }
      // classification_report's own averages, a second sklearn code path.
      const auto& rep = ex["classification_report"];
      REQUIRE_THAT(m.macro.f1, WithinAbs(rep["macro avg"]["f1-score"].get<double>(), kTol));
      REQUIRE_THAT(m.weighted.f1, WithinAbs(rep["weighted avg"]["f1-score"].get<double>(), kTol));
      REQUIRE_THAT(m.weighted.precision, WithinAbs(rep["weighted avg"]["precision"].get<double>(), kTol));

      REQUIRE(ex["log_loss_eps"].get<double>() == gyre::eval::kLogLossEpsilon);
      REQUIRE(m.log_loss.has_value());
      REQUIRE_THAT(*m.log_loss, WithinAbs(ex["log_loss"].get<double>(), kTol));
      // ECE: a NumPy implementation of Guo et al. 2017 eq. 3 in the same script (independent code,
      // not an outside reference; the hand-counted case below is the outside check).
      REQUIRE(m.calibration_error.has_value());
      REQUIRE(m.calibration_bins.size() == static_cast<std::size_t>(ex["ece_bins"].get<int>()));
      REQUIRE_THAT(*m.calibration_error, WithinAbs(ex["ece_numpy_guo2017"].get<double>(), kTol));
    }
  }
}

TEST_CASE("zero-division and presence conventions", "[eval]") {
  const auto fx = load_fixture("absent_from_gold");
  const auto names = fx["class_names"].get<std::vector<std::string>>();
  const auto gold = fx["gold"].get<std::vector<std::int32_t>>();
  const auto pred = fx["predicted"].get<std::vector<std::int32_t>>();
  const auto m = gyre::eval::classification_metrics(gold, pred, names);
  // Class 3 is predicted, never gold: recall 0 by convention, precision 0 since never right.
  REQUIRE(m.classes[3].present);
  REQUIRE(m.classes[3].support == 0);
  REQUIRE(m.classes[3].recall == 0.0);
  // Class 4 is in neither: listed, not present, excluded from the averages (checked against
  // sklearn above); the table marks it.
  REQUIRE_FALSE(m.classes[4].present);
  REQUIRE_FALSE(m.log_loss.has_value());
  REQUIRE_THAT(m.to_table(), Contains("unused *"));
  const auto j = m.to_json();
  REQUIRE(j["classes"].size() == 5);
  REQUIRE_THAT(j["macro"]["f1"].get<double>(), WithinAbs(m.macro.f1, 0.0));
  REQUIRE_FALSE(j.contains("log_loss"));
}

// Hand-counted example (computed on paper from the definitions, no tool):
// gold      = 0 0 1 1 2 2
// predicted = 0 1 1 1 0 2
// class 0: tp 1, predicted 2, gold 2 -> P 1/2, R 1/2, F1 1/2
// class 1: tp 2, predicted 3, gold 2 -> P 2/3, R 1,   F1 0.8
// class 2: tp 1, predicted 1, gold 2 -> P 1,   R 1/2, F1 2/3
// accuracy 4/6; macro F1 (0.5 + 0.8 + 2/3)/3 = 0.6555...; weighted F1 equals macro (equal support).
TEST_CASE("hand-counted three-class example", "[eval]") {
  const std::vector<std::int32_t> gold{0, 0, 1, 1, 2, 2};
  const std::vector<std::int32_t> pred{0, 1, 1, 1, 0, 2};
  const std::vector<std::string> names{"a", "b", "c"};
  const auto m = gyre::eval::classification_metrics(gold, pred, names);
  REQUIRE_THAT(m.accuracy, WithinAbs(4.0 / 6.0, 1e-12));
  REQUIRE_THAT(m.classes[1].precision, WithinAbs(2.0 / 3.0, 1e-12));
  REQUIRE_THAT(m.classes[1].f1, WithinAbs(0.8, 1e-12));
  REQUIRE_THAT(m.classes[2].f1, WithinAbs(2.0 / 3.0, 1e-12));
  REQUIRE_THAT(m.macro.f1, WithinAbs((0.5 + 0.8 + 2.0 / 3.0) / 3.0, 1e-12));
  REQUIRE_THAT(m.weighted.f1, WithinAbs(m.macro.f1, 1e-12));
  REQUIRE_THAT(m.micro.f1, WithinAbs(4.0 / 6.0, 1e-12));
  REQUIRE(m.confusion_at(2, 0) == 1);
  REQUIRE(m.confusion_at(0, 1) == 1);
  const std::string table = m.to_table();
  REQUIRE_THAT(table, Contains("0.8000"));
  REQUIRE_THAT(m.confusion_table(), Contains("gold \\ predicted"));
}

// ECE counted by hand from Guo et al. 2017 eq. 3 with M = 15 bins ((m-1)/15, m/15]:
// rows (probabilities; gold): (0.9 0.1; 0) (0.9 0.1; 1) (0.5 0.5; 1) (0.3 0.7; 1)
// confidence / argmax (lowest id on a tie) / correct: 0.9/0/yes, 0.9/0/no, 0.5/0/no, 0.7/1/yes
// 0.9 -> bin 14 (0.867, 0.933]: acc 1/2, conf 0.9 -> |0.5 - 0.9| * 2/4 = 0.2
// 0.5 -> bin 8  (0.467, 0.533]: acc 0,   conf 0.5 -> 0.5 * 1/4       = 0.125
// 0.7 -> bin 11 (0.667, 0.733]: acc 1,   conf 0.7 -> 0.3 * 1/4       = 0.075   ECE = 0.4
// Log loss by hand: -(ln 0.9 + ln 0.1 + ln 0.5 + ln 0.7) / 4.
TEST_CASE("hand-counted calibration error and log loss", "[eval]") {
  const std::vector<std::int32_t> gold{0, 1, 1, 1};
  const std::vector<float> probs{0.9f, 0.1f, 0.9f, 0.1f, 0.5f, 0.5f, 0.3f, 0.7f};
  std::vector<gyre::eval::CalibrationBin> bins;
  const double e = gyre::eval::expected_calibration_error(gold, probs, 2, 15, &bins);
  REQUIRE(bins.size() == 15);
  REQUIRE(bins[13].count == 2);
  REQUIRE(bins[7].count == 1);
  REQUIRE(bins[10].count == 1);
  REQUIRE_THAT(bins[7].accuracy, WithinAbs(0.0, 1e-12));
  REQUIRE_THAT(bins[13].accuracy, WithinAbs(0.5, 1e-12));
  // float inputs: 0.9f etc. differ from the decimals by < 3e-8.
  REQUIRE_THAT(e, WithinAbs(0.4, 1e-7));
  const double ll = gyre::eval::log_loss(gold, probs, 2);
  REQUIRE_THAT(ll, WithinAbs(-(std::log(0.9) + std::log(0.1) + std::log(0.5) + std::log(0.7)) / 4.0, 1e-7));
}

TEST_CASE("most confident errors", "[eval]") {
  // Hand-made: examples 1 and 3 are wrong with predicted-class probabilities 0.7 and 0.9.
  const std::vector<std::int32_t> gold{0, 0, 1, 1};
  const std::vector<std::int32_t> pred{0, 1, 1, 0};
  const std::vector<float> probs{0.8f, 0.2f, 0.3f, 0.7f, 0.4f, 0.6f, 0.9f, 0.1f};
  const auto errs = gyre::eval::most_confident_errors(gold, pred, probs, 2, 5);
  REQUIRE(errs.size() == 2);
  REQUIRE(errs[0].example == 3);
  REQUIRE(errs[0].gold == 1);
  REQUIRE(errs[0].predicted == 0);
  REQUIRE_THAT(errs[0].probability, WithinAbs(0.9, 1e-7));
  REQUIRE(errs[1].example == 1);
  REQUIRE(gyre::eval::most_confident_errors(gold, pred, probs, 2, 1).size() == 1);
}

TEST_CASE("multi-label metrics equal sklearn 1.2.1", "[eval]") {
  // ref: tests/fixtures/metrics/multilabel.json (precision_recall_fscore_support on indicator
  // matrices, accuracy_score = subset accuracy), decisions = score >= 0.5.
  const auto fx = load_fixture("multilabel");
  const auto names = fx["label_names"].get<std::vector<std::string>>();
  std::vector<std::uint8_t> gold;
  for (const auto& row : fx["gold"])
    for (const auto& v : row) gold.push_back(static_cast<std::uint8_t>(v.get<int>()));
  const auto scores = flatten_floats(fx["scores"]);
  const auto m = gyre::eval::multilabel_metrics(gold, scores, names, fx["threshold"].get<double>());
  const auto& ex = fx["expected"];
  for (std::size_t l = 0; l < names.size(); ++l) {
    INFO("label " << l);
    REQUIRE_THAT(m.labels[l].precision, WithinAbs(ex["per_label"]["precision"][l].get<double>(), kTol));
    REQUIRE_THAT(m.labels[l].recall, WithinAbs(ex["per_label"]["recall"][l].get<double>(), kTol));
    REQUIRE_THAT(m.labels[l].f1, WithinAbs(ex["per_label"]["f1"][l].get<double>(), kTol));
    REQUIRE(m.labels[l].support == ex["per_label"]["support"][l].get<std::int64_t>());
    std::int64_t predicted = 0;
    for (const auto& row : fx["predicted"]) predicted += row[l].get<int>();
    REQUIRE(m.labels[l].predicted == predicted);
  }
  REQUIRE_THAT(m.macro.f1, WithinAbs(ex["average"]["macro"]["f1"].get<double>(), kTol));
  REQUIRE_THAT(m.macro.precision, WithinAbs(ex["average"]["macro"]["precision"].get<double>(), kTol));
  REQUIRE_THAT(m.micro.f1, WithinAbs(ex["average"]["micro"]["f1"].get<double>(), kTol));
  REQUIRE_THAT(m.micro.recall, WithinAbs(ex["average"]["micro"]["recall"].get<double>(), kTol));
  REQUIRE_THAT(m.weighted.f1, WithinAbs(ex["average"]["weighted"]["f1"].get<double>(), kTol));
  REQUIRE_THAT(m.exact_match, WithinAbs(ex["subset_accuracy"].get<double>(), kTol));
  REQUIRE(m.to_json()["labels"].size() == names.size());
  REQUIRE_THAT(m.to_table(), Contains("threshold 0.50"));
}

TEST_CASE("classification metrics refuse bad input", "[eval]") {
  const std::vector<std::string> names{"a", "b"};
  const std::vector<std::int32_t> gold{0, 1};
  SECTION("length mismatch") {
    const std::vector<std::int32_t> pred{0};
    REQUIRE_THROWS_WITH(gyre::eval::classification_metrics(gold, pred, names), Contains("2 examples"));
  }
  SECTION("id out of range") {
    const std::vector<std::int32_t> pred{0, 2};
    REQUIRE_THROWS_WITH(gyre::eval::classification_metrics(gold, pred, names), Contains("example 1"));
  }
  SECTION("bad probabilities") {
    const std::vector<std::int32_t> pred{0, 1};
    const std::vector<float> probs{0.5f, 0.5f, NAN, 1.0f};
    REQUIRE_THROWS_WITH(gyre::eval::classification_metrics(gold, pred, names, probs),
                        Contains("example 1, class 0"));
    const std::vector<float> short_probs{0.5f, 0.5f};
    REQUIRE_THROWS_AS(gyre::eval::classification_metrics(gold, pred, names, short_probs), gyre::Error);
  }
  SECTION("bad indicator") {
    const std::vector<std::uint8_t> g{1, 2};
    const std::vector<std::uint8_t> p{1, 0};
    REQUIRE_THROWS_WITH(gyre::eval::multilabel_metrics_from_decisions(g, p, names), Contains("not 0 or 1"));
  }
}
