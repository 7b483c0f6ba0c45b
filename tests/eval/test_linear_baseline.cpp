#include <catch2/catch.hpp>

#include <cmath>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/eval/linear_baseline.hpp"

using Catch::Matchers::WithinAbs;
using gyre::eval::LbfgsOptions;
using gyre::eval::SparseRows;

namespace {

nlohmann::json load_fixture() {
  std::ifstream in(std::string(GYRE_FIXTURES_DIR) + "/baseline/logreg.json");
  REQUIRE(in.good());
  std::stringstream s;
  s << in.rdbuf();
  return nlohmann::json::parse(s.str());
}

SparseRows rows_of(const nlohmann::json& c) {
  SparseRows x;
  x.row_start = c["row_start"].get<std::vector<std::size_t>>();
  x.columns = c["columns"].get<std::vector<std::int32_t>>();
  x.values = c["values"].get<std::vector<double>>();
  return x;
}

}  // namespace

// ref: tests/fixtures/baseline/logreg.json, made by tools/make_baseline_fixtures.py with
// python3-sklearn's LogisticRegression(solver="lbfgs", tol=1e-10) on seeded random sparse data.
TEST_CASE("L-BFGS logistic regression reaches sklearn's optimum", "[baseline]") {
  const auto fixture = load_fixture();
  for (const char* name : {"multiclass", "binary", "weak_penalty"}) {
    INFO("case " << name);
    const auto& c = fixture["cases"][name];
    const auto x = rows_of(c);
    const auto labels = c["labels"].get<std::vector<std::int32_t>>();
    const int classes = c["classes"].get<int>();
    const int features = c["features"].get<int>();
    LbfgsOptions options;
    options.c = c["c"].get<double>();
    options.gradient_tolerance = 1e-9;
    const auto model = gyre::eval::fit_logistic_regression(x, labels, classes, features, options);
    CHECK(model.converged);
    const auto coef = c["coef"];
    const auto intercept = c["intercept"].get<std::vector<double>>();
    if (classes == 2) {
      // sklearn's one vector w = w_1 - w_0 (see linear_baseline.hpp).
      for (int j = 0; j < features; ++j) {
        const double w = model.weights[static_cast<std::size_t>(j) * 2 + 1] -
                         model.weights[static_cast<std::size_t>(j) * 2];
        CHECK_THAT(w, WithinAbs(coef[0][static_cast<std::size_t>(j)].get<double>(), 1e-3));
      }
      CHECK_THAT(model.bias[1] - model.bias[0], WithinAbs(intercept[0], 1e-3));
    } else {
      for (int k = 0; k < classes; ++k) {
        for (int j = 0; j < features; ++j)
          CHECK_THAT(
              model.weights[static_cast<std::size_t>(j * classes + k)],
              WithinAbs(coef[static_cast<std::size_t>(k)][static_cast<std::size_t>(j)].get<double>(), 1e-3));
        CHECK_THAT(model.bias[static_cast<std::size_t>(k)],
                   WithinAbs(intercept[static_cast<std::size_t>(k)], 1e-3));
      }
    }
    // The penalised loss (the softmax form's equals sklearn's, also for two classes) is at
    // least as low as sklearn's: sklearn stops on a relative decrease of 64 eps, so its
    // coefficients sit up to ~5e-4 from the optimum in the flat weak-penalty case; hence the
    // 1e-3 on coefficients and the tight check on the objective.
    const double reference = c["objective"].get<double>();
    CHECK(model.objective <= reference + 1e-9);
    CHECK_THAT(model.objective, WithinAbs(reference, 1e-6));
    const auto predictions = c["predictions"].get<std::vector<int>>();
    for (std::size_t r = 0; r < x.rows(); ++r) {
      const auto b = x.row_start[r], e = x.row_start[r + 1];
      CHECK(model.predict(std::span(x.columns).subspan(b, e - b), std::span(x.values).subspan(b, e - b)) ==
            predictions[r]);
    }
  }
}

