// Trainer behaviour: learning, determinism, resume equality, early stopping, divergence guard,
// interruption, and refusing bad input before anything is written.

#include <catch2/catch.hpp>

#include <signal.h>
#include <spawn.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <filesystem>
#include <fstream>
#include <thread>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/trainer.hpp"

extern char** environ;

namespace fs = std::filesystem;
using gyre::train::TrainConfig;
using gyre::train::TrainOptions;

#include "support/learnable_corpus.hpp"

namespace {

fs::path tmp_dir(const std::string& name) {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "train" / name;
  fs::remove_all(dir);
  fs::create_directories(dir.parent_path());
  return dir;
}

void write_corpus(const fs::path& path, std::size_t n, std::uint64_t seed) {
  gyre::test::write_learnable_corpus(path, n, seed);
}

struct Corpus {
  fs::path train, dev;
};

const Corpus& corpus() {
  static const Corpus c = [] {
    const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "train" / "corpus";
    fs::create_directories(dir);
    Corpus out{dir / "train.tsv", dir / "dev.tsv"};
    write_corpus(out.train, 400, 11);
    write_corpus(out.dev, 120, 12);
    return out;
  }();
  return c;
}

TrainConfig small_config() {
  TrainConfig c;
  c.train = corpus().train.string();
  c.dev = corpus().dev.string();
  c.embedding_size = 16;
  c.hidden_size = 16;
  c.batch_size = 16;
  c.epochs = 3;
  c.learning_rate = 0.01;
  c.patience = 0;
  return c;
}

TrainOptions options_for(const fs::path& dir) {
  TrainOptions o;
  o.out = dir;
  o.quiet = true;
  return o;
}

// All parameter tensors of a checkpoint, as raw bytes (bitwise comparison).
std::vector<std::pair<std::string, std::string>> weights_of(const fs::path& checkpoint) {
  const auto file = gyre::runtime::ModelFile::open(checkpoint.string());
  std::vector<std::pair<std::string, std::string>> out;
  for (const auto& t : file.tensors()) {
    out.emplace_back(t.name, std::string(static_cast<const char*>(t.data), t.bytes));
  }
  return out;
}

}  // namespace

TEST_CASE("a classifier trained on a learnable corpus beats the majority class by a wide margin", "[train]") {
  auto config = small_config();
  config.epochs = 6;
  const fs::path dir = tmp_dir("learn");
  const auto result = gyre::train::train(config, options_for(dir));
  REQUIRE(result.outcome == gyre::train::TrainOutcome::kFinished);
  REQUIRE(result.epochs_completed == 6);
  // Majority class of the generator is 40%; a model that reads the cue word is near 100%.
  const auto trained = gyre::io::load_trained_model(dir);
  const auto accuracy = result.final_metrics.at("dev").at("accuracy").get<double>();
  REQUIRE(accuracy > 0.85);
  for (const char* file : {"config.json", "vocab.json", "checkpoint-best.bin", "checkpoint-last.bin",
                           "log.jsonl", "metrics.json"})
    REQUIRE(fs::exists(dir / file));
  // One log line per epoch with the documented fields.
  std::ifstream log(dir / "log.jsonl");
  std::string line;
  int lines = 0;
  while (std::getline(log, line)) {
    const auto j = nlohmann::json::parse(line);
    REQUIRE(j.contains("train_loss"));
    REQUIRE(j.contains("dev"));
    REQUIRE(j.contains("learning_rate"));
    REQUIRE(j.contains("seconds"));
    REQUIRE(j.contains("tokens_per_second"));
    ++lines;
  }
  REQUIRE(lines == 6);
  // The resolved config repeats the run exactly: every key is present.
  const auto saved = nlohmann::json::parse(gyre::read_file(dir / "config.json"));
  REQUIRE(saved.at("hidden_size") == 16);
  REQUIRE(saved.at("bidirectional") == "no");
  REQUIRE(saved.at("task") == "classify");
}

