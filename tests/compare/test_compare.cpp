// gyre compare's engine (gyre/train/compare.hpp): directory layout, compare.json holding every
// run, per-config mean and sample std recomputed here from the per-run numbers, reuse of finished
// runs, and refusal of bad settings.

#include <catch2/catch.hpp>

#include <cmath>
#include <filesystem>
#include <fstream>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/train/compare.hpp"

namespace fs = std::filesystem;
using Catch::Matchers::WithinAbs;
using nlohmann::json;

#include "support/learnable_corpus.hpp"

namespace {

void write_corpus(const fs::path& path, std::size_t n, std::uint64_t seed) {
  gyre::test::write_learnable_corpus(path, n, seed, 8);
}

struct Setup {
  fs::path dir, train, dev, test;
};

Setup make_setup(const std::string& name) {
  Setup s;
  s.dir = fs::path(GYRE_TEST_TMP_DIR) / "compare" / name;
  fs::remove_all(s.dir);
  fs::create_directories(s.dir);
  s.train = s.dir / "train.tsv";
  s.dev = s.dir / "dev.tsv";
  s.test = s.dir / "test.tsv";
  write_corpus(s.train, 150, 21);
  write_corpus(s.dev, 40, 22);
  write_corpus(s.test, 50, 23);
  return s;
}

gyre::train::CompareSpec tiny_spec(const Setup& s) {
  gyre::train::CompareSpec spec;
  spec.base.train = s.train.string();
  spec.base.dev = s.dev.string();
  spec.base.embedding_size = 8;
  spec.base.epochs = 2;
  spec.base.batch_size = 16;
  spec.base.threads = 1;
  spec.cells = {"lstm", "gru"};
  spec.hidden_sizes = {8};
  spec.seeds = 2;
  spec.test = s.test.string();
  spec.out = s.dir / "out";
  spec.progress = nullptr;
  spec.bootstrap_samples = 200;
  return spec;
}

double sample_std(const std::vector<double>& v) {
  double m = 0;
  for (const double x : v) m += x;
  m /= static_cast<double>(v.size());
  double ss = 0;
  for (const double x : v) ss += (x - m) * (x - m);
  return std::sqrt(ss / static_cast<double>(v.size() - 1));
}

}  // namespace

TEST_CASE("compare trains every cell x size x seed and summarises them in compare.json", "[compare]") {
  const Setup s = make_setup("full");
  const auto spec = tiny_spec(s);
  const auto result = gyre::train::run_compare(spec);

  // Layout: one finished run directory per (cell, size, seed), plus compare.json.
  for (const char* name : {"lstm-h8-s1", "lstm-h8-s2", "gru-h8-s1", "gru-h8-s2"}) {
    INFO(name);
    REQUIRE(fs::exists(spec.out / name / "metrics.json"));
    REQUIRE(fs::exists(spec.out / name / "checkpoint-best.bin"));
    const json cfg = json::parse(gyre::read_file(spec.out / name / "config.json"));
    REQUIRE(cfg["hidden_size"] == 8);
    REQUIRE(cfg["epochs"] == 2);
  }
  const json c = json::parse(gyre::read_file(spec.out / "compare.json"));
  REQUIRE(c["format"] == "gyre-compare");
  REQUIRE(c["metric"] == "accuracy");
  REQUIRE(c["runs"].size() == 4);
  REQUIRE(c["configs"].size() == 2);
  REQUIRE(c["configs"][0]["name"] == "lstm-h8");
  REQUIRE(c["configs"][1]["name"] == "gru-h8");

  for (const auto& run : c["runs"]) {
    INFO(run["name"].get<std::string>());
    // The run's dev score, from reloading checkpoint-best.bin, equals what the trainer measured
    // at its best epoch (best-dev-metrics.json): same model, same examples, no dropout.
    const json best =
        json::parse(gyre::read_file(spec.out / run["dir"].get<std::string>() / "best-dev-metrics.json"));
    REQUIRE_THAT(run["dev_metric"].get<double>(), WithinAbs(best["accuracy"].get<double>(), 1e-9));
    REQUIRE(run["test_metric"].is_number());
    REQUIRE(run["epochs"] == 2);
    REQUIRE(run["train_seconds"].get<double>() > 0.0);
    REQUIRE(run["parameters"].get<std::size_t>() * 4 == run["model_bytes"].get<std::size_t>());
    REQUIRE(run["reused"] == false);
  }
  // Means and sample stds recomputed from the per-run numbers.
  for (const auto& cfg : c["configs"]) {
    std::vector<double> dev, test;
    for (const auto& run : c["runs"])
      if (run["config"] == cfg["name"]) {
        dev.push_back(run["dev_metric"].get<double>());
        test.push_back(run["test_metric"].get<double>());
      }
    REQUIRE(dev.size() == 2);
    REQUIRE_THAT(cfg["dev"]["mean"].get<double>(), WithinAbs((dev[0] + dev[1]) / 2, 1e-12));
    REQUIRE_THAT(cfg["dev"]["std"].get<double>(), WithinAbs(sample_std(dev), 1e-12));
    // Two values: sample std = |a - b| / sqrt(2) (hand-derived from the n-1 formula).
    REQUIRE_THAT(cfg["dev"]["std"].get<double>(),
                 WithinAbs(std::fabs(dev[0] - dev[1]) / std::sqrt(2.0), 1e-12));
    REQUIRE_THAT(cfg["test"]["mean"].get<double>(), WithinAbs((test[0] + test[1]) / 2, 1e-12));
    REQUIRE_THAT(cfg["test"]["std"].get<double>(), WithinAbs(sample_std(test), 1e-12));
  }
  // The best config has the highest mean dev score.
  const double m0 = c["configs"][0]["dev"]["mean"], m1 = c["configs"][1]["dev"]["mean"];
  REQUIRE(c["best"] == (m1 > m0 ? "gru-h8" : "lstm-h8"));
  REQUIRE(result.configs[result.best].name == c["best"].get<std::string>());

  // Significance between the two configs on the test set: the counts explain the accuracies.
  const auto& sig = c["significance"];
  REQUIRE(sig["set"] == "test");
  REQUIRE(sig["examples"] == 50);
  REQUIRE(sig["a"] == c["best"]);
  const double diff = sig["accuracy_a"].get<double>() - sig["accuracy_b"].get<double>();
  const double counts =
      (sig["mcnemar_exact"]["only_a"].get<double>() - sig["mcnemar_exact"]["only_b"].get<double>()) / 50.0;
  REQUIRE_THAT(diff, WithinAbs(counts, 1e-12));
  const double p = sig["mcnemar_exact"]["p_value"];
  REQUIRE((p > 0.0 && p <= 1.0));
  REQUIRE(sig["paired_bootstrap"]["samples"] == 200);

  const std::string table = gyre::train::compare_table(result, true);
  REQUIRE(table.find("lstm-h8") != std::string::npos);
  REQUIRE(table.find("McNemar") != std::string::npos);

  SECTION("a second compare reuses the finished runs and gives the same numbers") {
    const auto again = gyre::train::run_compare(spec);
    REQUIRE(again.runs.size() == 4);
    for (std::size_t i = 0; i < 4; ++i) {
      REQUIRE(again.runs[i].reused);
      REQUIRE_THAT(again.runs[i].dev_metric, WithinAbs(result.runs[i].dev_metric, 1e-12));
    }
  }
  SECTION("a directory holding a run with other settings is refused") {
    auto other = spec;
    other.hidden_sizes = {8};
    other.base.epochs = 2;
    fs::rename(spec.out / "gru-h8-s2", spec.out / "gru-h8-s3");
    fs::rename(spec.out / "gru-h8-s1", spec.out / "gru-h8-s2");  // seed 1's run where seed 2 is expected
    REQUIRE_THROWS_AS(gyre::train::run_compare(other), gyre::ConfigError);
  }
}

