// Why this label: integrated gradients in the library (completeness) and occlusion in the runtime
// (equal to recomputing each occluded text directly).

#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/train/evaluate.hpp"
#include "support/random_model.hpp"

namespace fs = std::filesystem;
using Catch::Matchers::WithinAbs;
using gyre::model::OutputKind;

namespace {

gyre::model::ModelSpec classifier(gyre::nn::CellType cell, bool bidirectional, gyre::nn::PoolingKind pooling,
                                  OutputKind output) {
  gyre::model::ModelSpec spec;
  spec.cell = cell;
  spec.bidirectional = bidirectional;
  spec.pooling = pooling;
  spec.output = output;
  spec.embedding_size = 12;
  spec.hidden_size = 10;
  spec.labels = {"book", "cancel", "praise"};
  return spec;
}

/// The text's ids and, for a model with a character encoder, its characters.
gyre::data::EncodedExample encode(const gyre::io::TrainedModel& m, const char* text) {
  const gyre::data::Encoder encoder(m.vocab, gyre::data::Task::kClassify);
  std::vector<std::string> tokens;
  gyre::data::EncodedExample ex;
  encoder.encode_text(text, tokens, ex);
  return ex;
}

gyre::model::ModelSpec with_characters(gyre::model::ModelSpec spec) {
  spec.char_embedding_size = 6;
  spec.char_filters = 7;
  spec.char_width = 3;
  return spec;
}

}  // namespace

TEST_CASE("integrated gradients add up to the output change (completeness)", "[train][attribution]") {
  using gyre::nn::CellType;
  using gyre::nn::PoolingKind;
  const struct {
    const char* name;
    gyre::model::ModelSpec spec;
  } cases[] = {
      {"lstm mean softmax", classifier(CellType::kLstm, false, PoolingKind::kMean, OutputKind::kSoftmax)},
      {"gru bi last softmax", classifier(CellType::kGru, true, PoolingKind::kLast, OutputKind::kSoftmax)},
      {"lstm bi max sigmoid", classifier(CellType::kLstm, true, PoolingKind::kMax, OutputKind::kSigmoid)},
      // The path runs over [word embedding, character features]: the character features are
      // computed once and scaled like the embedding, so the path stays as smooth as without them.
      {"gru mean softmax with characters",
       with_characters(classifier(CellType::kGru, false, PoolingKind::kMean, OutputKind::kSoftmax))},
  };
  std::uint64_t seed = 40;
  for (const auto& c : cases) {
    SECTION(c.name) {
      auto spec = c.spec;
      for (const bool tempered : {false, true}) {
        CAPTURE(tempered);
        spec.temperature.clear();
        if (tempered) spec.temperature.assign(c.spec.output == OutputKind::kSigmoid ? 3 : 1, 1.8f);
        auto m = gyre::test::random_model(spec, seed++);
        const auto ex = encode(m, "Can you come on Monday at 3pm , the kettle is fine thanks");
        REQUIRE(ex.char_offsets.size() == (spec.has_char_encoder() ? ex.ids.size() + 1 : 0));
        const std::vector<gyre::data::EncodedExample> one{ex};
        const auto pred = gyre::train::predict_all(*m.model, one).at(0);
        for (int target = 0; target < 3; ++target) {
          CAPTURE(target);
          const auto a = m.model->integrated_gradients(ex, target, 64);
          REQUIRE(a.scores.size() == ex.ids.size());
          // F(x) is the probability predict() gives (same forward pass, batch of one vs 65).
          REQUIRE_THAT(a.output, WithinAbs(pred.probs[static_cast<std::size_t>(target)], 1e-5));
          // Sundararajan et al. 2017, proposition 1: the attributions sum to F(x) - F(baseline),
          // up to the quadrature error of the path integral.
          const auto fine = m.model->integrated_gradients(ex, target, 512);
          if (c.spec.pooling != PoolingKind::kMax) {
            // Smooth path: the trapezoid error is O(1/steps^2); we state 2e-3 in probability at 64
            // steps and 1e-4 at 512 (measured gaps are below both on these models).
            CHECK(a.completeness_gap() <= 2e-3);
            CHECK(fine.completeness_gap() <= 1e-4);
          } else {
            // Max pooling switches its arg-max along the path: the gradient jumps, the error is
            // only O(1/steps) (measured: 0.006..0.08 at 64 steps, 0.0025..0.012 at 512). The gap is
            // reported with every attribution for this reason; here it must shrink with the steps.
            CHECK(fine.completeness_gap() <= 0.02);
            CHECK(fine.completeness_gap() < a.completeness_gap());
          }
        }
      }
    }
  }
  SECTION("bad calls are refused") {
    auto m = gyre::test::random_model(
        classifier(CellType::kLstm, false, PoolingKind::kMean, OutputKind::kSoftmax), 3);
    const std::vector<std::int32_t> empty;
    REQUIRE_THROWS_AS(m.model->integrated_gradients(empty, 0), gyre::Error);
    const std::vector<std::int32_t> ids{2, 3};
    REQUIRE_THROWS_AS(m.model->integrated_gradients(ids, 3), gyre::Error);
    REQUIRE_THROWS_AS(m.model->integrated_gradients(ids, 0, 0), gyre::Error);
    // A character encoder needs the characters: the ids alone, or an example without them, are refused.
    auto c = gyre::test::random_model(
        with_characters(classifier(CellType::kLstm, false, PoolingKind::kMean, OutputKind::kSoftmax)), 3);
    REQUIRE_THROWS_AS(c.model->integrated_gradients(ids, 0), gyre::Error);
    gyre::data::EncodedExample no_chars;
    no_chars.ids = ids;
    REQUIRE_THROWS_AS(c.model->integrated_gradients(no_chars, 0), gyre::Error);
  }
}

