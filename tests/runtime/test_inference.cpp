// Runtime forward pass against the double-precision reference in model_builder.hpp, CRF decoding
// against brute-force enumeration, span extraction, step-wise use and quantised models.

#include <catch2/catch.hpp>

#include <cmath>
#include <functional>
#include <random>
#include <string>
#include <vector>

#include "gyre/runtime/model.hpp"
#include "gyre_runtime.h"
#include "model_builder.hpp"
#include "runtime/detail/spans.hpp"

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using gyre::Span;
using gyre::runtime::Context;
using gyre::runtime::DType;
using gyre::runtime::Error;
using gyre::runtime::Model;
using gyre::test::RefModel;

namespace {

std::vector<std::uint32_t> random_ids(std::mt19937& rng, std::size_t n, std::size_t V) {
  std::uniform_int_distribution<std::uint32_t> u(1, static_cast<std::uint32_t>(V - 1));
  std::vector<std::uint32_t> ids(n);
  for (auto& i : ids) i = u(rng);
  return ids;
}

struct Loaded {
  std::vector<unsigned char> bytes;
  Model model;
  explicit Loaded(const RefModel& r, DType dt = DType::kF32)
      : bytes(r.file(dt)), model(Model::from_buffer(bytes.data(), bytes.size(), "test.gyre")) {}
};

// Brute force over all C^T tag sequences: returns the best sequence and per-token marginals.
void crf_brute_force(const RefModel& r, const std::vector<std::vector<double>>& e, bool with_end,
                     std::vector<std::uint32_t>& best, std::vector<std::vector<double>>& marg) {
  const std::size_t T = e.size(), C = r.C();
  std::vector<std::uint32_t> y(T, 0);
  double best_score = -1e300, z = 0.0;
  std::vector<std::pair<std::vector<std::uint32_t>, double>> all;
  for (;;) {
    double s = r.at("crf.start", 0, y[0]) + e[0][y[0]];
    for (std::size_t t = 1; t < T; ++t) s += r.at("crf.transitions", y[t - 1], y[t]) + e[t][y[t]];
    if (with_end) s += r.at("crf.end", 0, y[T - 1]);
    all.emplace_back(y, s);
    if (s > best_score) {
      best_score = s;
      best = y;
    }
    std::size_t k = 0;
    while (k < T && ++y[k] == C) y[k++] = 0;
    if (k == T) break;
  }
  for (const auto& a : all) z += std::exp(a.second - best_score);
  marg.assign(T, std::vector<double>(C, 0.0));
  for (const auto& a : all)
    for (std::size_t t = 0; t < T; ++t) marg[t][a.first[t]] += std::exp(a.second - best_score) / z;
}

}  // namespace

TEST_CASE("classifier probabilities equal the double-precision reference", "[runtime][inference]") {
  std::mt19937 rng(20261201);  // seed printed by INFO below on failure
  for (const char* cell : {"lstm", "gru"})
    for (bool bidir : {false, true})
      for (const char* pooling : {"last", "mean", "max"})
        for (std::size_t layers : {1u, 2u}) {
          RefModel r;
          r.cell = cell;
          r.bidir = bidir;
          r.pooling = pooling;
          r.L = layers;
          const std::uint32_t seed = static_cast<std::uint32_t>(rng());
          r.randomize(seed);
          Loaded l(r);
          Context ctx(l.model);
          for (std::size_t T : {0u, 1u, 3u, 9u}) {
            const auto ids = random_ids(rng, T, r.V);
            const auto want = r.classify(ids);
            const auto& got = ctx.classify_ids(ids);
            INFO(cell << " bidir=" << bidir << " pooling=" << pooling << " layers=" << layers << " T=" << T
                      << " seed=" << seed);
            REQUIRE(got.probabilities.size() == r.C());
            REQUIRE(got.token_count == T);
            for (std::size_t i = 0; i < r.C(); ++i)  // f32 runtime vs f64 reference
              REQUIRE_THAT(got.probabilities[i], WithinAbs(want[i], 1e-5));
            std::size_t arg = 0;
            for (std::size_t i = 1; i < r.C(); ++i)
              if (want[i] > want[arg]) arg = i;
            REQUIRE(got.best == arg);
          }
        }
}