TEST_CASE("summarize_runs aggregates per config and picks the best", "[compare]") {
  gyre::train::CompareResult r;
  r.metric = "accuracy";
  const double a[] = {0.70, 0.74, 0.72}, b[] = {0.80, 0.60, 0.70};
  for (int i = 0; i < 3; ++i) {
    gyre::train::CompareRun x;
    x.dev_metric = a[i];
    x.train_seconds = 1.0 + i;
    r.runs.push_back(x);
  }
  for (int i = 0; i < 3; ++i) {
    gyre::train::CompareRun x;
    x.dev_metric = b[i];
    r.runs.push_back(x);
  }
  r.configs.resize(2);
  r.configs[0].runs = {0, 1, 2};
  r.configs[1].runs = {3, 4, 5};
  gyre::train::summarize_runs(r, false);
  // Hand-computed: a: mean 0.72, deviations -0.02 0.02 0 -> sqrt(0.0008 / 2) = 0.02.
  //                b: mean 0.70, deviations 0.1 -0.1 0   -> sqrt(0.02 / 2) = 0.1.
  REQUIRE_THAT(r.configs[0].dev.mean, WithinAbs(0.72, 1e-12));
  REQUIRE_THAT(r.configs[0].dev.std, WithinAbs(0.02, 1e-12));
  REQUIRE_THAT(r.configs[1].dev.mean, WithinAbs(0.70, 1e-12));
  REQUIRE_THAT(r.configs[1].dev.std, WithinAbs(0.1, 1e-12));
  REQUIRE_THAT(r.configs[0].train_seconds.mean, WithinAbs(2.0, 1e-12));
  REQUIRE(!r.configs[0].test);
  REQUIRE(r.best == 0);
  gyre::train::summarize_runs(r, true);  // for a loss, lower wins
  REQUIRE(r.best == 1);
}

TEST_CASE("compare refuses bad settings before training", "[compare]") {
  const Setup s = make_setup("bad");
  auto spec = tiny_spec(s);
  SECTION("unknown cell") {
    spec.cells = {"lstm", "rnn"};
    REQUIRE_THROWS_AS(gyre::train::run_compare(spec), gyre::ConfigError);
  }
  SECTION("unknown metric") {
    spec.metric = "bleu";
    REQUIRE_THROWS_AS(gyre::train::run_compare(spec), gyre::ConfigError);
  }
  SECTION("duplicate size") {
    spec.hidden_sizes = {8, 8};
    REQUIRE_THROWS_AS(gyre::train::run_compare(spec), gyre::ConfigError);
  }
  SECTION("no dev file") {
    spec.base.dev.clear();
    REQUIRE_THROWS_AS(gyre::train::run_compare(spec), gyre::ConfigError);
  }
  SECTION("unfinished run directory") {
    fs::create_directories(spec.out / "lstm-h8-s1");
    gyre::write_file_atomic(spec.out / "lstm-h8-s1" / "config.json", "{}");
    REQUIRE_THROWS_AS(gyre::train::run_compare(spec), gyre::ConfigError);
  }
  SECTION("malformed test file names the line") {
    gyre::write_file_atomic(s.test, "label\ttext\nalpha\tfine\nno tab here\n");
    try {
      gyre::train::run_compare(spec);
      FAIL("expected a ParseError");
    } catch (const gyre::ParseError& e) {
      REQUIRE(e.line() == 3);
    }
    REQUIRE(!fs::exists(spec.out / "lstm-h8-s1"));
  }
}