TEST_CASE("integrated gradients do not depend on how the path is batched", "[train][attribution]") {
  using gyre::nn::CellType;
  using gyre::nn::PoolingKind;
  // The path's 65 points in one batch, and in batches of 1, 7 and 64 points (the last batch holds
  // the rest), and the automatic choice (kIntegratedGradientsRows token rows per batch, which for a
  // text longer than 4096 / 65 tokens is several batches). The sums per token run point by point
  // in the same order, so only the products' rounding for another batch size may differ: 1e-6
  // relative to max(1, |value|) (our tolerance for float32 products; measured: identical here).
  // The long text's attributions are large for the random LSTMs (their gradients grow along 72
  // steps), hence the relative tolerance.
  const struct {
    const char* name;
    gyre::model::ModelSpec spec;
  } cases[] = {
      {"lstm mean softmax", classifier(CellType::kLstm, false, PoolingKind::kMean, OutputKind::kSoftmax)},
      {"gru bi last sigmoid", classifier(CellType::kGru, true, PoolingKind::kLast, OutputKind::kSigmoid)},
      {"lstm bi max softmax with characters",
       with_characters(classifier(CellType::kLstm, true, PoolingKind::kMax, OutputKind::kSoftmax))},
  };
  std::uint64_t seed = 90;
  for (const auto& c : cases) {
    SECTION(c.name) {
      auto spec = c.spec;
      spec.temperature.assign(c.spec.output == OutputKind::kSigmoid ? 3 : 1, 1.3f);
      auto m = gyre::test::random_model(spec, seed++);
      std::string long_text;
      for (int i = 0; i < 8; ++i) long_text += "the kettle on Monday , cancel the washer please ";
      for (const std::string& text :
           {std::string("Can you come on Monday at 3pm , the kettle is fine thanks"), long_text}) {
        const auto ex = encode(m, text.c_str());
        CAPTURE(ex.ids.size());
        // The long text needs several batches under the automatic choice.
        if (text == long_text) REQUIRE(ex.ids.size() * 65 > gyre::model::kIntegratedGradientsRows);
        for (int target = 0; target < 3; ++target) {
          CAPTURE(target);
          const auto whole = m.model->integrated_gradients(ex, target, 64, 65);
          for (const int per_batch : {1, 7, 64, 0}) {
            CAPTURE(per_batch);
            const auto a = m.model->integrated_gradients(ex, target, 64, per_batch);
            REQUIRE(a.scores.size() == whole.scores.size());
            CHECK(a.steps == 64);
            CHECK_THAT(a.output, WithinAbs(whole.output, 1e-6));
            CHECK_THAT(a.baseline_output, WithinAbs(whole.baseline_output, 1e-6));
            CHECK_THAT(a.sum, WithinAbs(whole.sum, 1e-6));
            for (std::size_t t = 0; t < a.scores.size(); ++t)
              CHECK_THAT(a.scores[t], WithinAbs(whole.scores[t], 1e-6));
          }
        }
      }
    }
  }
  SECTION("a negative batch size is refused") {
    auto m = gyre::test::random_model(
        classifier(CellType::kLstm, false, PoolingKind::kMean, OutputKind::kSoftmax), 3);
    const std::vector<std::int32_t> ids{2, 3};
    REQUIRE_THROWS_AS(m.model->integrated_gradients(ids, 0, 64, -1), gyre::Error);
  }
}