TEST_CASE("multi-label sigmoid classifier", "[runtime][inference]") {
  RefModel r;
  r.output = "sigmoid";
  r.threshold = 0.4;
  r.labels = {"a", "b", "c", "d", "e"};
  r.randomize(7);
  Loaded l(r);
  Context ctx(l.model);
  std::mt19937 rng(8);
  for (int rep = 0; rep < 10; ++rep) {
    const auto ids = random_ids(rng, 6, r.V);
    const auto want = r.classify(ids);
    const auto& got = ctx.classify_ids(ids);
    std::vector<std::uint32_t> chosen;
    for (std::uint32_t i = 0; i < r.C(); ++i) {
      REQUIRE_THAT(got.probabilities[i], WithinAbs(want[i], 1e-5));
      if (want[i] >= 0.4) chosen.push_back(i);
    }
    REQUIRE(std::vector<std::uint32_t>(got.chosen.begin(), got.chosen.end()) == chosen);
  }
}

TEST_CASE("multi-label classifier with a threshold per label, through C++ and the C API",
          "[runtime][inference]") {
  // Reference: the plain-loop model of model_builder.hpp; a label is chosen when its probability
  // reaches its own threshold (architecture.label_thresholds, docs/model-format.md).
  RefModel r;
  r.output = "sigmoid";
  r.threshold = 0.5;
  r.labels = {"a", "b", "c", "d", "e"};
  r.label_thresholds = {0.2, 0.35, 0.5, 0.65, 0.8};
  r.randomize(7);
  Loaded l(r);
  REQUIRE(l.model.architecture().label_thresholds == std::vector<float>{0.2f, 0.35f, 0.5f, 0.65f, 0.8f});
  Context ctx(l.model);
  gyre_model* cm = nullptr;
  REQUIRE(gyre_model_load_buffer(l.bytes.data(), l.bytes.size(), &cm) == GYRE_OK);
  for (std::size_t i = 0; i < r.C(); ++i)
    CHECK(gyre_model_label_threshold(cm, i) == static_cast<float>(r.label_thresholds[i]));
  CHECK(gyre_model_label_threshold(cm, r.C()) == 0.0f);
  gyre_context* cc = nullptr;
  REQUIRE(gyre_context_new(cm, &cc) == GYRE_OK);
  size_t label = 0;
  CHECK(gyre_classify_chosen_count(cc) == 0);
  CHECK(gyre_classify_chosen(cc, 0, &label) == GYRE_ERROR);  // no gyre_classify call yet
  std::mt19937 rng(8);
  std::size_t unlike_global = 0;
  for (int rep = 0; rep < 20; ++rep) {
    const auto ids = random_ids(rng, 6, r.V);
    const auto want = r.classify(ids);
    const auto& got = ctx.classify_ids(ids);
    std::vector<std::uint32_t> chosen;
    for (std::uint32_t i = 0; i < r.C(); ++i) {
      REQUIRE_THAT(got.probabilities[i], WithinAbs(want[i], 1e-5));
      if (want[i] >= r.label_thresholds[i]) chosen.push_back(i);
      unlike_global += (want[i] >= r.label_thresholds[i]) != (want[i] >= 0.5);
    }
    CHECK(std::vector<std::uint32_t>(got.chosen.begin(), got.chosen.end()) == chosen);
    // The C API on the text of these ids ("w<id>", the builder's vocabulary; "zzz" is unknown,
    // id 1) decides the same.
    std::string text;
    for (const auto id : ids)
      text += (text.empty() ? "" : " ") + (id == 1 ? "zzz" : std::string(l.model.token(id)));
    const float* probs = nullptr;
    size_t count = 0, best = 0;
    REQUIRE(gyre_classify(cc, text.data(), text.size(), &probs, &count, &best) == GYRE_OK);
    std::vector<std::uint32_t> c_chosen;
    for (size_t i = 0; i < gyre_classify_chosen_count(cc); ++i) {
      REQUIRE(gyre_classify_chosen(cc, i, &label) == GYRE_OK);
      c_chosen.push_back(static_cast<std::uint32_t>(label));
    }
    CHECK(c_chosen == chosen);
    CHECK(gyre_classify_chosen(cc, c_chosen.size(), &label) == GYRE_ERROR);
    CHECK_THAT(gyre_last_error(), Contains("no chosen label " + std::to_string(c_chosen.size()) +
                                           " in the last gyre_classify call"));
  }
  CHECK(unlike_global > 0);  // the thresholds changed some decisions
  gyre_context_free(cc);
  gyre_model_free(cm);
}

