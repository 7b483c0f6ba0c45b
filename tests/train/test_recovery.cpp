// Recovery after a hard stop (issue 10 item 10): a run killed (kill -9) before its first
// checkpoint starts again on --resume instead of being neither resumable nor reusable, and the
// "<file>.tmp.<pid>" files a killed writer leaves are removed on the next start.

#include <catch2/catch.hpp>

#include <signal.h>
#include <spawn.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <filesystem>
#include <string>
#include <thread>
#include <vector>

#include "gyre/core/file.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/train/trainer.hpp"
#include "support/learnable_corpus.hpp"

extern char** environ;

namespace fs = std::filesystem;

namespace {

fs::path fresh(const std::string& name) {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "recovery" / name;
  fs::remove_all(dir);
  fs::create_directories(dir.parent_path());
  return dir;
}

// The pid of a process that has exited (and been reaped): nothing runs under it now.
pid_t dead_pid() {
  const pid_t pid = ::fork();
  if (pid == 0) ::_exit(0);
  int status = 0;
  ::waitpid(pid, &status, 0);
  return pid;
}

// All tensors of a model file as raw bytes, for a bitwise comparison.
std::vector<std::pair<std::string, std::string>> tensors_of(const fs::path& file) {
  const auto f = gyre::runtime::ModelFile::open(file.string());
  std::vector<std::pair<std::string, std::string>> out;
  for (const auto& t : f.tensors())
    out.emplace_back(t.name, std::string(static_cast<const char*>(t.data), t.bytes));
  return out;
}

void require_same_tensors(const fs::path& a, const fs::path& b) {
  INFO(a.string() << " vs " << b.string());
  const auto x = tensors_of(a), y = tensors_of(b);
  REQUIRE(x.size() == y.size());
  for (std::size_t i = 0; i < x.size(); ++i) {
    INFO("tensor " << x[i].first);
    REQUIRE(x[i].first == y[i].first);
    const bool same_bits = x[i].second == y[i].second;  // binary: not printed
    REQUIRE(same_bits);
  }
}

gyre::train::TrainConfig small_config(const fs::path& dir) {
  gyre::train::TrainConfig c;
  c.train = (dir / "train.tsv").string();
  c.dev = (dir / "dev.tsv").string();
  gyre::test::write_learnable_corpus(c.train, 300, 21);
  gyre::test::write_learnable_corpus(c.dev, 80, 22);
  c.embedding_size = 12;
  c.hidden_size = 12;
  c.batch_size = 16;
  c.epochs = 2;
  c.patience = 0;
  return c;
}

}  // namespace

TEST_CASE("a run killed before its first checkpoint starts again on --resume", "[train]") {
  const fs::path dir = fresh("before_first_checkpoint");
  fs::create_directories(dir);
  const auto config = small_config(dir);
  gyre::train::TrainOptions o;
  o.quiet = true;
  o.out = dir / "whole";
  gyre::train::train(config, o);

  // What `kill -9` during epoch 1 leaves: the settings and vocabulary (written before training
  // starts), an empty log, no checkpoint; plus temporaries of interrupted writes.
  const fs::path killed = dir / "killed";
  fs::create_directories(killed);
  fs::copy_file(o.out / "config.json", killed / "config.json");
  fs::copy_file(o.out / "vocab.json", killed / "vocab.json");
  gyre::write_file_atomic(killed / "log.jsonl", "");
  const std::string dead = std::to_string(dead_pid());
  const fs::path stale_checkpoint = killed / ("resume.bin.tmp." + dead);
  const fs::path stale_log = killed / ("log.jsonl.tmp." + dead);
  const fs::path live = killed / "notes.txt.tmp.1";  // pid 1 always runs: not ours to remove
  for (const fs::path& p : {stale_checkpoint, stale_log, live}) gyre::write_file_atomic(p, "partial");

  // Before: refused with "has no resume.bin", and a new run into the directory with
  // "already exists and is not empty".
  gyre::train::TrainOptions again;
  again.out = killed;
  const fs::path said = dir / "resume.txt";
  again.progress = std::fopen(said.c_str(), "w");
  REQUIRE(again.progress != nullptr);
  const auto result = gyre::train::resume(again);
  std::fclose(again.progress);
  const std::string text = gyre::read_file(said);
  INFO(text);
  CHECK(result.outcome == gyre::train::TrainOutcome::kFinished);
  CHECK(text.find("has no checkpoint yet") != std::string::npos);
  CHECK(text.find("removed " + stale_checkpoint.string()) != std::string::npos);
  CHECK_FALSE(fs::exists(stale_checkpoint));
  CHECK_FALSE(fs::exists(stale_log));
  CHECK(fs::exists(live));
  // Training is deterministic, so starting again reaches what the uninterrupted run did.
  require_same_tensors(o.out / "resume.bin", killed / "resume.bin");
  require_same_tensors(o.out / "selected.bin", killed / "selected.bin");

  // A finished run has nothing to start again.
  fs::remove(killed / "resume.bin");
  gyre::train::TrainOptions finished;
  finished.out = killed;
  finished.quiet = true;
  CHECK_THROWS_WITH(gyre::train::resume(finished), Catch::Contains("has no resume.bin"));
}

#ifdef GYRE_CLI_PATH
TEST_CASE("gyre train killed with SIGKILL early in its first epoch resumes to the uninterrupted weights",
          "[train][cli][slow]") {
  const fs::path dir = fresh("sigkill");
  fs::create_directories(dir);
  const std::string corpus = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/intents.train.tsv";
  const std::string dev = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/intents.dev.tsv";
  auto args_for = [&](const fs::path& out) {
    return std::vector<std::string>{GYRE_CLI_PATH, "train",      "--train", corpus,          "--dev",
                                    dev,           "--epochs",   "1",       "--seed",        "3",
                                    "--out",       out.string(), "--quiet", "--hidden-size", "64"};
  };
  auto spawn = [](const std::vector<std::string>& args) {
    std::vector<char*> argv;
    for (const auto& a : args) argv.push_back(const_cast<char*>(a.c_str()));
    argv.push_back(nullptr);
    pid_t pid = 0;
    REQUIRE(::posix_spawn(&pid, argv[0], nullptr, nullptr, argv.data(), environ) == 0);
    return pid;
  };
  auto wait_exit = [](pid_t pid) {
    int status = 0;
    REQUIRE(::waitpid(pid, &status, 0) == pid);
    return WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  };
  REQUIRE(wait_exit(spawn(args_for(dir / "whole"))) == 0);

  const fs::path cut = dir / "cut";
  const pid_t pid = spawn(args_for(cut));
  // config.json is written once the data is read and checked, just before the first step.
  for (int i = 0; i < 20000 && !fs::exists(cut / "config.json"); ++i)
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  ::kill(pid, SIGKILL);
  REQUIRE(wait_exit(pid) == 128 + SIGKILL);
  REQUIRE(fs::exists(cut / "config.json"));
  // An epoch of this run takes about a second; if a slow machine let it reach the checkpoint,
  // the ordinary resume path is taken and the equality below must hold all the same.
  if (fs::exists(cut / "resume.bin")) WARN("the kill landed after the first checkpoint");

  REQUIRE(wait_exit(spawn({GYRE_CLI_PATH, "train", "--resume", cut.string(), "--quiet"})) == 0);
  require_same_tensors(dir / "whole" / "selected.bin", cut / "selected.bin");
  for (const auto& entry : fs::directory_iterator(cut))
    CHECK(entry.path().filename().string().find(".tmp.") == std::string::npos);
}
#endif
