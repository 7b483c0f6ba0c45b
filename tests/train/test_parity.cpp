// The embedded runtime must answer exactly what the training library computes: an exported f32
// model's probabilities match the library's forward pass within 1e-5 for every architecture the
// trainer can produce, and quantised files stay close.

#include <catch2/catch.hpp>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iterator>

#include <nlohmann/json.hpp>

#include "gyre/core/rng.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/train/evaluate.hpp"
#include "support/random_model.hpp"

namespace fs = std::filesystem;
using Catch::Matchers::WithinAbs;

namespace {

const char* kTexts[] = {
    "the kettle stopped working on monday",
    "Can you come at 3pm? The washer leaks!",
    "thanks",
    "order a new door seal for the dryer please, model KC-450X",
    "zoë says the oven is fine now 👍 but the fridge hums",
    "unknownword anotherunknown kettle kettle kettle kettle kettle kettle kettle kettle",
};

}  // namespace

TEST_CASE("runtime f32 output equals the training library's forward pass", "[io][parity]") {
  using gyre::model::OutputKind;
  using gyre::nn::CellType;
  using gyre::nn::PoolingKind;
  struct Case {
    const char* name;
    gyre::data::Task task;
    CellType cell;
    int layers;
    bool bidirectional;
    PoolingKind pooling;
    OutputKind output;
    bool chars = false;  // character encoder (width 3; 5 for taggers)
  };
  const Case cases[] = {
      {"lstm uni mean", gyre::data::Task::kClassify, CellType::kLstm, 1, false, PoolingKind::kMean,
       OutputKind::kSoftmax},
      {"gru bi last", gyre::data::Task::kClassify, CellType::kGru, 1, true, PoolingKind::kLast,
       OutputKind::kSoftmax},
      {"lstm 2-layer bi max", gyre::data::Task::kClassify, CellType::kLstm, 2, true, PoolingKind::kMax,
       OutputKind::kSoftmax},
      {"gru 2-layer sigmoid", gyre::data::Task::kClassify, CellType::kGru, 2, false, PoolingKind::kMean,
       OutputKind::kSigmoid},
      {"lstm bi tagger", gyre::data::Task::kTag, CellType::kLstm, 1, true, PoolingKind::kMean,
       OutputKind::kSoftmax},
      {"gru 2-layer bi crf tagger", gyre::data::Task::kTag, CellType::kGru, 2, true, PoolingKind::kMean,
       OutputKind::kCrf},
      {"lstm uni mean with characters", gyre::data::Task::kClassify, CellType::kLstm, 1, false,
       PoolingKind::kMean, OutputKind::kSoftmax, true},
      {"gru bi crf tagger with characters", gyre::data::Task::kTag, CellType::kGru, 1, true,
       PoolingKind::kMean, OutputKind::kCrf, true},
  };
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "parity";
  fs::create_directories(dir);
  std::uint64_t seed = 100;
  for (const auto& c : cases) {
    SECTION(c.name) {
      gyre::model::ModelSpec spec;
      spec.task = c.task;
      spec.cell = c.cell;
      spec.layers = c.layers;
      spec.bidirectional = c.bidirectional;
      spec.pooling = c.pooling;
      spec.output = c.output;
      spec.embedding_size = 12;
      spec.hidden_size = 10;
      if (c.task == gyre::data::Task::kTag) {
        spec.labels = {"O", "B-appliance", "I-appliance", "B-time"};
        spec.tag_scheme = gyre::data::TagScheme::kBio;
      } else {
        spec.labels = {"book", "cancel", "praise"};
      }
      if (c.chars) {
        spec.char_embedding_size = 4;
        spec.char_filters = 6;
        spec.char_width = c.task == gyre::data::Task::kTag ? 5 : 3;
      }
      // Twice: without and with temperature scaling (gyre/runtime/calibration.hpp) in the file.
      for (const bool tempered : {false, true}) {
        CAPTURE(tempered);
        spec.temperature.clear();
        if (tempered) {
          if (c.output == OutputKind::kSigmoid)
            spec.temperature = {1.7f, 0.6f, 3.0f};
          else
            spec.temperature = {2.25f};
        }
        auto trained = gyre::test::random_model(spec, seed++);
        const fs::path file = dir / (std::string("m") + std::to_string(seed) + ".gyre");
        gyre::io::export_model(trained, file, gyre::runtime::DType::kF32);
        const auto runtime_model = gyre::runtime::Model::load(file.string());
        gyre::runtime::Context ctx(runtime_model);
        const gyre::data::Encoder encoder(trained.vocab, gyre::data::Task::kClassify);
        for (const char* text : kTexts) {
          CAPTURE(text);
          std::vector<std::string> tokens;
          gyre::data::EncodedExample ex;
          encoder.encode_text(text, tokens, ex);
          REQUIRE(ex.char_offsets.empty() != c.chars);
          const std::vector<gyre::data::EncodedExample> one{ex};
          const auto lib = gyre::train::predict_all(*trained.model, one).at(0);
          if (c.task == gyre::data::Task::kClassify) {
            const auto& rt = ctx.classify(text);
            REQUIRE(rt.probabilities.size() == lib.probs.size());
            // Tolerance 1e-5 absolute on probabilities (the parity bar): same equations,
            // different summation order and kernels.
            for (std::size_t k = 0; k < lib.probs.size(); ++k)
              REQUIRE_THAT(rt.probabilities[k], WithinAbs(lib.probs[k], 1e-5));
          } else {
            const auto& rt = ctx.tag(text);
            REQUIRE(rt.tags.size() == lib.tags.size());
            for (std::size_t t = 0; t < lib.tags.size(); ++t) {
              REQUIRE(static_cast<std::int32_t>(rt.tags[t]) == lib.tags[t]);
              REQUIRE_THAT(rt.probabilities[t * spec.labels.size() + static_cast<std::size_t>(lib.tags[t])],
                           WithinAbs(lib.tag_confidence[t], 1e-5));
            }
            // Each token's source bytes normalize to the token (with characters too: the surface
            // tokenizer's ranges).
            REQUIRE(rt.token_bytes.size() == rt.tokens.size());
            const std::string_view whole(text);
            for (std::size_t t = 0; t < rt.tokens.size(); ++t) {
              const auto& tb = rt.token_bytes[t];
              REQUIRE(runtime_model.tokenizer().normalize(whole.substr(tb.begin, tb.end - tb.begin)) ==
                      rt.tokens[t]);
            }
          }
          if (tempered && c.task == gyre::data::Task::kClassify) {
            // Calibration off gives the raw outputs: softmax/sigmoid of the logits the runtime reports,
            // and the calibrated ones are those logits over T (computed here from the definition).
            const auto& tempered_result = ctx.classify(text);
            const std::vector<float> calibrated(tempered_result.probabilities.begin(),
                                                tempered_result.probabilities.end());
            ctx.set_calibrated(false);
            const auto& raw = ctx.classify(text);
            for (std::size_t k = 0; k < raw.logits.size(); ++k) {
              const double z = raw.logits[k];
              if (c.output == OutputKind::kSigmoid) {
                REQUIRE_THAT(raw.probabilities[k], WithinAbs(1.0 / (1.0 + std::exp(-z)), 1e-6));
                REQUIRE_THAT(calibrated[k],
                             WithinAbs(1.0 / (1.0 + std::exp(-z / spec.temperature[k])), 1e-6));
              } else {
                double den = 0;
                for (const float l : raw.logits) den += std::exp((l - z) / 2.25);
                REQUIRE_THAT(calibrated[k], WithinAbs(1.0 / den, 1e-6));
              }
            }
            ctx.set_calibrated(true);
          }
          // The ids path (what gyre eval runs) gives the same as the text path.
          const auto by_ids = gyre::train::predict_all(runtime_model, one).at(0);
          for (std::size_t k = 0; k < by_ids.probs.size(); ++k)
            REQUIRE_THAT(by_ids.probs[k], WithinAbs(lib.probs[k], 1e-5));
          REQUIRE(by_ids.tags.size() == lib.tags.size());
          for (std::size_t t = 0; t < by_ids.tags.size(); ++t) {
            REQUIRE(by_ids.tags[t] == lib.tags[t]);
            REQUIRE_THAT(by_ids.tag_confidence[t], WithinAbs(lib.tag_confidence[t], 1e-5));
          }
        }
      }
    }
  }
}

