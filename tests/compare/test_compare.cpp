// gyre compare's engine (gyre/train/compare.hpp): directory layout, compare.json holding every
// run, per-config mean and sample std recomputed here from the per-run numbers, reuse of finished
// runs, and refusal of bad settings.

#include <catch2/catch.hpp>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>

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
  spec.base.ngram_part = gyre::train::NgramPartMode::kOff;  // as `gyre compare` by default
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
  spec.bootstrap_samples = 300;
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
    REQUIRE(fs::exists(spec.out / name / "selected.bin"));
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
    // The run's dev score, from reloading selected.bin, equals what the trainer measured
    // at its best epoch (best-dev-metrics.json): same model, same examples, no dropout.
    const json best =
        json::parse(gyre::read_file(spec.out / run["dir"].get<std::string>() / "best-dev-metrics.json"));
    REQUIRE_THAT(run["dev_metric"].get<double>(), WithinAbs(best["accuracy"].get<double>(), 1e-9));
    REQUIRE(run["test_metric"].is_number());
    REQUIRE(run["epochs"] == 2);
    REQUIRE(run["train_seconds"].get<double>() > 0.0);
    REQUIRE(run["parameters"].get<std::size_t>() * 4 == run["model_bytes"].get<std::size_t>());
    // The exported int8 file's size, and the dev curve read from the run's log.jsonl.
    const fs::path run_dir = spec.out / run["dir"].get<std::string>();
    REQUIRE(run["int8_bytes"].get<std::size_t>() == fs::file_size(run_dir / "model-int8.gyre"));
    std::istringstream lines(gyre::read_file(run_dir / "log.jsonl"));
    std::string epoch1, epoch2;
    std::getline(lines, epoch1);
    std::getline(lines, epoch2);
    REQUIRE(run["dev_curve"].size() == 2);
    REQUIRE_THAT(run["dev_curve"][1].get<double>(),
                 WithinAbs(json::parse(epoch2)["dev"]["accuracy"].get<double>(), 1e-12));
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
  for (const auto& cfg : c["configs"]) {
    REQUIRE(cfg["latency_ms"].get<double>() > 0.0);
    REQUIRE(cfg["int8_bytes"].get<std::size_t>() > 0);
  }
  // The best config has the highest mean dev score.
  const double m0 = c["configs"][0]["dev"]["mean"], m1 = c["configs"][1]["dev"]["mean"];
  REQUIRE(c["best"] == (m1 > m0 ? "gru-h8" : "lstm-h8"));
  REQUIRE(result.configs[result.best].name == c["best"].get<std::string>());

  // Head-to-head: best LSTM vs best GRU on the test set, every seed used. The per-seed scores it
  // resamples (recomputed from per-example counts) equal the runs' test metrics from gyre/eval.
  const auto& h = c["head_to_head"];
  REQUIRE(h["a"] == "lstm-h8");
  REQUIRE(h["b"] == "gru-h8");
  REQUIRE(h["set"] == "test");
  REQUIRE(h["examples"] == 50);
  REQUIRE(h["scores_a"].size() == 2);
  for (int k = 0; k < 2; ++k) {
    REQUIRE_THAT(h["scores_a"][k].get<double>(), WithinAbs(c["runs"][k]["test_metric"].get<double>(), 1e-12));
    REQUIRE_THAT(h["scores_b"][k].get<double>(),
                 WithinAbs(c["runs"][2 + k]["test_metric"].get<double>(), 1e-12));
  }
  const double diff = h["difference"].get<double>();
  REQUIRE_THAT(diff, WithinAbs(c["configs"][0]["test"]["mean"].get<double>() -
                                   c["configs"][1]["test"]["mean"].get<double>(),
                               1e-12));
  const double lo = h["two_level_bootstrap"]["low"], hi = h["two_level_bootstrap"]["high"];
  REQUIRE(lo <= hi);
  REQUIRE(h["detected"] == (lo > 0 || hi < 0));
  // 2 + 2 seeds: C(4, 2) = 6 relabellings, exact.
  REQUIRE(h["permutation_test"]["relabellings"] == 6);
  REQUIRE(h["per_seed_mcnemar"].size() == 2);
  const std::string verdict = h["verdict"];
  REQUIRE((verdict.find("beats") != std::string::npos ||
           verdict.find("no difference detectable at this budget") != std::string::npos));
  REQUIRE(verdict.find("2 seeds x 50 examples") != std::string::npos);
  REQUIRE(verdict.find("seeds per configuration") != std::string::npos);

  const std::string table = gyre::train::compare_table(result, true);
  REQUIRE(table.find("lstm-h8") != std::string::npos);
  REQUIRE(table.find("McNemar") != std::string::npos);
  REQUIRE(gyre::train::compare_verdict(result).rfind("verdict: ", 0) == 0);

  SECTION("a second compare reuses the finished runs and gives the same numbers") {
    const auto again = gyre::train::run_compare(spec);
    REQUIRE(again.runs.size() == 4);
    for (std::size_t i = 0; i < 4; ++i) {
      REQUIRE(again.runs[i].reused);
      REQUIRE_THAT(again.runs[i].dev_metric, WithinAbs(result.runs[i].dev_metric, 1e-12));
    }
  }
  SECTION("a run trained from other settings, data or gyre version is retrained, naming the difference") {
    // Reuse keys on the whole requested config, the data files' contents and the gyre version.
    const fs::path msg_path = s.dir / "messages.txt";
    auto check = [&](const gyre::train::CompareSpec& changed, const std::string& expected) {
      std::FILE* msg = std::fopen(msg_path.string().c_str(), "w");
      REQUIRE(msg != nullptr);
      auto with_messages = changed;
      with_messages.messages = msg;
      const auto r = gyre::train::run_compare(with_messages);
      std::fclose(msg);
      const std::string text = gyre::read_file(msg_path);
      INFO(text);
      for (const auto& run : r.runs) {
        INFO(run.name);
        REQUIRE(!run.reused);
        REQUIRE(run.retrain_reason.find(expected) != std::string::npos);
        REQUIRE(text.find("retraining " + run.name + ": ") != std::string::npos);
      }
    };
    auto other = spec;
    other.base.learning_rate = 0.01;
    check(other, "--learning-rate 0 -> 0.01");  // 0: the rate by task
    // The same settings again: reused, nothing retrained.
    REQUIRE(gyre::train::run_compare(other).runs[0].reused);
    // A changed training file (same path, one more line): retrained.
    {
      std::ofstream append(s.train, std::ios::app);
      append << "alpha\tone more line\n";
    }
    check(other, "train file contents differ");
    // A run recorded by another gyre version is not trusted.
    auto record = json::parse(gyre::read_file(spec.out / "gru-h8-s1" / "compare-run.json"));
    record["gyre_version"] = "0.0.1";
    gyre::write_file_atomic(spec.out / "gru-h8-s1" / "compare-run.json", record.dump());
    const auto r = gyre::train::run_compare(other);
    REQUIRE(r.runs[0].reused);
    REQUIRE(!r.runs[2].reused);
    REQUIRE(r.runs[2].name == "gru-h8-s1");
    REQUIRE(r.runs[2].retrain_reason.find("trained by gyre 0.0.1") != std::string::npos);
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

TEST_CASE("compare without a test file or with one seed says what the verdict cannot tell", "[compare]") {
  const Setup s = make_setup("warnings");
  auto spec = tiny_spec(s);
  spec.test.clear();
  spec.seeds = 1;
  spec.base.epochs = 1;
  const auto result = gyre::train::run_compare(spec);
  REQUIRE(result.head_to_head);
  const auto& h = *result.head_to_head;
  REQUIRE(h.set == "dev");
  const std::string verdict = gyre::train::compare_verdict(result);
  INFO(verdict);
  REQUIRE(verdict.find("dev scores") != std::string::npos);
  REQUIRE(verdict.find("optimistic") != std::string::npos);
  REQUIRE(verdict.find("one seed per configuration") != std::string::npos);
  REQUIRE(verdict.find("cannot be estimated") != std::string::npos);
  const std::string table = gyre::train::compare_table(result, false);
  INFO(table);
  REQUIRE(table.find("±") == std::string::npos);
}

TEST_CASE("head_to_head picks best LSTM vs best GRU and states a verdict from the interval", "[compare]") {
  // Synthetic runs: 3 configs x 4 seeds on 200 examples; lstm-h16 is the best LSTM by dev, the
  // GRU clearly better on test (every GRU seed right on 20 more examples).
  gyre::train::CompareResult r;
  r.metric = "accuracy";
  const char* names[] = {"lstm-h8", "lstm-h16", "gru-h8"};
  const double devs[] = {0.70, 0.75, 0.72};
  for (int c = 0; c < 3; ++c) {
    gyre::train::CompareConfig cfg;
    cfg.name = names[c];
    cfg.cell = c < 2 ? "lstm" : "gru";
    cfg.hidden_size = c == 1 ? 16 : 8;
    for (int seed = 1; seed <= 4; ++seed) {
      gyre::train::CompareRun run;
      run.seed = static_cast<std::uint64_t>(seed);
      run.dev_metric = devs[c] + 0.001 * seed;
      run.counts.width = 2;
      for (int i = 0; i < 200; ++i) {
        // Base: right on examples i < 140 (+ seed wobble of 0..3 examples); GRU +20 more.
        const int right_until = 140 + seed + (c == 2 ? 20 : 0);
        const bool right = i < right_until;
        run.correct.push_back(right ? 1 : 0);
        run.counts.values.push_back(right ? 1.0 : 0.0);
        run.counts.values.push_back(1.0);
      }
      cfg.runs.push_back(r.runs.size());
      r.runs.push_back(run);
    }
    r.configs.push_back(cfg);
  }
  gyre::train::summarize_runs(r, false);
  REQUIRE(r.configs[r.best].name == "lstm-h16");
  const auto h = gyre::train::head_to_head(r, 1, 2, "test", "accuracy", 500);
  // Hand-computed: LSTM (140 + s) / 200, GRU (160 + s) / 200 -> difference -0.10 exactly.
  REQUIRE_THAT(h.interval.difference, WithinAbs(-0.10, 1e-12));
  REQUIRE(h.detected);
  REQUIRE(h.verdict.rfind("GRU h8 beats LSTM h16 by 10.0 points of test accuracy (95% interval ", 0) == 0);
  REQUIRE(h.verdict.find("4 seeds x 200 examples") != std::string::npos);
  // 4 + 4 seeds fully separated: exact permutation p = 2 / C(8, 4) = 2 / 70.
  REQUIRE_THAT(h.permutation.p_value, WithinAbs(2.0 / 70.0, 1e-12));
  REQUIRE(h.per_seed.size() == 4);
  REQUIRE(h.per_seed[0].test.only_b == 20);
  // Per-seed std is that of (141, 142, 143, 144) / 200 for both: sqrt(5/3) / 200 = 0.006455;
  // n = (1.95996 + 0.84162)^2 * 2 * 0.006455^2 / 0.1^2 = 0.065 -> at least 2.
  REQUIRE(h.seeds_needed == 2);
}

TEST_CASE("mark_pareto_front keeps the configurations no other is both as accurate and as fast as",
          "[compare]") {
  // Hand-made (accuracy, ms): a (0.80, 1.0), b (0.85, 2.0), c (0.84, 3.0) dominated by b,
  // d (0.80, 1.5) dominated by a, e (0.90, 5.0).
  gyre::train::CompareResult r;
  r.metric = "accuracy";
  const double acc[] = {0.80, 0.85, 0.84, 0.80, 0.90}, ms[] = {1.0, 2.0, 3.0, 1.5, 5.0};
  for (int i = 0; i < 5; ++i) {
    gyre::train::CompareConfig c;
    c.dev.count = 2;
    c.dev.mean = acc[i];
    c.latency_ms = ms[i];
    r.configs.push_back(c);
  }
  gyre::train::mark_pareto_front(r);
  const bool want[] = {true, true, false, false, true};
  for (int i = 0; i < 5; ++i) {
    INFO(i);
    REQUIRE(r.configs[static_cast<std::size_t>(i)].pareto == want[i]);
  }
  // With a test set, the test mean decides: c becomes the most accurate on test.
  for (auto& c : r.configs) c.test = c.dev;
  r.configs[2].test->mean = 0.95;
  gyre::train::mark_pareto_front(r);
  REQUIRE(r.configs[2].pareto);
  REQUIRE(!r.configs[4].pareto);
}
