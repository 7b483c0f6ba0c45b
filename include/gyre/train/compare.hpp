#pragma once
// Training several model configurations (cell x hidden size) over several seeds on the same data,
// scoring every run on the same dev (and test) examples, and summarising the evidence: mean and
// sample standard deviation per configuration, and a seed-aware head-to-head of the best LSTM
// against the best GRU configuration with a plain verdict. The engine of `gyre compare`.
//
// Layout of the output directory:
//   OUT/<cell>-h<hidden>-s<seed>/   one ordinary run directory per run (see trainer.hpp), plus
//                                   compare-run.json: what it was trained from (see run_compare)
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

class ProcessGroup;

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
  std::FILE* messages = stderr;  // why a finished run is retrained (even when progress is off)
  int bootstrap_samples = 2000;  // two-level bootstrap resamples of the head-to-head
  /// The job's processes (nullptr: process_group()). With several MPI ranks the runs that need
  /// training are spread over them, a rank that finishes a run taking the next unclaimed one;
  /// OUT must then be on a filesystem every rank sees. Rank 0 scores every run and writes
  /// compare.json; run_compare returns an empty result on the other ranks.
  ProcessGroup* group = nullptr;
};

/// One trained model scored on dev (and test).
struct CompareRun {
  std::string name;    // <cell>-h<hidden>-s<seed>
  std::string config;  // <cell>-h<hidden>
  std::string cell;
  int hidden_size = 0;
  std::uint64_t seed = 0;
  bool reused = false;         // the directory already held a finished run trained from the same things
  int trained_by_rank = -1;    // the MPI rank that trained it in this job (0 in one process; -1 when reused)
  std::string retrain_reason;  // non-empty: a finished run was there but differed (what differed)
  std::size_t parameters = 0;
  std::size_t model_bytes = 0;  // parameters stored as float32
  std::size_t int8_bytes = 0;   // size of the exported int8 model file (OUT/<run>/model-int8.gyre)
  int epochs = 0;
  std::vector<double> dev_curve;   // the compare metric on dev after each epoch (log.jsonl)
  double train_seconds = 0.0;      // sum of the epochs' seconds in log.jsonl
  double tokens_per_second = 0.0;  // mean over the epochs in log.jsonl
  double dev_metric = 0.0;
  std::optional<double> test_metric;
  nlohmann::json dev;   // summary numbers (loss, accuracy, ...)
  nlohmann::json test;  // null without a test file
  /// Per-example exact-match correctness on the head-to-head set (test if given, else dev).
  std::vector<std::uint8_t> correct;
  /// Per-example additive counts of the head-to-head metric on the same set.
  eval::ExampleCounts counts;
};

/// All runs of one (cell, hidden size).
struct CompareConfig {
  std::string name;
  std::string cell;
  int hidden_size = 0;
  std::size_t parameters = 0;
  std::size_t model_bytes = 0;
  std::size_t int8_bytes = 0;
  /// Batch-1 latency of the exported int8 model in the embedded runtime (runtime::Model, one
  /// text at a time, the dev texts), median milliseconds per text, on this machine. Measured on
  /// the seed-1 run: latency depends on the architecture, not the weights.
  double latency_ms = 0.0;
  double latency_tokens = 0.0;  // mean tokens per dev text the latency was measured on
  bool pareto = false;          // no other config is at least as accurate and at least as fast (one strictly)
  std::vector<std::size_t> runs;  // indices into CompareResult::runs, seed order
  eval::SampleSummary dev;
  std::optional<eval::SampleSummary> test;
  eval::SampleSummary train_seconds;
  eval::SampleSummary tokens_per_second;
};

/// The head-to-head that answers "LSTM or GRU?": the best LSTM configuration against the best GRU
/// configuration (each chosen by mean dev metric; with one cell type, the best two
/// configurations), using every seed's runs, on the test set (dev without one).
struct HeadToHead {
  std::string a, b;              // config names; difference = a - b
  std::string label_a, label_b;  // "LSTM h128", "GRU h64"
  std::string set;               // "test" or "dev"
  std::string metric;  // the compare metric; accuracy (taggers: token_accuracy) when ranking by loss
  bool points = true;  // a share in [0, 1], shown x 100 as points
  std::size_t seeds_a = 0, seeds_b = 0, examples = 0;
  std::vector<double> scores_a, scores_b;  // per-seed metric on the set
  eval::SampleSummary summary_a, summary_b;
  eval::HierarchicalBootstrapResult interval;  // two-level bootstrap of mean(a) - mean(b)
  eval::PermutationResult permutation;         // over the per-seed scores
  long long seeds_needed =
      0;                  // per configuration, to detect a difference of the observed size; 0 = no estimate
  bool detected = false;  // the interval excludes 0
  struct SeedMcNemar {
    std::uint64_t seed = 0;
    eval::McNemarResult test;
  };
  std::vector<SeedMcNemar> per_seed;  // seed k of a against seed k of b, exact match per example
  std::string verdict;                // one plain line
  std::vector<std::string> notes;     // warnings about what the verdict cannot say
};

struct CompareResult {
  std::string metric;  // resolved metric name
  data::Task task = data::Task::kClassify;
  bool multi_label = false;
  std::vector<CompareRun> runs;
  std::vector<CompareConfig> configs;      // in the order given (cells outer, sizes inner)
  std::size_t best = 0;                    // index into configs: highest mean dev metric (lowest for loss)
  std::optional<HeadToHead> head_to_head;  // needs two configs
  nlohmann::json to_json(const CompareSpec& spec) const;
};

/// Runs (or reuses) every run, writes OUT/compare.json atomically and returns the numbers.
/// A finished run is reused only when its OUT/<run>/compare-run.json records the same whole
/// requested configuration (every training setting; the data files by content), the same
/// fingerprints (FNV-1a of the bytes) of the train, dev and test files and the same gyre version.
/// Otherwise it is retrained (into a scratch directory, swapped in when finished) and
/// spec.messages gets a line naming what differs. A run directory holding an unfinished run, or a
/// run of another cell, size or seed than its name says, is refused (ConfigError). Throws like
/// train() on bad settings or data.
CompareResult run_compare(const CompareSpec& spec);

/// Fills result.configs' summaries from result.runs (configs[i].runs must be set) and picks
/// result.best. Pure; used by run_compare and by tests.
void summarize_runs(CompareResult& result, bool lower_is_better);

/// Builds the head-to-head between configs[ia] and configs[ib] from their runs' counts, scores and
/// correctness. Pure; used by run_compare and by tests.
HeadToHead head_to_head(const CompareResult& result, std::size_t ia, std::size_t ib, const std::string& set,
                        const std::string& metric, int bootstrap_samples);

/// Marks configs[i].pareto: the accuracy-vs-latency Pareto front, accuracy = mean test metric
/// (dev without a test file; lower is better for a loss), latency = latency_ms. Pure.
void mark_pareto_front(CompareResult& result);

/// "verdict: ..." and the notes under it, one per line: what `gyre compare` prints first.
std::string compare_verdict(const CompareResult& result);

/// The aligned plain-text table printed by `gyre compare`.
std::string compare_table(const CompareResult& result, bool with_test);

}  // namespace gyre::train