TEST_CASE("runtime f32 with an n-gram part equals the library's network plus the shared part",
          "[io][parity][ngram]") {
  // The library's side: its forward pass (SequenceModel, untempered) gives the network's
  // log-probabilities, i.e. its logits up to a constant that no softmax sees; the n-gram part adds
  // runtime::NgramPart::add_scores of the encoder's tokens, the definition training shares; then
  // softmax(. / T). The runtime must give the same from the exported file within 1e-5.
  using gyre::model::OutputKind;
  struct Case {
    const char* name;
    gyre::nn::CellType cell;
    bool bidirectional;
    gyre::nn::PoolingKind pooling;
    bool chars;
    int order;
    float temperature;  // 0: none
  };
  const Case cases[] = {
      {"lstm uni mean, bigrams", gyre::nn::CellType::kLstm, false, gyre::nn::PoolingKind::kMean, false, 2,
       0.0f},
      {"gru bi last, trigrams, tempered", gyre::nn::CellType::kGru, true, gyre::nn::PoolingKind::kLast, false,
       3, 1.6f},
      {"lstm bi max with characters, bigrams, tempered", gyre::nn::CellType::kLstm, true,
       gyre::nn::PoolingKind::kMax, true, 2, 0.8f},
  };
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "parity-ngram";
  fs::create_directories(dir);
  std::uint64_t seed = 900;
  for (const auto& c : cases) {
    SECTION(c.name) {
      gyre::model::ModelSpec spec;
      spec.cell = c.cell;
      spec.bidirectional = c.bidirectional;
      spec.pooling = c.pooling;
      spec.embedding_size = 12;
      spec.hidden_size = 10;
      spec.labels = {"book", "cancel", "praise"};
      if (c.chars) {
        spec.char_embedding_size = 4;
        spec.char_filters = 6;
        spec.char_width = 3;
      }
      if (c.temperature > 0) spec.temperature = {c.temperature};
      auto trained = gyre::test::random_model(spec, seed++);
      const gyre::data::Encoder encoder(trained.vocab, gyre::data::Task::kClassify);
      std::vector<std::vector<std::string>> token_lists;
      for (const char* text : kTexts) {
        std::vector<std::string> tokens;
        gyre::data::EncodedExample ex;
        encoder.encode_text(text, tokens, ex);
        token_lists.push_back(tokens);
      }
      // Keys from the texts themselves (words outside the vocabulary included), as a fit would see.
      trained.ngram_part = gyre::test::random_ngram_part(token_lists, c.order, 3, seed++, 0.75f);
      const fs::path file = dir / (std::string("m") + std::to_string(seed) + ".gyre");
      gyre::io::export_model(trained, file, gyre::runtime::DType::kF32);
      const auto runtime_model = gyre::runtime::Model::load(file.string());
      REQUIRE(runtime_model.architecture().has_ngram_part());
      gyre::runtime::Context ctx(runtime_model);
      trained.model->set_calibrated(false);
      gyre::runtime::NgramScratch scratch;
      for (const char* text : kTexts) {
        CAPTURE(text);
        std::vector<std::string> tokens;
        gyre::data::EncodedExample ex;
        encoder.encode_text(text, tokens, ex);
        const std::vector<gyre::data::EncodedExample> one{ex};
        const auto lib = gyre::train::predict_all(*trained.model, one).at(0);
        std::vector<float> scores(3, 0.0f);
        trained.ngram_part.add_scores(tokens, scores.data(), scratch);
        std::vector<double> z(3);
        double mx = -1e300, den = 0;
        const double t = c.temperature > 0 ? c.temperature : 1.0;
        for (std::size_t k = 0; k < 3; ++k) {
          z[k] = (std::log(static_cast<double>(lib.probs[k])) + scores[k]) / t;
          mx = std::max(mx, z[k]);
        }
        for (const double v : z) den += std::exp(v - mx);
        // Results live in the Context until its next call: copy before the next one.
        const auto& rt_text = ctx.classify(text);
        const std::vector<float> rt(rt_text.probabilities.begin(), rt_text.probabilities.end());
        for (std::size_t k = 0; k < 3; ++k)  // tolerance 1e-5 absolute (the parity bar)
          REQUIRE_THAT(rt[k], WithinAbs(std::exp(z[k] - mx) / den, 1e-5));
        if (!c.chars) {  // with characters, classify_tokens takes tokens as written, not folded
          const auto& rt_tokens = ctx.classify_tokens(tokens);
          for (std::size_t k = 0; k < 3; ++k)
            REQUIRE_THAT(rt_tokens.probabilities[k], WithinAbs(std::exp(z[k] - mx) / den, 1e-5));
        }
        // The ids path with the words (what gyre eval can run) gives the same as the text path.
        std::vector<std::uint32_t> ids(ex.ids.begin(), ex.ids.end());
        const auto& by_ids = ctx.classify_ids(ids, ex.char_ids, ex.char_offsets, tokens);
        for (std::size_t k = 0; k < 3; ++k)
          REQUIRE_THAT(by_ids.probabilities[k], WithinAbs(std::exp(z[k] - mx) / den, 1e-5));
      }
    }
  }
}

