// Trainer behaviour: learning, determinism, resume equality, early stopping, divergence guard,
// interruption, and refusing bad input before anything is written.

#include <catch2/catch.hpp>

#include <fcntl.h>
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

#include "support/checkpoint_weights.hpp"
#include "support/learnable_corpus.hpp"
#include "support/run_cli.hpp"

using gyre::test::weights_of;

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
  // The linear baseline was fitted on the same split and recorded beside the model's score; the
  // corpus's cue word is a unigram, so it learns the rule too.
  const auto& baseline = result.final_metrics.at("baseline");
  REQUIRE(baseline.at("dev").at("accuracy").get<double>() > 0.85);
  REQUIRE(baseline.at("features").get<std::size_t>() > 0);
  REQUIRE(baseline.at("c").get<double>() > 0);
  for (const char* file :
       {"config.json", "vocab.json", "selected.bin", "resume.bin", "log.jsonl", "metrics.json"})
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
  REQUIRE(saved.at("bidirectional") == false);
  REQUIRE(saved.at("task") == "classify");
  // Temperature scaling was fitted on dev (gyre/train/calibrate.hpp) and stored in the best
  // checkpoint; it lowers the dev NLL (it minimises it over T, and T = 1 is a candidate) and the
  // arg-max labels stay (tests/train/test_parity.cpp).
  const auto& cal = result.final_metrics.at("calibration");
  REQUIRE(trained.spec.temperature.size() == 1);
  REQUIRE(cal.at("temperature").at(0).get<float>() == trained.spec.temperature[0]);
  const auto& fit = cal.at("fits").at(0);
  REQUIRE(fit.at("nll_after").get<double>() <= fit.at("nll_before").get<double>() + 1e-12);
  REQUIRE(cal.at("after").at("predictions").get<std::size_t>() == 120);
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
    REQUIRE(weights_of(a / "resume.bin") == weights_of(b / "resume.bin"));
    config.seed = 6;
    const fs::path c = tmp_dir("det_c" + std::to_string(threads));
    gyre::train::train(config, options_for(c));
    REQUIRE(weights_of(a / "resume.bin") != weights_of(c / "resume.bin"));
  }
}

