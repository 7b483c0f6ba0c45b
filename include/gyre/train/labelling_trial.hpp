#pragma once
// A labelling trial: does `gyre pick` choose better texts than chance? Starting from a seeded
// random start_fraction of a labelled training file (the rest plays the unlabelled pool, its
// labels hidden), each round trains a model on what is labelled, scores it on a test file, and
// lets each rule (random, uncertain, diverse) pick step_fraction more texts from the pool, whose
// labels are then revealed. Every rule starts from the same first model. Result: accuracy against
// the number of labelled examples per rule (labelling.json; `gyre report` draws it).

#include <cstdint>
#include <filesystem>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/train/config.hpp"
#include "gyre/train/label_next.hpp"

namespace gyre::train {

struct TrialOptions {
  TrainConfig config;  // config.train: the full labelled file; config.dev: required
  std::string test;    // labelled file the accuracy is measured on
  std::filesystem::path out;
  double start_fraction = 0.10;
  double step_fraction = 0.05;
  int rounds = 4;  // picks after the first model; rounds + 1 models per rule
  std::vector<PickRule> rules{PickRule::kRandom, PickRule::kUncertain, PickRule::kDiverse};
  Uncertainty measure = Uncertainty::kMargin;
  std::uint64_t seed = 1;
  bool quiet = false;
};

/// Runs the trial into options.out (one run directory per rule and round, the labelled subsets as
/// JSON Lines, and labelling.json, written last and atomically). Returns labelling.json's content:
/// {"train","test","examples","start","step","rounds","seed","measure",
///  "rules":[{"rule","points":[{"labelled","accuracy","macro_f1"}]}]}.
/// Throws ConfigError when out exists and is not empty, when dev or test is missing, or for
/// fractions outside (0, 1); ParseError for bad files.
nlohmann::json labelling_trial(const TrialOptions& options);

}  // namespace gyre::train