TEST_CASE("text goes through the tokenizer and the vocabulary", "[runtime][inference]") {
  RefModel r;
  r.randomize(3);
  Loaded l(r);
  Context ctx(l.model);
  REQUIRE(l.model.token_id("w5") == 5);
  REQUIRE(l.model.token_id("never-seen") == 1);
  REQUIRE(l.model.token_id("<pad>") == 1);  // placeholders are not looked up
  const auto want = r.classify({5, 1, 7});
  const auto& got = ctx.classify("w5 zzz  w7");
  REQUIRE(got.token_count == 3);
  for (std::size_t i = 0; i < r.C(); ++i) REQUIRE_THAT(got.probabilities[i], WithinAbs(want[i], 1e-5));
  REQUIRE_THROWS_WITH(ctx.tag("w5"), Contains("classifier"));
  const std::vector<std::uint32_t> bad = {3, 99};
  REQUIRE_THROWS_WITH(ctx.classify_ids(bad), Contains("token id 99 at position 1 is outside the vocabulary"));
}

TEST_CASE("tagger: softmax per token and CRF Viterbi + marginals against brute force",
          "[runtime][inference]") {
  std::mt19937 rng(99);
  for (const char* output : {"softmax", "crf"})
    for (bool bidir : {false, true}) {
      RefModel r;
      r.task = "tag";
      r.output = output;
      r.bidir = bidir;
      r.cell = bidir ? "gru" : "lstm";
      r.labels = {"O", "B-date", "I-date", "B-time", "I-time"};
      const std::uint32_t seed = static_cast<std::uint32_t>(rng());
      r.randomize(seed);
      Loaded l(r);
      Context ctx(l.model);
      for (std::size_t T : {1u, 2u, 4u}) {
        INFO(output << " bidir=" << bidir << " T=" << T << " seed=" << seed);
        const auto ids = random_ids(rng, T, r.V);
        const auto e = r.emissions(ids);
        const auto& got = ctx.tag_ids(ids);
        REQUIRE(got.tags.size() == T);
        if (std::string(output) == "softmax") {
          for (std::size_t t = 0; t < T; ++t) {
            const auto p = RefModel::softmax(e[t]);
            for (std::size_t i = 0; i < r.C(); ++i)
              REQUIRE_THAT(got.probabilities[t * r.C() + i], WithinAbs(p[i], 1e-5));
          }
        } else {
          std::vector<std::uint32_t> best;
          std::vector<std::vector<double>> marg;
          crf_brute_force(r, e, true, best, marg);
          REQUIRE(std::vector<std::uint32_t>(got.tags.begin(), got.tags.end()) == best);
          for (std::size_t t = 0; t < T; ++t)
            for (std::size_t i = 0; i < r.C(); ++i)
              REQUIRE_THAT(got.probabilities[t * r.C() + i], WithinAbs(marg[t][i], 1e-5));
        }
      }
    }
}

TEST_CASE("span extraction follows the CoNLL chunk rules", "[runtime][inference]") {
  // Chunk boundary rules of the CoNLL-2000 shared-task evaluation; cases worked by hand.
  const std::vector<char> prefix = {'O', 'B', 'I', 'B', 'I', 'E', 'S'};
  const std::vector<std::string> type = {"", "date", "date", "time", "time", "date", "time"};
  auto spans = [&](std::vector<std::uint32_t> tags) {
    std::vector<gyre::runtime::TagSpan> out;
    gyre::runtime::detail::extract_spans(prefix, type, tags.data(), tags.size(), out);
    std::string s;
    for (const auto& sp : out)
      s += std::string(sp.type) + "[" + std::to_string(sp.begin) + "," + std::to_string(sp.end) + ")";
    return s;
  };
  REQUIRE(spans({1, 2, 0, 3}) == "date[0,2)time[3,4)");
  REQUIRE(spans({0, 2, 2, 0}) == "date[1,3)");                 // I after O starts a span
  REQUIRE(spans({1, 4, 4}) == "date[0,1)time[1,3)");           // I of another type starts a new span
  REQUIRE(spans({1, 1, 2}) == "date[0,1)date[1,3)");           // B always starts a new span
  REQUIRE(spans({1, 5, 2}) == "date[0,2)date[2,3)");           // after E a span is closed
  REQUIRE(spans({6, 4, 6}) == "time[0,1)time[1,2)time[2,3)");  // S is a one-token span
  REQUIRE(spans({0, 0}) == "");
  REQUIRE(spans({2}) == "date[0,1)");  // span reaching the end
}

