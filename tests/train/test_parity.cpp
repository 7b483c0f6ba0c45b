// The embedded runtime must answer exactly what the training library computes: an exported f32
// model's probabilities match the library's forward pass within 1e-5 for every architecture the
// trainer can produce, and quantised files stay close.

#include <catch2/catch.hpp>

#include <filesystem>

#include "gyre/core/rng.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/model/encoder.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/train/evaluate.hpp"

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

gyre::text::VocabFile make_vocab(std::vector<std::string> labels) {
  gyre::text::VocabFile v;
  v.vocab = gyre::text::Vocab(
      {"the", "kettle", "oven", "washer", "fridge", "dryer", "at",     "can", "you", "come", ".",
       "?",   "!",      ",",    "please", "thanks", "on",    "monday", "3pm", "is",  "fine"},
      std::vector<std::uint64_t>(21, 5));
  gyre::text::LabelCounts counts;
  for (auto& l : labels) counts[l] = 1;
  v.labels = gyre::text::LabelSet(counts);
  return v;
}

gyre::io::TrainedModel random_model(const gyre::model::ModelSpec& spec_in, std::uint64_t seed) {
  gyre::io::TrainedModel t;
  t.spec = spec_in;
  t.vocab = make_vocab(spec_in.labels);
  t.spec.labels = t.vocab.labels.names();
  t.spec.vocab_size = static_cast<int>(t.vocab.vocab.size());
  t.model = std::make_unique<gyre::model::SequenceModel>(t.spec);
  gyre::Rng rng(seed);
  t.model->init_parameters(rng);
  // Larger weights than the initialisation so that outputs are far from uniform and gates saturate
  // in places: a stronger check than near-zero activations.
  for (auto& p : t.model->params()) {
    p.value *= 2.5f;
    if (p.name.rfind("crf.", 0) == 0)
      for (Eigen::Index i = 0; i < p.value.size(); ++i) p.value.data()[i] = rng.uniform(-1.0f, 1.0f);
  }
  return t;
}

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
        spec.tag_scheme = "bio";
      } else {
        spec.labels = {"book", "cancel", "praise"};
      }
      auto trained = random_model(spec, seed++);
      const fs::path file = dir / (std::string("m") + std::to_string(seed) + ".gyre");
      gyre::io::export_model(trained, file, gyre::runtime::DType::kF32);
      const auto runtime_model = gyre::runtime::Model::load(file.string());
      gyre::runtime::Context ctx(runtime_model);
      const gyre::model::Encoder encoder(trained.vocab, gyre::data::Task::kClassify);
      for (const char* text : kTexts) {
        CAPTURE(text);
        std::vector<std::string> tokens;
        gyre::data::EncodedExample ex;
        encoder.encode_text(text, tokens, ex.ids);
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
        }
      }
    }
  }
}