TEST_CASE("runtime occlusion equals recomputing each occluded text", "[train][attribution]") {
  auto spec = classifier(gyre::nn::CellType::kGru, true, gyre::nn::PoolingKind::kMean, OutputKind::kSoftmax);
  spec.temperature = {1.4f};
  const auto m = gyre::test::random_model(spec, 77);
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "attribution";
  fs::create_directories(dir);
  const fs::path file = dir / "occlusion.gyre";
  gyre::io::export_model(m, file, gyre::runtime::DType::kF32);
  const auto model = gyre::runtime::Model::load(file.string());
  gyre::runtime::Context ctx(model), direct(model);
  const char* text = "the washer is fine , thanks";
  for (std::uint32_t target = 0; target < 3; ++target) {
    const auto scores = ctx.occlusion(text, target);
    const auto tokens = ctx.tokens();
    REQUIRE(scores.size() == tokens.size());
    std::vector<std::uint32_t> ids;
    for (const auto& t : tokens) ids.push_back(model.token_id(t));
    const float whole = direct.classify_ids(ids).probabilities[target];
    // Another context gives the same numbers.
    REQUIRE_THAT(ctx.classify_ids(ids).probabilities[target], WithinAbs(whole, 0.0));
    for (std::size_t t = 0; t < ids.size(); ++t) {
      std::vector<std::uint32_t> cut = ids;
      cut[t] = 0;
      const float without = direct.classify_ids(cut).probabilities[target];
      // Same arithmetic in the same order: equal to float rounding of the subtraction.
      REQUIRE_THAT(scores[t], WithinAbs(whole - without, 1e-7));
    }
  }
  REQUIRE_THROWS_AS(ctx.occlusion(text, 3), gyre::runtime::Error);
}

TEST_CASE("runtime occlusion with a character encoder removes the token's word and characters",
          "[train][attribution]") {
  auto spec = with_characters(
      classifier(gyre::nn::CellType::kLstm, false, gyre::nn::PoolingKind::kMean, OutputKind::kSoftmax));
  const auto m = gyre::test::random_model(spec, 78);
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "attribution";
  fs::create_directories(dir);
  const fs::path file = dir / "occlusion-chars.gyre";
  gyre::io::export_model(m, file, gyre::runtime::DType::kF32);
  const auto model = gyre::runtime::Model::load(file.string());
  gyre::runtime::Context ctx(model), direct(model);
  const char* text = "The Washer is fine , thanks";
  const auto ex = encode(m, text);  // the library's encoder: the ids and characters the runtime reads
  std::vector<std::uint32_t> ids(ex.ids.begin(), ex.ids.end());
  for (std::uint32_t target = 0; target < 3; ++target) {
    const std::vector<float> scores = [&] {
      const auto s = ctx.occlusion(text, target);
      return std::vector<float>(s.begin(), s.end());
    }();
    REQUIRE(scores.size() == ids.size());
    const auto by_ids = ctx.occlusion_ids(ids, ex.char_ids, ex.char_offsets, target);
    for (std::size_t t = 0; t < ids.size(); ++t) REQUIRE_THAT(by_ids[t], WithinAbs(scores[t], 0.0));
    const float whole = direct.classify_ids(ids, ex.char_ids, ex.char_offsets).probabilities[target];
    for (std::size_t t = 0; t < ids.size(); ++t) {
      // Token t as padding: id 0 and no characters.
      std::vector<std::uint32_t> cut = ids;
      cut[t] = 0;
      std::vector<std::int32_t> chars, offsets{0};
      for (std::size_t u = 0; u < ids.size(); ++u) {
        if (u != t)
          chars.insert(chars.end(), ex.char_ids.begin() + ex.char_offsets[u],
                       ex.char_ids.begin() + ex.char_offsets[u + 1]);
        offsets.push_back(static_cast<std::int32_t>(chars.size()));
      }
      const float without = direct.classify_ids(cut, chars, offsets).probabilities[target];
      // Same arithmetic in the same order: equal to float rounding of the subtraction.
      REQUIRE_THAT(scores[t], WithinAbs(whole - without, 1e-7));
    }
  }
  // The ids alone are not enough for this model.
  REQUIRE_THROWS_AS(ctx.occlusion_ids(ids, 0), gyre::runtime::Error);
}