TEST_CASE("tag() returns tokens and spans", "[runtime][inference]") {
  RefModel r;
  r.task = "tag";
  r.labels = {"O", "B-part", "I-part"};
  r.randomize(5);
  Loaded l(r);
  Context ctx(l.model);
  const auto& got = ctx.tag("w3 w4 w5 w6");
  REQUIRE(got.tokens.size() == 4);
  REQUIRE(got.tokens[2] == "w5");
  std::vector<gyre::runtime::TagSpan> want;
  gyre::runtime::detail::extract_spans({'O', 'B', 'I'}, {"", "part", "part"}, got.tags.data(), 4, want);
  REQUIRE(got.spans.size() == want.size());
  for (std::size_t i = 0; i < want.size(); ++i) {
    REQUIRE(got.spans[i].begin == want[i].begin);
    REQUIRE(got.spans[i].type == "part");
  }
  REQUIRE_THROWS_WITH(ctx.classify("w3"), Contains("tagger"));
}

TEST_CASE("step-wise inference equals the full-sequence pass", "[runtime][inference]") {
  std::mt19937 rng(4242);
  SECTION("classifiers") {
    for (const char* cell : {"lstm", "gru"})
      for (const char* pooling : {"last", "mean", "max"}) {
        RefModel r;
        r.cell = cell;
        r.pooling = pooling;
        r.L = 2;
        r.randomize(static_cast<std::uint32_t>(rng()));
        Loaded l(r);
        Context step(l.model);
        step.reset();
        const auto empty = r.classify({});
        const auto d0 = step.distribution();
        for (std::size_t i = 0; i < r.C(); ++i) REQUIRE_THAT(d0[i], WithinAbs(empty[i], 1e-5));
        const auto ids = random_ids(rng, 7, r.V);
        for (std::size_t t = 0; t < ids.size(); ++t) {
          const auto d = step.push_id(ids[t]);
          const auto want =
              r.classify(std::vector<std::uint32_t>(ids.begin(), ids.begin() + static_cast<long>(t) + 1));
          INFO(cell << " " << pooling << " step " << t);
          for (std::size_t i = 0; i < r.C(); ++i) REQUIRE_THAT(d[i], WithinAbs(want[i], 1e-5));
        }
        REQUIRE(step.steps() == 7);
        step.reset();
        REQUIRE(step.steps() == 0);
        const auto d1 = step.push("w4");
        const auto want1 = r.classify({4});
        for (std::size_t i = 0; i < r.C(); ++i) REQUIRE_THAT(d1[i], WithinAbs(want1[i], 1e-5));
      }
  }
  SECTION("CRF tagger: filtered marginal p(y_t | tokens 1..t)") {
    RefModel r;
    r.task = "tag";
    r.output = "crf";
    r.labels = {"O", "B-x", "I-x"};
    r.randomize(11);
    Loaded l(r);
    Context step(l.model);
    const auto ids = random_ids(rng, 4, r.V);
    for (std::size_t t = 0; t < ids.size(); ++t) {
      const auto d = step.push_id(ids[t]);
      const std::vector<std::uint32_t> prefix(ids.begin(), ids.begin() + static_cast<long>(t) + 1);
      std::vector<std::uint32_t> best;
      std::vector<std::vector<double>> marg;
      crf_brute_force(r, r.emissions(prefix), false, best, marg);  // no end score: the text goes on
      for (std::size_t i = 0; i < r.C(); ++i) REQUIRE_THAT(d[i], WithinAbs(marg[t][i], 1e-5));
    }
  }
  SECTION("bidirectional models refuse") {
    RefModel r;
    r.bidir = true;
    r.randomize(1);
    Loaded l(r);
    Context step(l.model);
    REQUIRE_THROWS_WITH(step.push_id(2), Contains("unidirectional"));
  }
}

