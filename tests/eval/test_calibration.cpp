#include <catch2/catch.hpp>

#include <cmath>
#include <fstream>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/eval/calibration.hpp"
#include "gyre/eval/classification.hpp"
#include "gyre/runtime/calibration.hpp"

namespace eval = gyre::eval;
namespace runtime = gyre::runtime;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

namespace {

nlohmann::json load_cases() {
  std::ifstream in(std::string(GYRE_FIXTURES_DIR) + "/calibration/temperature.json");
  REQUIRE(in.good());
  return nlohmann::json::parse(in).at("cases");
}

}  // namespace

// ref: tests/fixtures/calibration/temperature.json, made by tools/make_calibration_fixtures.py
// with Debian's python3-scipy 1.10.1 (minimize_scalar, method="bounded", xatol 1e-10, on the mean
// NLL of softmax(z / T) / sigmoid(z / T) computed with scipy.special.logsumexp / log_expit).
TEST_CASE("fitted temperature equals a SciPy fit on the same scores", "[eval]") {
  for (const auto& c : load_cases()) {
    const std::string name = c.at("name").get<std::string>();
    INFO("case " << name);
    std::vector<float> scores;
    for (const auto& v : c.at("scores")) scores.push_back(static_cast<float>(v.get<double>()));
    eval::TemperatureFit fit;
    if (c.at("kind") == "sigmoid") {
      std::vector<std::uint8_t> gold;
      for (const auto& g : c.at("gold")) gold.push_back(static_cast<std::uint8_t>(g.get<int>()));
      fit = eval::fit_sigmoid_temperature(scores, gold);
    } else {
      std::vector<std::int32_t> gold;
      for (const auto& g : c.at("gold")) gold.push_back(g.get<std::int32_t>());
      fit = eval::fit_softmax_temperature(scores, gold, c.at("classes").get<std::size_t>());
    }
    // Both sides evaluate the NLL in double from the same float32 scores: the value at T = 1 agrees
    // to rounding.
    CHECK_THAT(fit.nll_before, WithinAbs(c.at("nll_before").get<double>(), 1e-9));
    if (name == "separable") {
      // Every example right with a margin: the NLL only falls as T shrinks, so the optimum is the
      // lower bound; SciPy stops anywhere the NLL has underflowed to 0 in double.
      CHECK_THAT(fit.temperature, WithinRel(static_cast<double>(runtime::kMinTemperature), 1e-6));
      CHECK(fit.nll_after <= c.at("nll_after").get<double>() + 1e-12);
    } else {
      // Brent's xatol 1e-10 on T; our Newton stops at 1e-12 relative on 1/T; 1e-6 relative covers
      // both with margin.
      CHECK_THAT(fit.temperature, WithinRel(c.at("temperature").get<double>(), 1e-6));
      CHECK_THAT(fit.nll_after, WithinAbs(c.at("nll_after").get<double>(), 1e-9));
      CHECK(fit.nll_after <= fit.nll_before);
    }
  }
}

TEST_CASE("tempered distributions", "[eval]") {
  const std::vector<float> z{2.0f, 0.5f, -1.0f};
  std::vector<float> p(3), q(3);
  SECTION("T = 1 is the plain softmax; T -> large tends to uniform; arg-max never moves") {
    runtime::tempered_softmax(z.data(), 3, 1.0f, p.data());
    // softmax([2, 0.5, -1]) by hand: exp(2) / (exp(2) + exp(0.5) + exp(-1)).
    const double den = std::exp(2.0) + std::exp(0.5) + std::exp(-1.0);
    CHECK_THAT(p[0], WithinAbs(std::exp(2.0) / den, 1e-7));
    runtime::tempered_softmax(z.data(), 3, 100.0f, q.data());
    CHECK_THAT(q[0], WithinAbs(1.0 / 3.0, 0.02));
    CHECK(q[0] > q[1]);
    CHECK(q[1] > q[2]);
  }
  SECTION("tempering probabilities equals tempering the logits (shift invariance)") {
    runtime::tempered_softmax(z.data(), 3, 2.5f, p.data());
    runtime::tempered_softmax(z.data(), 3, 1.0f, q.data());
    runtime::temper_distribution(q.data(), 3, 2.5f);
    for (int i = 0; i < 3; ++i) CHECK_THAT(q[i], WithinAbs(p[i], 1e-6));
  }
  SECTION("sigmoid") {
    CHECK_THAT(runtime::tempered_sigmoid(3.0f, 2.0f), WithinAbs(1.0 / (1.0 + std::exp(-1.5)), 1e-7));
    CHECK_THAT(runtime::tempered_sigmoid(-300.0f, 1.0f), WithinAbs(0.0, 1e-30));
  }
}

TEST_CASE("reliability diagram equals expected_calibration_error on top-label confidences", "[eval]") {
  // Rows of a 3-class model; the reliability of (max prob, argmax == gold) pairs must give the
  // same ECE and bins as the classification metric (both implement Guo et al. 2017, eq. 3).
  const std::vector<float> probs{0.7f, 0.2f, 0.1f, 0.4f, 0.35f, 0.25f, 0.1f,  0.85f, 0.05f,
                                 0.5f, 0.5f, 0.0f, 0.2f, 0.2f,  0.6f,  0.96f, 0.02f, 0.02f};
  const std::vector<std::int32_t> gold{0, 1, 1, 1, 2, 0};
  std::vector<eval::CalibrationBin> bins;
  const double ece = eval::expected_calibration_error(gold, probs, 3, eval::kCalibrationBins, &bins);
  std::vector<float> conf;
  std::vector<std::uint8_t> correct;
  for (std::size_t i = 0; i < gold.size(); ++i) {
    std::size_t arg = 0;
    for (std::size_t c = 1; c < 3; ++c)
      if (probs[i * 3 + c] > probs[i * 3 + arg]) arg = c;
    conf.push_back(probs[i * 3 + arg]);
    correct.push_back(static_cast<std::int32_t>(arg) == gold[i] ? 1 : 0);
  }
  const eval::Reliability r = eval::reliability(conf, correct);
  CHECK_THAT(r.error, WithinAbs(ece, 1e-12));
  REQUIRE(r.bins.size() == bins.size());
  for (std::size_t k = 0; k < bins.size(); ++k) {
    CHECK(r.bins[k].count == bins[k].count);
    CHECK_THAT(r.bins[k].accuracy, WithinAbs(bins[k].accuracy, 1e-12));
  }
  const std::string table = eval::reliability_table(r, r);
  CHECK(table.find("ECE") != std::string::npos);
}

TEST_CASE("temperature fit refuses bad input", "[eval]") {
  const std::vector<float> z{1.0f, 2.0f};
  const std::vector<std::int32_t> bad_gold{2};
  REQUIRE_THROWS_AS(eval::fit_softmax_temperature(z, bad_gold, 2), gyre::Error);
  const std::vector<float> nan{1.0f, NAN};
  const std::vector<std::int32_t> gold{0};
  REQUIRE_THROWS_AS(eval::fit_softmax_temperature(nan, gold, 2), gyre::Error);
  const std::vector<float> c{1.5f};
  const std::vector<std::uint8_t> ok{1};
  REQUIRE_THROWS_AS(eval::reliability(c, ok), gyre::Error);
}