#ifdef GYRE_CLI_PATH
TEST_CASE("gyre eval and gyre predict on an int8 file report what the runtime computes", "[parity][cli]") {
  // Issue 11: commands that score an exported file run it through runtime::Model, so the numbers
  // they print are what an application gets (int8 activations included), not the library's
  // forward pass over de-quantised weights.
  REQUIRE(fs::exists(GYRE_CLI_PATH));  // ctest runs after the whole build
  gyre::model::ModelSpec spec;
  spec.embedding_size = 12;
  spec.hidden_size = 10;
  spec.labels = {"book", "cancel", "praise"};
  const auto trained = gyre::test::random_model(spec, 42);
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "parity-cli";
  fs::create_directories(dir);
  const fs::path file = dir / "m.int8.gyre";
  gyre::io::export_model(trained, file, gyre::runtime::DType::kI8);
  const fs::path data = dir / "data.tsv";
  {
    std::ofstream out(data);
    std::size_t i = 0;
    for (const char* text : kTexts) out << spec.labels[i++ % 3] << '\t' << text << '\n';
  }
  // What an application computes: runtime::Model on each text.
  const auto model = gyre::runtime::Model::load(file.string());
  gyre::runtime::Context ctx(model);
  double loss = 0.0;
  std::size_t right = 0, i = 0;
  std::string predicted;
  for (const char* text : kTexts) {
    const auto& r = ctx.classify(text);
    // Labels are sorted in the file (book, cancel, praise), the order spec.labels has here.
    const std::size_t gold = i++ % 3;
    loss -= std::log(std::max<double>(r.probabilities[gold], 1e-12));
    right += r.best == gold;
    char buf[64];
    std::snprintf(buf, sizeof buf, "%s\t%.4f\n", model.labels()[r.best].c_str(),
                  static_cast<double>(r.probabilities[r.best]));
    predicted += buf;
  }
  const double n = static_cast<double>(std::size(kTexts));

  const fs::path json_out = dir / "eval.json";
  const std::string eval = std::string("'") + GYRE_CLI_PATH + "' eval '" + file.string() + "' --test '" +
                           data.string() + "' --json '" + json_out.string() + "' > /dev/null";
  REQUIRE(std::system(eval.c_str()) == 0);
  std::ifstream in(json_out);
  const auto report = nlohmann::json::parse(in);
  CHECK(report.at("engine") == "runtime");
  CHECK_THAT(report.at("loss").get<double>(), WithinAbs(loss / n, 1e-9));
  CHECK_THAT(report.at("accuracy").get<double>(), WithinAbs(static_cast<double>(right) / n, 1e-12));

  const fs::path texts = dir / "texts.txt";
  {
    std::ofstream out(texts);
    for (const char* text : kTexts) out << text << '\n';
  }
  const fs::path predict_out = dir / "predict.tsv";
  const std::string predict = std::string("'") + GYRE_CLI_PATH + "' predict '" + file.string() +
                              "' --input '" + texts.string() + "' > '" + predict_out.string() + "'";
  REQUIRE(std::system(predict.c_str()) == 0);
  std::ifstream pin(predict_out);
  const std::string printed((std::istreambuf_iterator<char>(pin)), std::istreambuf_iterator<char>());
  CHECK(printed == predicted);
}
#endif