TEST_CASE("f16 and int8 models stay close to f32", "[runtime][inference][quantized]") {
  std::mt19937 rng(77);
  RefModel r;
  r.E = 24;
  r.H = 32;
  r.L = 2;
  r.bidir = true;
  r.pooling = "mean";
  r.V = 50;
  r.labels = {"a", "b", "c", "d"};
  r.randomize(12345);
  Loaded f32(r), f16(r, DType::kF16), i8(r, DType::kI8);
  Context c32(f32.model), c16(f16.model), c8(i8.model);
  double max16 = 0, max8 = 0;
  int agree16 = 0, agree8 = 0;
  const int n = 200;
  for (int rep = 0; rep < n; ++rep) {
    const auto ids = random_ids(rng, 12, r.V);
    const auto& a = c32.classify_ids(ids);
    const std::vector<float> p32(a.probabilities.begin(), a.probabilities.end());
    const auto best32 = a.best;
    const auto& b = c16.classify_ids(ids);
    for (std::size_t i = 0; i < r.C(); ++i)
      max16 = std::max(max16, double(std::fabs(b.probabilities[i] - p32[i])));
    agree16 += b.best == best32;
    const auto& c = c8.classify_ids(ids);
    for (std::size_t i = 0; i < r.C(); ++i)
      max8 = std::max(max8, double(std::fabs(c.probabilities[i] - p32[i])));
    agree8 += c.best == best32;
  }
  INFO("max |p16 - p32| = " << max16 << ", max |p8 - p32| = " << max8 << ", agreement " << agree16 << ", "
                            << agree8);
  // Tolerances: binary16 has a 2^-11 relative step, int8 per-row ~1/254 of the row's range; these
  // bounds are what such errors give through a 2-layer net (measured, with margin), not a standard.
  REQUIRE(max16 < 5e-3);
  REQUIRE(max8 < 5e-2);
  REQUIRE(agree16 >= n * 99 / 100);
  REQUIRE(agree8 >= n * 95 / 100);
  // The file shrinks: int8 matrices take a quarter of the bytes.
  REQUIRE(i8.bytes.size() < f32.bytes.size() * 45 / 100);
}

TEST_CASE("model header and tensors are validated", "[runtime][inference][robustness]") {
  RefModel r;
  r.randomize(2);
  auto load_with = [&](const std::string& header, bool drop_head = false) {
    gyre::runtime::ModelFileWriter w(header);
    for (const auto& [name, v] : r.w) {
      if (drop_head && name == "readout.w") continue;
      std::vector<float> f(v.begin(), v.end());
      w.add_tensor(name, r.shape.at(name).first, r.shape.at(name).second, f);
    }
    const auto bytes = w.to_bytes();
    return Model::from_buffer(bytes.data(), bytes.size(), "m.gyre");
  };
  REQUIRE_NOTHROW(load_with(r.header()));
  auto replace = [&](std::string from, std::string to) {
    std::string h = r.header();
    const auto pos = h.find(from);
    REQUIRE(pos != std::string::npos);
    return h.replace(pos, from.size(), to);
  };
  REQUIRE_THROWS_WITH(load_with(r.header(), true), Contains("m.gyre: tensor \"readout.w\" is missing"));
  REQUIRE_THROWS_WITH(load_with(replace("\"hidden_size\":4", "\"hidden_size\":5")),
                      Contains("has shape [16 x 5], the header needs [20 x 5]"));
  REQUIRE_THROWS_WITH(load_with(replace("\"cell\":\"lstm\"", "\"cell\":\"lstm\",\"peepholes\":true")),
                      Contains("unknown key \"architecture.peepholes\""));
  REQUIRE_THROWS_WITH(load_with(replace("\"pooling\":\"last\"", "\"pooling\":\"first\"")),
                      Contains("'first' is not one of: last, mean, max"));
  REQUIRE_THROWS_WITH(load_with(replace("\"w3\"", "\"w2\"")), Contains("\"w2\" appears twice"));
  REQUIRE_THROWS_WITH(load_with(replace("\"layers\":1", "\"layers\":1.5")),
                      Contains("\"architecture.layers\" must be an integer"));
  REQUIRE_THROWS_WITH(load_with(replace("\"mode\":\"whitespace\"", "\"mode\":\"bytes\"")),
                      Contains("tokenizer.mode"));
}
