// `gyre hone` through the built binary on the demo corpus (small budget): exit codes, the table,
// determinism under a seed, continuing after Ctrl-C, and the best run used by `gyre eval`.
// Needs the gyre binary (build the default target first, as for the other CLI tests).

#include <catch2/catch.hpp>

#include <fcntl.h>
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <filesystem>
#include <string>
#include <thread>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/file.hpp"
#include "support/hone_args.hpp"
#include "support/run_cli.hpp"

namespace fs = std::filesystem;
using gyre::test::hone_args;
using nlohmann::json;

namespace {

const std::string kDemo = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/";

json trials_of(const fs::path& out) {
  const json j = json::parse(gyre::read_file(out / "hone.json"));
  return j.at("trials");
}

/// Starts gyre with `args` (output to files in `dir`) and returns its pid.
pid_t spawn_cli(const fs::path& dir, const std::vector<std::string>& args) {
  fs::create_directories(dir);
  const std::string out = (dir / "spawn.stdout").string(), err = (dir / "spawn.stderr").string();
  const pid_t pid = fork();
  if (pid == 0) {
    const int o = open(out.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
    const int e = open(err.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
    dup2(o, 1);
    dup2(e, 2);
    std::vector<char*> argv;
    std::string path = GYRE_CLI_PATH;
    argv.push_back(path.data());
    std::vector<std::string> copy = args;
    for (auto& a : copy) argv.push_back(a.data());
    argv.push_back(nullptr);
    execv(path.c_str(), argv.data());
    _exit(127);
  }
  return pid;
}

std::size_t saved_rungs(const fs::path& out) {
  try {
    return json::parse(gyre::read_file(out / "hone-state.json")).at("rungs").size();
  } catch (...) {
    return 0;  // not written yet
  }
}

}  // namespace

// [slow]: 15 s in the Release build, 110 s under ASan (CI, 2026-12-03), so the sanitizer pass skips it.
TEST_CASE("hone cli: searches on the demo corpus, writes a usable best run, repeats under a seed",
          "[hone][cli][slow]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "hone" / "cli";
  fs::remove_all(dir);
  const auto r = gyre::test::run_cli(dir, hone_args(dir / "a"));
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.out.find("dev accuracy") != std::string::npos);
  CHECK(r.out.find("linear baseline") != std::string::npos);
  CHECK(r.err.find("eta") != std::string::npos);  // progress lines carry the overall ETA
  const json trials = trials_of(dir / "a");
  REQUIRE(trials.size() == 5);
  int at_cap = 0, at_three = 0;
  for (const auto& t : trials) {
    at_cap += t.at("rung").get<int>() == 2;
    at_three += t.at("rung").get<int>() >= 1;
    // The user's fixed settings are not searched.
    CHECK_FALSE(t.at("settings").contains("hidden_size"));
    CHECK(t.at("settings").contains("learning_rate"));
  }
  CHECK(at_three == 1);  // successive halving: one of the four sampled promoted (floor(4/3) = 1)
  CHECK(at_cap == 1);
  // Trial 1 is the defaults of the searched settings (learning rate 0 = by task, char encoder
  // auto), trained to the epoch cap (or an early stop) in a bracket of its own, so the winner
  // scores at least what they score on dev.
  const json& first = trials.at(0);
  CHECK(first.at("id") == 1);
  CHECK(first.at("defaults") == true);
  CHECK(first.at("settings").at("learning_rate") == 0.0);
  CHECK(first.at("settings").at("char_encoder") == "auto");
  CHECK(first.at("settings").at("pooling") == "mean");
  CHECK(first.at("rung") == 0);
  CHECK((first.at("epochs") == 9 || first.at("stopped_early") == true));
  for (const auto& t : trials) CHECK(t.at("defaults") == (t.at("id") == 1));
  CHECK(json::parse(gyre::read_file(dir / "a" / "hone.json")).at("best").at("dev_accuracy").get<double>() >=
        first.at("dev_accuracy").get<double>());
  CHECK(r.out.find("(defaults)") != std::string::npos);
  // The best run is an ordinary finished run directory.
  const fs::path best = dir / "a" / "best";
  REQUIRE(fs::exists(best / "metrics.json"));
  const json metrics = json::parse(gyre::read_file(best / "metrics.json"));
  CHECK(metrics.contains("baseline"));
  const auto e =
      gyre::test::run_cli(dir / "eval", {"eval", best.string(), "--test", kDemo + "sentiment.test.tsv"});
  INFO(e.err);
  CHECK(e.exit_code == 0);
  // Trials rank on what their saved model scores on dev (network + n-gram part, as gyre eval runs
  // it), not on the network alone. The best run's dev score, through gyre eval:
  const auto dev_accuracy_of = [&](const fs::path& run, const std::string& name) {
    const fs::path report = dir / (name + ".json");
    const auto ev =
        gyre::test::run_cli(dir / "eval", {"eval", run.string(), "--test", kDemo + "sentiment.dev.tsv",
                                           "--no-baseline", "--json", report.string()});
    INFO(ev.err);
    REQUIRE(ev.exit_code == 0);
    return json::parse(gyre::read_file(report)).at("accuracy").get<double>();
  };
  const json hone = json::parse(gyre::read_file(dir / "a" / "hone.json"));
  CHECK(hone.at("best").at("dev_accuracy").get<double>() ==
        Approx(dev_accuracy_of(best, "best")).margin(1e-9));
  CHECK(metrics.at("ngram_part").at("dev_accuracy").at("blend").get<double>() ==
        Approx(hone.at("best").at("dev_accuracy").get<double>()).margin(1e-9));
  // A trial paused after its first rung is scored as the run it would save if it ended there:
  // the same directory finished at those epochs (gyre train --resume --epochs) and evaluated.
  int differs = 0;
  for (const auto& t : trials) {
    CHECK(t.contains("network_dev_accuracy"));
    differs += t.at("dev_accuracy").get<double>() != t.at("network_dev_accuracy").get<double>();
    if (t.at("rung").get<int>() != 0 || t.at("finished").get<bool>()) continue;
    const std::string id = std::to_string(t.at("id").get<int>());
    const fs::path copy = dir / ("paused-t" + id);
    fs::remove_all(copy);
    fs::copy(dir / "a" / "trials" / ("t" + id), copy, fs::copy_options::recursive);
    const auto ended = gyre::test::run_cli(dir / "eval", {"train", "--resume", copy.string(), "--epochs",
                                                          std::to_string(t.at("epochs").get<int>())});
    INFO(ended.err);
    REQUIRE(ended.exit_code == 0);
    CHECK(t.at("dev_accuracy").get<double>() == Approx(dev_accuracy_of(copy, "t" + id)).margin(1e-9));
  }
  CHECK(differs > 0);  // on this corpus the part changes the trials' dev scores
  // Same command, same seed, another directory: the same trials and scores.
  const auto r2 = gyre::test::run_cli(dir, hone_args(dir / "b"));
  REQUIRE(r2.exit_code == 0);
  CHECK(trials_of(dir / "b") == trials);
  // Rerunning a finished search reuses every saved rung.
  const auto r3 = gyre::test::run_cli(dir, hone_args(dir / "b"));
  REQUIRE(r3.exit_code == 0);
  CHECK(r3.err.find("[saved]") != std::string::npos);
  CHECK(trials_of(dir / "b") == trials);
  // Another search into the same directory is refused.
  auto other = hone_args(dir / "b");
  other[other.size() - 5] = "4";  // --seed 4
  const auto r4 = gyre::test::run_cli(dir, other);
  CHECK(r4.exit_code == 2);
  CHECK(r4.err.find("other settings") != std::string::npos);
}

// On the larger intents corpus, so the search is still running when the signal comes.
TEST_CASE("hone cli: Ctrl-C saves the search and the same command finishes it identically",
          "[hone][cli][slow]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "hone" / "interrupt";
  fs::remove_all(dir);
  const auto whole = gyre::test::run_cli(dir, hone_args(dir / "whole", "intents"));
  REQUIRE(whole.exit_code == 0);

  const pid_t pid = spawn_cli(dir, hone_args(dir / "cut", "intents"));
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::minutes(5);
  while (saved_rungs(dir / "cut") < 2 && std::chrono::steady_clock::now() < deadline)
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  REQUIRE(saved_rungs(dir / "cut") >= 2);
  kill(pid, SIGINT);
  int status = 0;
  waitpid(pid, &status, 0);
  INFO(gyre::read_file(dir / "spawn.stderr"));
  REQUIRE(WIFEXITED(status));
  REQUIRE(WEXITSTATUS(status) == 3);  // interrupted, resumable
  CHECK_FALSE(fs::exists(dir / "cut" / "hone.json"));

  const auto rest = gyre::test::run_cli(dir, hone_args(dir / "cut", "intents"));
  INFO(rest.err);
  REQUIRE(rest.exit_code == 0);
  CHECK(rest.err.find("[saved]") != std::string::npos);
  CHECK(trials_of(dir / "cut") == trials_of(dir / "whole"));
}

TEST_CASE("hone cli: bad usage exits 2 with a message", "[hone][cli]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "hone" / "usage";
  fs::remove_all(dir);
  const auto none = gyre::test::run_cli(dir, {"hone", "--train", kDemo + "sentiment.train.tsv", "--dev",
                                              kDemo + "sentiment.dev.tsv", "--out", (dir / "o").string()});
  CHECK(none.exit_code == 2);
  CHECK(none.err.find("--trials") != std::string::npos);
  const auto sched = gyre::test::run_cli(dir, {"hone", "--train", kDemo + "sentiment.train.tsv", "--trials",
                                               "3", "--schedule", "cosine", "--out", (dir / "o").string()});
  CHECK(sched.exit_code == 2);
  CHECK(sched.err.find("schedule") != std::string::npos);
  // A search saved by a gyre that ranked on the network alone (state version 1) is not continued.
  fs::create_directories(dir / "old");
  gyre::write_file_atomic(dir / "old" / "hone-state.json", R"({"format": "gyre-hone-state", "version": 1})");
  const auto old = gyre::test::run_cli(dir, {"hone", "--train", kDemo + "sentiment.train.tsv", "--trials",
                                             "3", "--out", (dir / "old").string()});
  CHECK(old.exit_code == 2);
  CHECK(old.err.find("version 1") != std::string::npos);
  CHECK(old.err.find("new --out") != std::string::npos);
  // Nor one saved before trial 1 became the default settings (version 2): its trial numbers differ.
  fs::create_directories(dir / "v2");
  gyre::write_file_atomic(dir / "v2" / "hone-state.json", R"({"format": "gyre-hone-state", "version": 2})");
  const auto v2 = gyre::test::run_cli(dir, {"hone", "--train", kDemo + "sentiment.train.tsv", "--trials", "3",
                                            "--out", (dir / "v2").string()});
  CHECK(v2.exit_code == 2);
  CHECK(v2.err.find("version 2") != std::string::npos);
  CHECK(v2.err.find("trial 1 is the default settings") != std::string::npos);
  CHECK(v2.err.find("new --out") != std::string::npos);
}

TEST_CASE("hone cli: a tagger continues across rungs whatever pooling the search gives it",
          "[hone][cli][slow]") {
  // Taggers pool nothing; a tagger trained with --pooling max used to be refused on resume
  // ("the checkpoint's model differs") because the model header keeps pooling for classifiers only.
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "hone" / "tagger";
  fs::remove_all(dir);
  const auto r = gyre::test::run_cli(
      dir, {"hone", "--train", kDemo + "slots.train.tsv", "--dev", kDemo + "slots.dev.tsv", "--hidden-size",
            "8", "--embedding-size", "8", "--pooling", "max", "--trials", "2", "--epoch-cap", "3",
            "--threads", "1", "--out", (dir / "o").string()});
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.out.find("dev span_f1") != std::string::npos);
  const json trials = trials_of(dir / "o");
  REQUIRE(trials.size() == 2);
  int promoted = 0;
  for (const auto& t : trials) {
    const bool up = t.at("rung").get<int>() == 1;
    promoted += up;
    // The promoted trial continued from its resume.bin (not retrained from epoch 0).
    CHECK(t.at("rungs_continued").get<int>() == (up ? 1 : 0));
  }
  CHECK(promoted == 1);  // bracket s = 1 of R = 3: 2 trials at 1 epoch, the better one to 3
}

TEST_CASE("hone cli: a minute budget ends an unlimited search and still writes the best run", "[hone][cli]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "hone" / "minutes";
  fs::remove_all(dir);
  // No trial limit: only the 3-second budget can end it (checked before each rung; the first
  // rung always starts).
  const auto r =
      gyre::test::run_cli(dir, {"hone", "--train", kDemo + "sentiment.train.tsv", "--dev",
                                kDemo + "sentiment.dev.tsv", "--hidden-size", "8", "--embedding-size", "8",
                                "--minutes", "0.05", "--threads", "1", "--out", (dir / "o").string()});
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.out.find("the minute budget ended the search") != std::string::npos);
  const json j = json::parse(gyre::read_file(dir / "o" / "hone.json"));
  CHECK(j.at("budget_exhausted").get<bool>());
  CHECK(j.at("trials").size() >= 1);
  CHECK(fs::exists(dir / "o" / "best" / "metrics.json"));
}