TEST_CASE("same seed and threads give identical weights, another seed differs", "[train]") {
  auto config = small_config();
  config.epochs = 2;
  for (int threads : {1, 2}) {
    config.threads = threads;
    config.seed = 5;
    const fs::path a = tmp_dir("det_a" + std::to_string(threads));
    const fs::path b = tmp_dir("det_b" + std::to_string(threads));
    gyre::train::train(config, options_for(a));
    gyre::train::train(config, options_for(b));
    REQUIRE(weights_of(a / "checkpoint-last.bin") == weights_of(b / "checkpoint-last.bin"));
    config.seed = 6;
    const fs::path c = tmp_dir("det_c" + std::to_string(threads));
    gyre::train::train(config, options_for(c));
    REQUIRE(weights_of(a / "checkpoint-last.bin") != weights_of(c / "checkpoint-last.bin"));
  }
}

TEST_CASE("an interrupted run resumes to bit-identical weights", "[train]") {
  auto config = small_config();
  config.epochs = 3;
  config.dropout = 0.3;  // randomness inside steps must be reproduced too
  SECTION("after an epoch, one thread") {}
  SECTION("in the middle of an epoch, two threads") {
    config.threads = 2;
  }
  const fs::path whole = tmp_dir("resume_whole");
  gyre::train::train(config, options_for(whole));

  const fs::path cut = tmp_dir("resume_cut");
  auto opts = options_for(cut);
  if (config.threads == 1) {
    opts.interrupt_after_epochs = 1;
  } else {
    opts.interrupt_after_steps = 30;  // epoch 2 of 25 steps each
  }
  const auto first = gyre::train::train(config, opts);
  REQUIRE(first.outcome == gyre::train::TrainOutcome::kInterrupted);
  REQUIRE_FALSE(fs::exists(cut / "metrics.json"));  // not looking finished
  const auto second = gyre::train::resume(options_for(cut));
  REQUIRE(second.outcome == gyre::train::TrainOutcome::kFinished);
  REQUIRE(weights_of(whole / "checkpoint-last.bin") == weights_of(cut / "checkpoint-last.bin"));
  REQUIRE(weights_of(whole / "checkpoint-best.bin") == weights_of(cut / "checkpoint-best.bin"));
  // The log has one line per epoch, as the uninterrupted run.
  std::ifstream log(cut / "log.jsonl");
  REQUIRE(std::count(std::istreambuf_iterator<char>(log), std::istreambuf_iterator<char>(), '\n') == 3);
}

TEST_CASE("early stopping stops after `patience` epochs without improvement", "[train]") {
  auto config = small_config();
  config.epochs = 10;
  config.patience = 2;
  config.learning_rate = 1e-12;  // nothing is learned: epoch 1 stays the best
  config.optimizer = "sgd";
  config.dropout = 0;
  config.embedding_dropout = 0;
  const auto result = gyre::train::train(config, options_for(tmp_dir("early")));
  REQUIRE(result.outcome == gyre::train::TrainOutcome::kEarlyStopped);
  REQUIRE(result.epochs_completed == 3);
  REQUIRE(result.best_epoch == 1);
}

TEST_CASE("the divergence guard stops a run whose loss blows up", "[train]") {
  auto config = small_config();
  config.optimizer = "sgd";
  config.learning_rate = 1e30;
  config.clip_norm = 0;
  const fs::path dir = tmp_dir("diverge");
  REQUIRE_THROWS_WITH(
      gyre::train::train(config, options_for(dir)),
      Catch::Matchers::Contains("at epoch 1, step") && Catch::Matchers::Contains("learning-rate"));
  REQUIRE_FALSE(fs::exists(dir / "metrics.json"));
}

TEST_CASE("bad settings and bad data fail before anything is written", "[train]") {
  const fs::path dir = tmp_dir("bad");
  SECTION("hidden size 0") {
    auto config = small_config();
    config.hidden_size = 0;
    REQUIRE_THROWS_AS(gyre::train::train(config, options_for(dir)), gyre::ConfigError);
  }
  SECTION("truncated BPTT window longer than max length") {
    auto config = small_config();
    config.bptt_window = 20;
    config.max_length = 10;
    config.pooling = "last";
    REQUIRE_THROWS_WITH(gyre::train::train(config, options_for(dir)),
                        Catch::Matchers::Contains("bptt_window"));
  }
  SECTION("a dev label the training file never had") {
    const fs::path bad_dev = fs::path(GYRE_TEST_TMP_DIR) / "train" / "bad_dev.tsv";
    gyre::write_file_atomic(bad_dev, "label\ttext\nalpha\tred thing\ndelta\tsomething new\n");
    auto config = small_config();
    config.dev = bad_dev.string();
    REQUIRE_THROWS_WITH(gyre::train::train(config, options_for(dir)),
                        Catch::Matchers::Contains("bad_dev.tsv:3") && Catch::Matchers::Contains("delta"));
  }
  SECTION("a malformed training line") {
    const fs::path bad = fs::path(GYRE_TEST_TMP_DIR) / "train" / "bad_train.tsv";
    gyre::write_file_atomic(bad, "label\ttext\nalpha\tred thing\nno tab on this line\n");
    auto config = small_config();
    config.train = bad.string();
    REQUIRE_THROWS_AS(gyre::train::train(config, options_for(dir)), gyre::ParseError);
  }
  REQUIRE_FALSE(fs::exists(dir));
}

