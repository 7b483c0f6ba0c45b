// Does `gyre pick` choose better texts to label than chance? A labelling trial on the demo
// intents (the Kettle & Coil messages): from the same random 10% of the training file, each rule
// adds 5% per round and the model is retrained; the test accuracy after the picks must be higher
// for the uncertainty + diversity rule than for random picks.

#include <catch2/catch.hpp>

#include <filesystem>

#include <nlohmann/json.hpp>

#include "gyre/train/labelling_trial.hpp"

namespace fs = std::filesystem;

TEST_CASE("demo intents: diverse picks beat random picks", "[slow][label-next]") {
  const std::string demo = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/";
  // Mean test accuracy over the rounds after picking (round 0 is shared by both rules), averaged
  // over six trial seeds (six different first 10%): one seed's margin is within noise, and so was
  // three seeds' (numerically small code changes moved their mean margin from 0.0275 to
  // 0.0100). Per seed on this build: margins +0.026, +0.006, -0.002, +0.033, +0.047, +0.004.
  constexpr int kSeeds = 6;
  double random = 0, diverse = 0;
  for (std::uint64_t seed = 1; seed <= kSeeds; ++seed) {
    gyre::train::TrialOptions o;
    o.config.train = demo + "intents.train.tsv";
    o.config.dev = demo + "intents.dev.tsv";
    o.test = demo + "intents.test.tsv";
    o.config.epochs = 12;
    o.config.patience = 0;
    o.config.threads = 1;
    o.rounds = 3;
    o.seed = seed;
    o.rules = {gyre::train::PickRule::kRandom, gyre::train::PickRule::kDiverse};
    o.out = fs::path(GYRE_TEST_TMP_DIR) / ("labelling_trial_" + std::to_string(seed));
    fs::remove_all(o.out);
    o.quiet = true;
    const nlohmann::json r = gyre::train::labelling_trial(o);
    auto mean_after_picks = [&](std::size_t rule) {
      const auto& points = r["rules"][rule]["points"];
      double sum = 0;
      for (std::size_t i = 1; i < points.size(); ++i) sum += points[i]["accuracy"].get<double>();
      return sum / static_cast<double>(points.size() - 1);
    };
    random += mean_after_picks(0) / kSeeds;
    diverse += mean_after_picks(1) / kSeeds;
  }
  INFO("mean test accuracy after picks: random " << random << ", diverse " << diverse);
  // Margin: 0.01 accuracy (our requirement, no source). Measured on x86-64 (AVX-512 kernels):
  // random 0.7154, diverse 0.7344, a margin of 0.0190 (README, "Which texts to label next").
  CHECK(diverse >= random + 0.01);
}
