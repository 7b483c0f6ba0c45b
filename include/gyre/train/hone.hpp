#pragma once
// Settings search under a budget: the engine of `gyre hone`.
//
// Hyperband (Li et al., "Hyperband: A Novel Bandit-Based Approach to Hyperparameter
// Optimization", ICLR 2017; JMLR 18(185), 2018, Algorithm 1) runs successive halving (Jamieson &
// Talwalkar, "Non-stochastic Best Arm Identification and Hyperparameter Optimization", AISTATS
// 2016) in brackets that trade the number of sampled configurations against the epochs each one
// gets. The resource is training epochs: R = the most epochs a trial gets, eta = the ratio kept
// (one in eta trials survives a rung). Trials are paused at rung ends, not retrained: a promoted
// trial continues from its checkpoint, so its later rungs cost only the extra epochs.
//
// Trial 1 is the user's settings as given (the defaults of the searched ones), trained to R
// epochs before any sampled trial, so the winner never scores below them on dev.
//
// Every trial is an ordinary run directory (trainer.hpp) trained with the user's settings plus the
// sampled ones, chosen on dev only. Layout of the output directory:
//   OUT/trials/t<id>/  one run directory per trial (paused ones hold resume.bin)
//   OUT/hone-state.json  the search settings and every finished rung (written atomically after
//                        each rung; rerunning the same command continues from it)
//   OUT/hone.json        every trial, its settings and scores, and the winner (written at the end)
//   OUT/best/            the winning trial as a finished run directory (eval/predict/export)

#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/rng.hpp"
#include "gyre/train/config.hpp"

namespace gyre::train {

class ProcessGroup;

// ---- Hyperband arithmetic (pure) ----------------------------------------------------------------

/// One rung of a successive-halving bracket: `trials` configurations trained to `epochs`.
struct HoneRung {
  int trials = 0;
  int epochs = 0;
};

/// One bracket s of Hyperband: n configurations at r epochs, then keep one in eta per rung.
struct HoneBracket {
  int s = 0;
  std::vector<HoneRung> rungs;  // rungs[0].trials = n, rungs.back().epochs = R
};

/// s_max = floor(log_eta(R)) computed exactly in integers (the largest s with eta^s <= R).
int hyperband_s_max(int max_epochs, int eta);

/// The brackets of one Hyperband iteration, s = s_max down to 0 (Li et al. Algorithm 1):
///   n = ceil((s_max + 1) / (s + 1) * eta^s),  r = R * eta^-s,
///   rung i: n_i = floor(n * eta^-i) trials at r_i = r * eta^i epochs.
/// Epochs are rounded down to whole epochs (at least 1); the last rung is always R. Requires
/// max_epochs >= 1 and eta >= 2 (ConfigError otherwise).
std::vector<HoneBracket> hyperband_brackets(int max_epochs, int eta);

/// Successive halving of `n` configurations with the rung epochs of `bracket` (used when a trial
/// budget cuts the bracket's n): rung i keeps max(1, floor(n * eta^-i)) trials.
HoneBracket shrink_bracket(const HoneBracket& bracket, int n, int eta);

// ---- search space ---------------------------------------------------------------------------------

/// One searched training setting: a key of train_settings() and how it is sampled.
struct HoneDimension {
  enum class Kind { kChoice, kLogUniform, kUniform };
  std::string key;
  Kind kind = Kind::kChoice;
  std::vector<nlohmann::json> choices;  // kChoice: the values (checked against the setting)
  double low = 0.0, high = 0.0;         // kLogUniform / kUniform: the range
  int digits = 3;                       // significant digits kept of a sampled real
};

/// The default search space (learning rate, hidden and embedding size, dropout, pooling). A new
/// searched setting is one more line in hone.cpp's table.
const std::vector<HoneDimension>& default_hone_space();

/// Draws one value of every dimension, in order, from `rng`.
nlohmann::json sample_settings(const std::vector<HoneDimension>& space, Rng& rng);

// ---- the search ---------------------------------------------------------------------------------

struct HoneSpec {
  TrainConfig base;                  // data + fixed settings; sampled keys and epochs are set per trial
  std::vector<HoneDimension> space;  // searched settings (keys fixed by the user removed)
  int max_epochs = 9;                // R
  int eta = 3;                       // one in eta trials survives a rung
  int max_trials = 0;                // configurations to sample in all; 0 = no limit
  double max_minutes = 0.0;          // wall clock across sessions; 0 = no limit
  std::filesystem::path out;
  std::FILE* progress = stderr;  // one line per rung; nullptr = silent
  /// The job's processes (nullptr: process_group()). With several MPI ranks, the trials of each
  /// rung are spread over them (a rank that finishes one claims the next; OUT must be on a
  /// filesystem every rank sees) and every rank learns every outcome, so all ranks promote the
  /// same trials; rank 0 alone writes the state, hone.json and best/.
  ProcessGroup* group = nullptr;
};

/// One configuration and how far it got.
struct HoneTrial {
  int id = 0;  // 1-based, in sampling order
  int iteration = 0;
  int bracket = 0;          // s
  nlohmann::json settings;  // the sampled keys (trial 1: the defaults' values of them)
  bool defaults = false;    // trial 1: the settings the search starts from, trained to R epochs
  int epochs = 0;           // epochs trained so far
  int rung = -1;            // last finished rung (-1: none)
  /// Dev metric of the model the trial saves (or, paused at a rung, would save if it ended
  /// there): the network plus its n-gram part, tempered, as `gyre eval` scores it. What the search
  /// ranks on. Models that get no part (taggers, multi-label, ngram_part off) are not re-scored:
  /// score = network_score (so a loss metric there is the untempered one).
  double score = 0.0;
  double network_score = 0.0;  // best dev metric of the network alone (the trainer's early stopping)
  bool stopped_early = false;
  bool finished = false;    // trained to R or stopped early: metrics.json written
  int rungs_continued = 0;  // promotions that continued the trial's resume.bin (not retrained)
};

struct HoneResult {
  std::string metric;
  std::vector<HoneTrial> trials;  // in id order
  std::optional<int> best;        // index into trials
  bool budget_exhausted = false;  // the minute budget ended the search
  bool interrupted = false;       // SIGINT/SIGTERM: state saved, rerun the command to continue
  double seconds = 0.0;           // wall clock of the search, all sessions
  nlohmann::json baseline;        // the linear baseline on the same split (dev scores), or null
  nlohmann::json to_json(const HoneSpec& spec) const;
};

/// Runs (or continues, from OUT/hone-state.json) the search. The search is deterministic under
/// base.seed: the same settings are sampled and the same trials promoted; with a minute budget
/// only how far it gets depends on time. Throws ConfigError when the state file belongs to a
/// different search, ConfigError/ParseError like train() for bad settings or data.
HoneResult run_hone(const HoneSpec& spec);

/// The aligned results table printed by `gyre hone` (best first; at most `rows` rows).
std::string hone_table(const HoneResult& result, std::size_t rows);

}  // namespace gyre::train