TEST_CASE("metrics.json's step_time accounts for the training loop's time, per phase and worker", "[train]") {
  auto config = small_config();
  config.epochs = 2;
  for (int threads : {1, 2}) {
    INFO("threads " << threads);
    config.threads = threads;
    const fs::path dir = tmp_dir("step_time" + std::to_string(threads));
    const auto result = gyre::train::train(config, options_for(dir));
    const auto& st = result.final_metrics.at("step_time");
    // 25 steps per epoch: small_config's 400 examples in batches of 16.
    CHECK(st.at("steps").get<long long>() == 2 * 25);
    double sum = 0;
    for (const auto& [phase, seconds] : st.at("seconds").items()) {
      INFO(phase);
      CHECK(seconds.get<double>() >= 0.0);
      sum += seconds.get<double>();
    }
    // The phases are laps of one clock over the steps; the loop's seconds add the epochs' batch
    // plans (and the clock reads between epochs), so they hold the sum and little more.
    CHECK(sum <= result.seconds);
    CHECK(sum >= 0.5 * result.seconds);
    const auto busy = st.at("worker_forward_backward_seconds").get<std::vector<double>>();
    REQUIRE(busy.size() == static_cast<std::size_t>(threads));
    const double forward_backward = st.at("seconds").at("forward_backward").get<double>();
    for (const double b : busy) {
      CHECK(b > 0.0);
      CHECK(b <= forward_backward);  // a worker's share lies within the fork-joins it ran in
    }
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
  REQUIRE(weights_of(whole / "resume.bin") == weights_of(cut / "resume.bin"));
  REQUIRE(weights_of(whole / "selected.bin") == weights_of(cut / "selected.bin"));
  // The log has one line per epoch, as the uninterrupted run.
  std::ifstream log(cut / "log.jsonl");
  REQUIRE(std::count(std::istreambuf_iterator<char>(log), std::istreambuf_iterator<char>(), '\n') == 3);
}

TEST_CASE("a run interrupted in its linear fit resumes to the same finished run", "[train]") {
  auto config = small_config();
  config.epochs = 2;
  const fs::path whole = tmp_dir("fit_cut_whole");
  const auto expected = gyre::train::train(config, options_for(whole));
  REQUIRE(expected.final_metrics.contains("ngram_part"));  // the fit makes the model's n-gram part

  const fs::path cut = tmp_dir("fit_cut");
  auto opts = options_for(cut);
  opts.interrupt_linear_fit = true;  // as if Ctrl-C came when the fit starts, after the last epoch
  const auto first = gyre::train::train(config, opts);
  REQUIRE(first.outcome == gyre::train::TrainOutcome::kInterrupted);
  REQUIRE(first.epochs_completed == 2);
  REQUIRE_FALSE(fs::exists(cut / "metrics.json"));  // not looking finished
  const auto second = gyre::train::resume(options_for(cut));
  REQUIRE(second.outcome == gyre::train::TrainOutcome::kFinished);
  REQUIRE(second.epochs_completed == 2);
  // No epoch ran again; the fit, the blend and the calibration are those of the uninterrupted run.
  REQUIRE(weights_of(whole / "selected.bin") == weights_of(cut / "selected.bin"));
  const auto done = nlohmann::json::parse(gyre::read_file(cut / "metrics.json"));
  for (const char* key : {"ngram_part", "calibration", "dev"})
    REQUIRE(done.at(key) == expected.final_metrics.at(key));
  REQUIRE(done.at("baseline").at("dev") == expected.final_metrics.at("baseline").at("dev"));
  REQUIRE(done.at("baseline").at("c") == expected.final_metrics.at("baseline").at("c"));
  std::ifstream log(cut / "log.jsonl");
  REQUIRE(std::count(std::istreambuf_iterator<char>(log), std::istreambuf_iterator<char>(), '\n') == 2);
}

TEST_CASE("epoch_step_limit ends each epoch after that many steps of its plan", "[train]") {
  auto config = small_config();  // 400 examples, batch 16: 25 steps an epoch
  config.epochs = 1;
  config.schedule = gyre::optim::ScheduleKind::kConstant;  // the rate does not depend on the total
  config.dropout = 0.2;
  // The first 10 steps of the epoch's plan, then the epoch's end: the weights an unlimited run
  // has when it is interrupted after its 10th step.
  const fs::path cut = tmp_dir("step_limit_cut");
  auto opts = options_for(cut);
  opts.interrupt_after_steps = 10;
  REQUIRE(gyre::train::train(config, opts).outcome == gyre::train::TrainOutcome::kInterrupted);
  config.epoch_step_limit = 10;
  const fs::path limited = tmp_dir("step_limit");
  const auto result = gyre::train::train(config, options_for(limited));
  REQUIRE(result.outcome == gyre::train::TrainOutcome::kFinished);
  REQUIRE(result.epochs_completed == 1);
  REQUIRE(weights_of(limited / "resume.bin") == weights_of(cut / "resume.bin"));
  // A limit at or above the plan's length changes nothing.
  config.epoch_step_limit = 0;
  const fs::path whole = tmp_dir("step_limit_none");
  gyre::train::train(config, options_for(whole));
  config.epoch_step_limit = 25;
  const fs::path at_length = tmp_dir("step_limit_25");
  gyre::train::train(config, options_for(at_length));
  REQUIRE(weights_of(whole / "resume.bin") == weights_of(at_length / "resume.bin"));
  REQUIRE(weights_of(whole / "resume.bin") != weights_of(limited / "resume.bin"));
  // The setting is in the run's config.json (a resumed run keeps it).
  const auto saved = nlohmann::json::parse(gyre::read_file(limited / "config.json"));
  REQUIRE(saved.at("epoch_step_limit").get<int>() == 10);
}

TEST_CASE("early stopping stops after `patience` epochs without improvement", "[train]") {
  auto config = small_config();
  config.epochs = 10;
  config.patience = 2;
  config.learning_rate = 1e-12;  // nothing is learned: epoch 1 stays the best
  config.optimizer = gyre::optim::OptimizerKind::kSgd;
  config.dropout = 0;
  config.embedding_dropout = 0;
  const auto result = gyre::train::train(config, options_for(tmp_dir("early")));
  REQUIRE(result.outcome == gyre::train::TrainOutcome::kEarlyStopped);
  REQUIRE(result.epochs_completed == 3);
  REQUIRE(result.best_epoch == 1);
}

TEST_CASE("the divergence guard stops a run whose loss blows up", "[train]") {
  auto config = small_config();
  config.optimizer = gyre::optim::OptimizerKind::kSgd;
  config.learning_rate = 1e30;
  config.clip_norm = 0;
  const fs::path dir = tmp_dir("diverge");
  // Nothing was saved before the first epoch ended, and the message must not claim otherwise.
  REQUIRE_THROWS_WITH(
      gyre::train::train(config, options_for(dir)),
      Catch::Matchers::Contains("at epoch 1, step") && Catch::Matchers::Contains("learning-rate") &&
          Catch::Matchers::Contains("no checkpoint was written") && !Catch::Matchers::Contains("intact"));
  REQUIRE_FALSE(fs::exists(dir / "metrics.json"));
  REQUIRE_FALSE(fs::exists(dir / "selected.bin"));
}

TEST_CASE("the divergence guard stops a finite loss that grows, not only a non-finite one", "[train]") {
  // Adam at learning rate 1e6 keeps every number finite (loss ~3e6, weights ~1e11 on the demo
  // corpus) and used to finish with exit code 0 and a "best" checkpoint.
  auto config = small_config();
  config.learning_rate = 1e6;
  const fs::path dir = tmp_dir("diverge_finite");
  REQUIRE_THROWS_WITH(gyre::train::train(config, options_for(dir)),
                      Catch::Matchers::Contains("the training loss grew to") &&
                          Catch::Matchers::Contains("times its") &&
                          Catch::Matchers::Contains("at epoch 1, step 2"));
  REQUIRE_FALSE(fs::exists(dir / "selected.bin"));
  REQUIRE_FALSE(fs::exists(dir / "metrics.json"));
}

TEST_CASE("after a divergence the message names the best checkpoint that exists", "[train]") {
  // One sane epoch, then the run continues with its saved config changed to an absurd rate.
  auto config = small_config();
  const fs::path dir = tmp_dir("diverge_late");
  auto opts = options_for(dir);
  opts.interrupt_after_epochs = 1;
  REQUIRE(gyre::train::train(config, opts).outcome == gyre::train::TrainOutcome::kInterrupted);
  auto saved = nlohmann::json::parse(gyre::read_file(dir / "config.json"));
  saved["learning_rate"] = 1e6;
  gyre::write_file_atomic(dir / "config.json", saved.dump());
  REQUIRE(fs::exists(dir / "selected.bin"));
  REQUIRE_THROWS_WITH(gyre::train::resume(options_for(dir)),
                      Catch::Matchers::Contains("at epoch 2, step") &&
                          Catch::Matchers::Contains("the best model so far (epoch 1, dev ") &&
                          Catch::Matchers::Contains((dir / "selected.bin").string()));
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
    config.pooling = gyre::nn::PoolingKind::kLast;
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
  config.pooling = gyre::nn::PoolingKind::kLast;
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
  tagger.bidirectional = false;
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
  REQUIRE(fs::exists(dir / "resume.bin"));
  REQUIRE_FALSE(fs::exists(dir / "metrics.json"));
  // The saved state is a valid checkpoint that the trainer accepts (resume it for one more step
  // via the library hook so the test stays short).
  auto opts = options_for(dir);
  opts.interrupt_after_steps = 1;
  const auto again = gyre::train::resume(opts);
  REQUIRE(again.outcome == gyre::train::TrainOutcome::kInterrupted);
}
#endif

#ifdef GYRE_CLI_PATH
namespace {

// Runs the gyre binary with `args`; returns its exit status. `interrupt` (optional) is called
// with the child's pid while it runs and may signal it.
template <typename Interrupt>
int run_gyre(std::vector<std::string> args, Interrupt interrupt) {
  args.insert(args.begin(), GYRE_CLI_PATH);
  std::vector<char*> argv;
  for (auto& a : args) argv.push_back(a.data());
  argv.push_back(nullptr);
  posix_spawn_file_actions_t actions;
  posix_spawn_file_actions_init(&actions);
  posix_spawn_file_actions_addopen(&actions, STDOUT_FILENO, "/dev/null", O_WRONLY, 0);
  pid_t pid = 0;
  const int rc = posix_spawn(&pid, GYRE_CLI_PATH, &actions, nullptr, argv.data(), environ);
  posix_spawn_file_actions_destroy(&actions);
  REQUIRE(rc == 0);
  interrupt(pid);
  int status = 0;
  waitpid(pid, &status, 0);
  REQUIRE(WIFEXITED(status));
  return WEXITSTATUS(status);
}

std::size_t lines_in(const fs::path& file) {
  std::ifstream in(file);
  return static_cast<std::size_t>(
      std::count(std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>(), '\n'));
}

}  // namespace

// Issue 10, item 1: through the command line, at the default batch size (whose token counts per
// batch reach the GEMM shapes where history-dependent blocking changed the summation order), an
// interrupt in the middle of an epoch followed by --resume gives every tensor of both checkpoints,
// optimizer moments included, bit for bit.
TEST_CASE("gyre train --resume after a signal mid-epoch equals the uninterrupted run", "[train][cli][slow]") {
  const std::string train = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/intents.train.tsv";
  const std::string dev = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/intents.dev.tsv";
  int signal_number = SIGINT;
  std::vector<std::string> variant;
  SECTION("SIGINT, one thread, Adam") {}
  SECTION("SIGTERM, two threads, SGD") {
    signal_number = SIGTERM;
    variant = {"--threads", "2", "--optimizer", "sgd", "--learning-rate", "0.5"};
  }
  auto args_for = [&](const fs::path& out) {
    std::vector<std::string> args{"train",  "--train", train,        "--dev", dev,     "--epochs",  "3",
                                  "--seed", "7",       "--patience", "0",     "--out", out.string()};
    args.insert(args.end(), variant.begin(), variant.end());
    return args;
  };
  const fs::path whole = tmp_dir("cli_resume_whole");
  REQUIRE(run_gyre(args_for(whole), [](pid_t) {}) == 0);

  const fs::path cut = tmp_dir("cli_resume_cut");
  const int interrupted = run_gyre(args_for(cut), [&](pid_t pid) {
    // Epoch 1 is logged at its end; interrupt shortly after, inside epoch 2 (~0.6 s per epoch).
    for (int i = 0; i < 1200 && lines_in(cut / "log.jsonl") < 1; ++i)
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    std::this_thread::sleep_for(std::chrono::milliseconds(150));
    kill(pid, signal_number);
  });
  REQUIRE(interrupted == 3);
  const auto saved = gyre::runtime::ModelFile::open((cut / "resume.bin").string());
  const auto trainer = nlohmann::json::parse(saved.header_json()).at("trainer");
  INFO("interrupted at epoch " << trainer.at("epoch") << ", step " << trainer.at("step"));
  // A cut at an epoch boundary would not exercise the mid-epoch path (a slower machine may land
  // there; the equality below must hold either way).
  if (trainer.at("step").get<std::size_t>() == 0) WARN("interrupt landed on an epoch boundary");

  REQUIRE(run_gyre({"train", "--resume", cut.string()}, [](pid_t) {}) == 0);
  for (const char* file : {"resume.bin", "selected.bin"}) {
    INFO(file);
    const auto a = weights_of(whole / file), b = weights_of(cut / file);
    REQUIRE(a.size() == b.size());
    for (std::size_t i = 0; i < a.size(); ++i) {
      INFO("tensor " << a[i].first);
      REQUIRE(a[i].first == b[i].first);
      const bool same_bits = a[i].second == b[i].second;  // not printed: binary
      REQUIRE(same_bits);
    }
  }
}
#endif

namespace {

// Tagging corpus in which a word is a street name exactly when it is capitalised ("Mill Lane"
// against "the mill"): the case-folded word vocabulary cannot tell them apart, the character
// encoder (reading the un-folded token) can.
fs::path capitalisation_corpus(const std::string& name, std::uint64_t seed, int sentences) {
  const fs::path path = fs::path(GYRE_TEST_TMP_DIR) / "train" / name;
  fs::create_directories(path.parent_path());
  gyre::Rng rng(seed);
  std::ofstream out(path);
  const char* words[] = {"mill", "lane", "brook", "hill", "field", "gate"};
  const char* filler[] = {"the", "by", "near", "a", "we", "saw"};
  for (int s = 0; s < sentences; ++s) {
    const auto len = 4 + rng.below(6);
    for (std::uint64_t t = 0; t < len; ++t) {
      std::string w = words[rng.below(6)];
      if (rng.below(3) == 0) {
        w[0] = static_cast<char>(w[0] - 'a' + 'A');
        out << w << "\tB-street\n";
      } else if (rng.below(2) == 0) {
        out << w << "\tO\n";
      } else {
        out << filler[rng.below(6)] << "\tO\n";
      }
    }
    out << '\n';
  }
  return path;
}

}  // namespace

TEST_CASE("the character encoder reads capitalisation that case folding removes", "[train]") {
  TrainConfig c;
  c.train = capitalisation_corpus("caps_train.tsv", 31, 300).string();
  c.dev = capitalisation_corpus("caps_dev.tsv", 32, 80).string();
  c.embedding_size = 8;
  c.hidden_size = 8;
  c.epochs = 6;
  c.batch_size = 8;
  c.learning_rate = 0.02;
  c.patience = 0;
  c.char_encoder = false;
  const auto off = gyre::train::train(c, options_for(tmp_dir("caps_off")));
  c.char_encoder = true;
  c.char_filters = 8;
  c.char_embedding_size = 8;
  const fs::path on_dir = tmp_dir("caps_on");
  const auto on = gyre::train::train(c, options_for(on_dir));
  const double f1_off = off.final_metrics.at("dev").at("micro").at("f1").get<double>();
  const double f1_on = on.final_metrics.at("dev").at("micro").at("f1").get<double>();
  INFO("span F1 without the character encoder " << f1_off << ", with it " << f1_on);
  // Without it a folded "mill" is a street a third of the time at best: F1 stays near chance.
  REQUIRE(f1_off < 0.7);
  REQUIRE(f1_on > 0.95);
  // The run directory's config says what was resolved, and vocab.json holds the character list.
  const auto config = nlohmann::json::parse(gyre::read_file(on_dir / "config.json"));
  REQUIRE(config.at("char_encoder") == true);
  const auto vocab = nlohmann::json::parse(gyre::read_file(on_dir / "vocab.json"));
  REQUIRE(vocab.at("characters").at(0) == "<pad>");
  REQUIRE(vocab.at("characters").size() > 10);  // letters of both cases
}

TEST_CASE("with the character encoder: same seed gives identical weights and a resumed run equals the whole",
          "[train]") {
  auto config = small_config();
  config.char_encoder = true;
  config.char_filters = 6;
  config.char_embedding_size = 5;
  config.threads = 2;
  config.dropout = 0.3;
  config.epochs = 3;
  const fs::path whole = tmp_dir("char_whole");
  gyre::train::train(config, options_for(whole));
  const fs::path again = tmp_dir("char_again");
  gyre::train::train(config, options_for(again));
  REQUIRE(weights_of(whole / "resume.bin") == weights_of(again / "resume.bin"));
  const auto names = weights_of(whole / "resume.bin");
  REQUIRE(std::any_of(names.begin(), names.end(), [](const auto& p) { return p.first == "chars.w_filter"; }));

  const fs::path cut = tmp_dir("char_cut");
  auto opts = options_for(cut);
  opts.interrupt_after_steps = 30;  // in epoch 2
  REQUIRE(gyre::train::train(config, opts).outcome == gyre::train::TrainOutcome::kInterrupted);
  REQUIRE(gyre::train::resume(options_for(cut)).outcome == gyre::train::TrainOutcome::kFinished);
  REQUIRE(weights_of(whole / "resume.bin") == weights_of(cut / "resume.bin"));
}

#ifdef GYRE_CLI_PATH
TEST_CASE("a classifier with the character encoder: every command that encodes text passes the characters",
          "[train]") {
  // A weakly trained model (one epoch, small steps) so that dev has mistakes to explain.
  auto config = small_config();
  config.char_encoder = true;
  config.char_filters = 6;
  config.char_embedding_size = 5;
  config.epochs = 1;
  // The network alone: its dev mistakes are what this test reads (a part could remove them all).
  config.ngram_part = gyre::train::NgramPartMode::kOff;
  config.learning_rate = 0.002;
  const fs::path dir = tmp_dir("char_classifier");
  gyre::train::train(config, options_for(dir));
  // The trainer's dev mistakes: integrated gradients over [word, characters] of each text.
  const auto metrics = nlohmann::json::parse(gyre::read_file(dir / "metrics.json"));
  REQUIRE(!metrics.at("dev_mistakes").empty());
  for (const auto& m : metrics.at("dev_mistakes")) {
    REQUIRE(!m.at("why").at("tokens").empty());
    // Smooth path (mean pooling): the stated 2e-3 of tests/train/test_attribution.cpp.
    REQUIRE(m.at("why").at("completeness").at("gap").get<double>() <= 2e-3);
  }

  const fs::path cli = dir / "cli";
  const fs::path exported = dir / "model-f32.gyre";
  const auto exp =
      gyre::test::run_cli(cli, {"export", dir.string(), "--out", exported.string(), "--precision", "f32"});
  INFO(exp.err);
  REQUIRE(exp.exit_code == 0);
  const fs::path pool = dir / "pool.txt";
  {
    std::ofstream out(pool);
    out << "Red message today\nthe NAVY thing\nwe saw olive\nsome thing about it\nRed message today\n";
  }
  for (const fs::path& model : {dir, exported}) {
    CAPTURE(model.string());
    // eval --errors explains each mistake: integrated gradients (checkpoint) or occlusion (exported).
    const auto ev =
        gyre::test::run_cli(cli, {"eval", model.string(), "--test", corpus().dev.string(), "--errors", "3"});
    INFO(ev.err);
    REQUIRE(ev.exit_code == 0);
    REQUIRE(ev.out.find("why ") != std::string::npos);
    // predict --why, pick (with a labelled corpus for the diversity term).
    const auto pr =
        gyre::test::run_cli(cli, {"predict", model.string(), "--format", "jsonl", "--why"}, pool.string());
    INFO(pr.err);
    REQUIRE(pr.exit_code == 0);
    REQUIRE(gyre::test::line_count(pr.out) == 5);
    REQUIRE(pr.out.find("\"why\"") != std::string::npos);
    const auto pk = gyre::test::run_cli(cli, {"pick", model.string(), "--pool", pool.string(), "--count", "2",
                                              "--labelled", corpus().train.string()});
    INFO(pk.err);
    REQUIRE(pk.exit_code == 0);
    REQUIRE(gyre::test::line_count(pk.out) == 2);
  }
}
#endif
