// Trains a tiny classifier through the installed training library's API, exports it as int8 and
// classifies with the installed runtime: the whole path an application developer takes.
//   train-and-embed WORK_DIR   -> prints "ok <label> <probability>" and exits 0

#include <cstdio>
#include <filesystem>
#include <fstream>

#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/train/trainer.hpp"

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: %s WORK_DIR\n", argv[0]);
    return 2;
  }
  namespace fs = std::filesystem;
  const fs::path dir = argv[1];
  fs::create_directories(dir);
  {
    // Two labels with their own cue words (invented scenario text).
    std::ofstream out(dir / "train.tsv");
    const char* repair[] = {"my kettle is broken", "the oven will not heat", "please fix the washer"};
    const char* billing[] = {"my invoice is wrong", "i was charged twice", "refund the payment please"};
    for (int i = 0; i < 40; ++i)
      out << "repair\t" << repair[i % 3] << "\nbilling\t" << billing[i % 3] << "\n";
  }
  gyre::train::TrainConfig config;
  config.train = (dir / "train.tsv").string();
  config.embedding_size = 8;
  config.hidden_size = 8;
  config.epochs = 3;
  config.tokenizer = gyre::text::TokenizerMode::kWhitespace;
  gyre::train::TrainOptions options;
  options.out = dir / "run";
  options.quiet = true;
  fs::remove_all(options.out);
  const gyre::train::TrainResult result = gyre::train::train(config, options);
  if (result.epochs_completed < 1) return 1;

  const gyre::io::TrainedModel trained = gyre::io::load_trained_model(options.out);
  const fs::path file = dir / "tiny.gyre";
  gyre::io::export_model(trained, file, gyre::runtime::DType::kI8);

  const auto model = gyre::runtime::Model::load(file.string());
  gyre::runtime::Context ctx(model);
  const auto& r = ctx.classify("i was charged twice");
  if (r.probabilities.size() != 2) return 1;
  std::printf("ok %s %.3f\n", model.labels()[r.best].c_str(), static_cast<double>(r.probabilities[r.best]));
  return 0;
}
