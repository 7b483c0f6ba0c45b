// On the demo corpora: a default-trained model exported at f32 gives the training library's
// probabilities within 1e-5 through the embedded runtime; f16 and int8 files agree on >= 99% and
// >= 98% of the labels and lose at most 0.5 points of dev accuracy / span F1 (the targets of the
// export issue; thresholds are our own requirements, not from a published source).

#include <catch2/catch.hpp>

#include <filesystem>

#include "gyre/data/encoder.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/eval/span_metrics.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/trainer.hpp"

namespace fs = std::filesystem;

namespace {

struct Scores {
  double metric = 0;     // accuracy (classify) or span F1 (tag) against gold
  double agreement = 0;  // labels (or tags) equal to the library's f32 prediction
  double max_prob_diff = 0;
};

Scores score_runtime(const fs::path& model_file, const gyre::io::TrainedModel& trained,
                     const std::vector<gyre::data::Example>& examples,
                     const std::vector<gyre::train::ExamplePrediction>& library) {
  const auto model = gyre::runtime::Model::load(model_file.string());
  gyre::runtime::Context ctx(model);
  Scores s;
  std::size_t agree = 0, total = 0, correct = 0;
  gyre::eval::TaggingScorer scorer;
  for (std::size_t i = 0; i < examples.size(); ++i) {
    const auto& ex = examples[i];
    const auto& lib = library[i];
    if (trained.spec.task == gyre::data::Task::kClassify) {
      const auto& r = ctx.classify(ex.text);
      for (std::size_t k = 0; k < lib.probs.size(); ++k)
        s.max_prob_diff =
            std::max(s.max_prob_diff, static_cast<double>(std::abs(r.probabilities[k] - lib.probs[k])));
      agree += static_cast<std::int32_t>(r.best) == lib.labels.at(0);
      correct += model.labels()[r.best] == ex.labels.at(0);
      ++total;
    } else {
      // Without a character encoder, pre-split tokens are looked up as they are: normalise them as
      // training did. With one, the runtime takes them as written (its characters see the case)
      // and normalises the word lookup itself.
      std::vector<std::string> tokens;
      for (const auto& t : ex.tokens)
        tokens.push_back(model.architecture().has_char_encoder() ? t : model.tokenizer().normalize(t));
      const auto& r = ctx.tag_tokens(gyre::Span<const std::string>(tokens.data(), tokens.size()));
      std::vector<std::string> predicted;
      for (std::size_t t = 0; t < ex.tokens.size(); ++t) {
        const auto C = model.labels().size();
        s.max_prob_diff = std::max(
            s.max_prob_diff,
            static_cast<double>(std::abs(r.probabilities[t * C + static_cast<std::size_t>(lib.tags[t])] -
                                         lib.tag_confidence[t])));
        agree += static_cast<std::int32_t>(r.tags[t]) == lib.tags[t];
        predicted.push_back(model.labels()[r.tags[t]]);
        ++total;
      }
      scorer.add(ex.tags, predicted);
    }
  }
  s.agreement = static_cast<double>(agree) / static_cast<double>(total);
  s.metric = trained.spec.task == gyre::data::Task::kClassify
                 ? static_cast<double>(correct) / static_cast<double>(total)
                 : scorer.metrics().micro.f1;
  return s;
}

void check_corpus(const std::string& name) {
  const fs::path src(GYRE_SOURCE_DIR);
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "demo_parity" / name;
  fs::remove_all(dir);
  fs::create_directories(dir.parent_path());
  gyre::train::TrainConfig config;
  config.train = (src / "corpora/demo" / (name + ".train.tsv")).string();
  config.dev = (src / "corpora/demo" / (name + ".dev.tsv")).string();
  config.threads = 2;
  gyre::train::TrainOptions options;
  options.out = dir / "run";
  options.quiet = true;
  gyre::train::train(config, options);

  const auto trained = gyre::io::load_trained_model(options.out);
  std::vector<gyre::data::Example> dev;
  gyre::data::read_corpus(config.dev, {}, [&](gyre::data::Example&& ex) { dev.push_back(std::move(ex)); });
  // A classifier carries the n-gram part train chose (--ngram-part auto): the encoder gives each
  // example its words and the part's scores, so both engines score network + part.
  gyre::data::Encoder encoder(trained.vocab, trained.spec.task);
  encoder.set_ngram_part(&trained.ngram_part);
  std::vector<gyre::data::EncodedExample> encoded;
  for (const auto& ex : dev) encoded.push_back(encoder.encode(ex, config.dev));
  const auto library = gyre::train::predict_all(*trained.model, encoded);

  Scores f32_scores;
  for (const auto& [precision, dtype] :
       {std::pair{"f32", gyre::runtime::DType::kF32}, std::pair{"f16", gyre::runtime::DType::kF16},
        std::pair{"int8", gyre::runtime::DType::kI8}}) {
    const fs::path file = dir / (std::string(precision) + ".gyre");
    gyre::io::export_model(trained, file, dtype);
    const Scores s = score_runtime(file, trained, dev, library);
    INFO(name << " " << precision << ": metric " << s.metric << ", agreement " << s.agreement << ", max |dp| "
              << s.max_prob_diff);
    if (std::string(precision) == "f32") {
      REQUIRE(s.max_prob_diff <= 1e-5);
      REQUIRE(s.agreement == 1.0);
      f32_scores = s;
    } else {
      REQUIRE(s.agreement >= (std::string(precision) == "f16" ? 0.99 : 0.98));
      REQUIRE(s.metric >= f32_scores.metric - 0.005);
    }
  }
}

}  // namespace

TEST_CASE("demo intents: runtime f32 matches the library, f16/int8 keep the labels", "[slow][parity]") {
  check_corpus("intents");
}

TEST_CASE("demo slots: runtime f32 matches the library, f16/int8 keep the tags", "[slow][parity]") {
  check_corpus("slots");
}
