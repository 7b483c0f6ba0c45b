#pragma once
// Training several model configurations (cell x hidden size) over several seeds on the same data,
// scoring every run on the same dev (and test) examples, and summarising the evidence: mean and
// sample standard deviation per configuration, and a paired significance test between the two
// best configurations. The engine of `gyre compare`.
//
// Layout of the output directory:
//   OUT/<cell>-h<hidden>-s<seed>/   one ordinary run directory per run (see trainer.hpp)
//   OUT/compare.json                every number (format "gyre-compare", version 1)

#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/eval/significance.hpp"
#include "gyre/train/config.hpp"

namespace gyre::train {

struct CompareSpec {
  TrainConfig base;  // data + every shared setting; cell/hidden_size/seed are set per run
  std::vector<std::string> cells{"lstm", "gru"};
  std::vector<int> hidden_sizes{64, 128};
  int seeds = 3;                // seeds 1..seeds
  std::string test;             // optional held-out file, scored but never used for choosing
  std::string metric = "auto";  // auto (classify: accuracy, multi-label: macro_f1, tag: span_f1) | accuracy |
                                // macro_f1 | span_f1 | token_accuracy
  std::filesystem::path out;
  std::FILE* progress = stderr;  // one line per finished run; nullptr = silent
  int bootstrap_samples = 1000;
};

/// One trained model scored on dev (and test).
struct CompareRun {
  std::string name;    // <cell>-h<hidden>-s<seed>
  std::string config;  // <cell>-h<hidden>
  std::string cell;
  int hidden_size = 0;
  std::uint64_t seed = 0;
  bool reused = false;  // the directory already held a finished run
  std::size_t parameters = 0;
  std::size_t model_bytes = 0;  // parameters stored as float32
  int epochs = 0;
  double train_seconds = 0.0;      // sum of the epochs' seconds in log.jsonl
  double tokens_per_second = 0.0;  // mean over the epochs in log.jsonl
  double dev_metric = 0.0;
  std::optional<double> test_metric;
  nlohmann::json dev;   // summary numbers (loss, accuracy, ...)
  nlohmann::json test;  // null without a test file
  /// Per-example exact-match correctness on the significance set (test if given, else dev).
  std::vector<std::uint8_t> correct;
};

/// All runs of one (cell, hidden size).
struct CompareConfig {
  std::string name;
  std::string cell;
  int hidden_size = 0;
  std::size_t parameters = 0;
  std::size_t model_bytes = 0;
  std::vector<std::size_t> runs;  // indices into CompareResult::runs, seed order
  eval::SampleSummary dev;
  std::optional<eval::SampleSummary> test;
  eval::SampleSummary train_seconds;
  eval::SampleSummary tokens_per_second;
};

struct CompareSignificance {
  std::string a, b;        // config names: a = best by mean dev metric, b = runner-up
  std::string set;         // "test" or "dev"
  std::uint64_t seed = 1;  // the seed whose runs are compared
  std::size_t examples = 0;
  double accuracy_a = 0.0, accuracy_b = 0.0;  // exact-match accuracy on that set
  eval::McNemarResult mcnemar;
  eval::BootstrapResult bootstrap;
};

struct CompareResult {
  std::string metric;  // resolved metric name
  std::vector<CompareRun> runs;
  std::vector<CompareConfig> configs;  // in the order given (cells outer, sizes inner)
  std::size_t best = 0;                // index into configs: highest mean dev metric (lowest for loss)
  std::optional<CompareSignificance> significance;  // needs two configs
  nlohmann::json to_json(const CompareSpec& spec) const;
};

/// Runs (or reuses) every run, writes OUT/compare.json atomically and returns the numbers.
/// A run directory that already holds metrics.json is reused as is when its config.json has the
/// expected cell, hidden size and seed; any other non-empty run directory is refused
/// (ConfigError). Throws like train() on bad settings or data.
CompareResult run_compare(const CompareSpec& spec);

/// Fills result.configs' summaries from result.runs (configs[i].runs must be set) and picks
/// result.best. Pure; used by run_compare and by tests.
void summarize_runs(CompareResult& result, bool lower_is_better);

/// The aligned plain-text table printed by `gyre compare`.
std::string compare_table(const CompareResult& result, bool with_test);

}  // namespace gyre::train
