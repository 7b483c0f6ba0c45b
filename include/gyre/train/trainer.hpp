#pragma once
// The training driver behind `gyre train`: reads and checks the data, builds the vocabulary and
// the model, trains with data-parallel workers, evaluates on dev after every epoch, stops early,
// writes checkpoints atomically, and can resume an interrupted run bit-identically.
//
// Run directory (DESIGN.md "Files"): config.json (fully resolved), vocab.json,
// resume.bin, selected.bin, log.jsonl (one object per epoch), metrics.json
// (written last: its presence marks a finished run).

#include <cstdio>
#include <filesystem>
#include <string>

#include <nlohmann/json.hpp>

#include "gyre/train/config.hpp"

namespace gyre::train {

class ProcessGroup;

struct TrainOptions {
  std::filesystem::path out;  // run directory
  bool quiet = false;         // no progress output
  int interactive = -1;       // progress redraws in place: -1 = when stderr is a terminal
  std::FILE* progress = stderr;
  /// Test hook: behave as if SIGINT arrived after this many completed epochs (0 = never).
  int interrupt_after_epochs = 0;
  /// Test hook: behave as if SIGINT arrived after this many optimizer steps of this call (0 = never).
  long long interrupt_after_steps = 0;
  /// Test hook: behave as if SIGINT arrived when the linear fit (baseline or n-gram part) starts.
  bool interrupt_linear_fit = false;
  /// Fit the linear baseline (gyre/train/baseline.hpp) on the same split when the run ends and
  /// record it in metrics.json under "baseline" (single-label classifiers and taggers).
  bool fit_baseline = true;
  /// resume() only: the new total number of epochs (0 = the run's own). Extends a finished or
  /// early-stopped run too; must not be below the epochs already done. The run's config.json is
  /// updated, and schedules that depend on the total length use the new one from here on.
  int epochs = 0;
  /// The processes that train this run together (nullptr: process_group(), i.e. every rank of
  /// an MPI job). local_group() trains on this process alone.
  ProcessGroup* group = nullptr;
};

enum class TrainOutcome { kFinished, kEarlyStopped, kInterrupted };

struct TrainResult {
  TrainOutcome outcome = TrainOutcome::kFinished;
  int epochs_completed = 0;
  int best_epoch = 0;
  std::string metric;  // the early-stopping metric
  double best_metric = 0.0;
  double seconds = 0.0;
  double tokens_per_second = 0.0;
  std::size_t peak_rss_bytes = 0;
  nlohmann::json final_metrics;  // contents of metrics.json
};

/// Starts a new run in options.out (which must not exist or be empty). Throws ConfigError /
/// ParseError (exit code 2 material) before creating anything when settings or data are bad;
/// DivergenceError when the loss or gradients stop being finite; IoError on I/O failures.
TrainResult train(const TrainConfig& config, const TrainOptions& options);

/// Continues the run in options.out from its resume.bin, with the config saved there.
TrainResult resume(const TrainOptions& options);

}  // namespace gyre::train