TEST_CASE("the fit is deterministic and refuses bad input", "[baseline]") {
  const auto fixture = load_fixture();
  const auto& c = fixture["cases"]["multiclass"];
  const auto x = rows_of(c);
  const auto labels = c["labels"].get<std::vector<std::int32_t>>();
  LbfgsOptions options;
  const auto a = gyre::eval::fit_logistic_regression(x, labels, 4, 40, options);
  const auto b = gyre::eval::fit_logistic_regression(x, labels, 4, 40, options);
  CHECK(a.weights == b.weights);  // bit for bit: same order of every sum
  CHECK(a.bias == b.bias);
  auto bad = labels;
  bad[3] = 4;
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, bad, 4, 40, options), gyre::Error);
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, labels, 1, 40, options), gyre::Error);
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, labels, 4, 10, options), gyre::Error);
  std::vector<std::int32_t> short_labels(labels.begin(), labels.end() - 1);
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, short_labels, 4, 40, options), gyre::Error);
}

TEST_CASE("word shapes and n-gram keys", "[baseline]") {
  using gyre::eval::word_shape;
  CHECK(word_shape("Marrowby") == "Xxx");
  CHECK(word_shape("Marrowby's") == "Xxx'x");
  CHECK(word_shape("12-B") == "dd-X");
  CHECK(word_shape("KC-2000") == "XX-dd");
  CHECK(word_shape("") == "");
  CHECK(word_shape("caf\xc3\xa9") == "xx\xc3\xa9");  // non-ASCII bytes kept as they are
  std::vector<std::string> keys;
  const std::vector<std::string> tokens{"the", "kettle", "hums"};
  gyre::eval::NgramClassifier::ngrams(tokens, keys);
  CHECK(keys == std::vector<std::string>{"the", "kettle", "hums", "the\x01kettle", "kettle\x01hums"});
  const std::vector<std::string> raw{"The", "Kettle", "hums"};
  gyre::eval::WindowTagger::features(tokens, raw, 0, keys);
  CHECK(keys == std::vector<std::string>{"w-1=<s>", "w0=the", "w+1=kettle", "s-1=<s>", "s0=Xxx", "s+1=Xxx"});
  gyre::eval::WindowTagger::features(tokens, raw, 2, keys);
  CHECK(keys ==
        std::vector<std::string>{"w-1=kettle", "w0=hums", "w+1=</s>", "s-1=Xxx", "s0=xx", "s+1=</s>"});
}

TEST_CASE("n-gram classifier and window tagger learn a separable rule", "[baseline]") {
  // Label = whether the token "not" occurs; a bigram-free rule the unigram weights carry.
  gyre::eval::NgramClassifier clf(1);
  const std::vector<std::vector<std::string>> texts{{"works", "fine"}, {"does", "not", "work"},
                                                    {"fine", "now"},   {"not", "fine"},
                                                    {"it", "works"},   {"not", "now"}};
  const std::vector<std::int32_t> labels{0, 1, 0, 1, 0, 1};
  for (std::size_t i = 0; i < texts.size(); ++i) clf.add(texts[i], labels[i]);
  clf.fit(2, LbfgsOptions{});
  for (std::size_t i = 0; i < texts.size(); ++i) CHECK(clf.predict(texts[i]) == labels[i]);
  const auto p = clf.probabilities(texts[1]);
  CHECK_THAT(p[0] + p[1], WithinAbs(1.0, 1e-12));
  CHECK(p[1] > 0.5);
  CHECK(clf.predict(std::vector<std::string>{"unseen"}) >= 0);  // no known feature: bias decides

  // Tagger: capitalised tokens after "in" are places; the shape feature carries capitalisation.
  gyre::eval::WindowTagger tagger;
  const std::vector<std::string> t1{"lives", "in", "marrowby"}, r1{"lives", "in", "Marrowby"};
  const std::vector<std::string> g1{"O", "O", "B-place"};
  const std::vector<std::string> t2{"in", "the", "shed"}, r2{"in", "the", "shed"};
  const std::vector<std::string> g2{"O", "O", "O"};
  for (int rep = 0; rep < 3; ++rep) {
    tagger.add(t1, r1, g1);
    tagger.add(t2, r2, g2);
  }
  tagger.fit(LbfgsOptions{});
  CHECK(tagger.tag_names() == std::vector<std::string>{"B-place", "O"});
  CHECK(tagger.predict(t1, r1) == g1);
  CHECK(tagger.predict(t2, r2) == g2);
  CHECK_THROWS_AS(tagger.add(t1, r2, std::vector<std::string>{"O"}), gyre::Error);
}