TEST_CASE("truncated BPTT trains a classifier and a tagger", "[train]") {
  auto config = small_config();
  config.bptt_window = 4;
  config.pooling = "last";
  config.epochs = 4;
  const auto result = gyre::train::train(config, options_for(tmp_dir("tbptt")));
  REQUIRE(result.final_metrics.at("dev").at("accuracy").get<double>() > 0.6);

  const fs::path tags = fs::path(GYRE_TEST_TMP_DIR) / "train" / "tags.tsv";
  {
    gyre::Rng rng(3);
    std::ofstream out(tags);
    const char* words[] = {"go", "to", "the", "shop", "at", "noon", "now", "please"};
    for (int s = 0; s < 150; ++s) {
      const auto len = 5 + rng.below(8);
      for (std::uint64_t t = 0; t < len; ++t) {
        if (rng.below(4) == 0) {
          out << "Marrow"
              << "\tB-street\n"
              << "Lane"
              << "\tI-street\n";
        } else {
          out << words[rng.below(8)] << "\tO\n";
        }
      }
      out << '\n';
    }
  }
  TrainConfig tagger;
  tagger.train = tags.string();
  tagger.embedding_size = 8;
  tagger.hidden_size = 8;
  tagger.epochs = 8;
  tagger.batch_size = 8;
  tagger.bptt_window = 5;
  tagger.bidirectional = "no";
  tagger.learning_rate = 0.02;
  const auto tagged = gyre::train::train(tagger, options_for(tmp_dir("tbptt_tag")));
  REQUIRE(tagged.final_metrics.at("dev").at("micro").at("f1").get<double>() > 0.8);
}

#ifdef GYRE_CLI_PATH
TEST_CASE("SIGINT saves a resumable run and exits with code 3", "[train]") {
  const fs::path dir = tmp_dir("sigint");
  const fs::path big = fs::path(GYRE_TEST_TMP_DIR) / "train" / "big.tsv";
  write_corpus(big, 20000, 21);
  const std::string train_arg = big.string(), dev_arg = corpus().dev.string(), out_arg = dir.string();
  std::vector<std::string> args{GYRE_CLI_PATH,   "train", "--train", train_arg,  "--dev",
                                dev_arg,         "--out", out_arg,   "--epochs", "50",
                                "--hidden-size", "64",    "--quiet"};
  std::vector<char*> argv;
  for (auto& a : args) argv.push_back(a.data());
  argv.push_back(nullptr);
  pid_t pid = 0;
  REQUIRE(posix_spawn(&pid, GYRE_CLI_PATH, nullptr, nullptr, argv.data(), environ) == 0);
  // Wait until training has started (the run directory holds its log), then interrupt.
  for (int i = 0; i < 600 && !fs::exists(dir / "log.jsonl"); ++i)
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  std::this_thread::sleep_for(std::chrono::milliseconds(300));
  kill(pid, SIGINT);
  int status = 0;
  waitpid(pid, &status, 0);
  REQUIRE(WIFEXITED(status));
  REQUIRE(WEXITSTATUS(status) == 3);
  REQUIRE(fs::exists(dir / "checkpoint-last.bin"));
  REQUIRE_FALSE(fs::exists(dir / "metrics.json"));
  // The saved state is a valid checkpoint that the trainer accepts (resume it for one more step
  // via the library hook so the test stays short).
  auto opts = options_for(dir);
  opts.interrupt_after_steps = 1;
  const auto again = gyre::train::resume(opts);
  REQUIRE(again.outcome == gyre::train::TrainOutcome::kInterrupted);
}
#endif
