// gyre pick-trial: simulate labelling rounds on a labelled corpus to see whether `gyre pick`'s
// rules beat random choice (gyre/train/labelling_trial.hpp); `gyre report DIR` draws the result.

#include <algorithm>
#include <cstdio>
#include <memory>
#include <string>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/train_settings.hpp"
#include "gyre/core/error.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/labelling_trial.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct TrialCliOptions {
  std::string config_path;
  std::string out;
  std::string test;
  std::string rules = "random,uncertain,diverse";
  std::string measure = "margin";
  double start = 0.10;
  double step = 0.05;
  int rounds = 4;
  std::uint64_t trial_seed = 1;
  bool quiet = false;
  std::shared_ptr<TrainSettingValues> given = std::make_shared<TrainSettingValues>();
};

ExitCode run_trial(const TrialCliOptions& o) {
  train::TrialOptions t;
  std::string out_from_file;
  t.config = train::config_from_json(merge_train_settings(o.config_path, *o.given, &out_from_file));
  t.out = o.out.empty() ? out_from_file : o.out;
  if (t.out.empty()) throw ConfigError("out", "give the trial directory with --out DIR");
  t.test = o.test;
  t.start_fraction = o.start;
  t.step_fraction = o.step;
  t.rounds = o.rounds;
  t.seed = o.trial_seed;
  t.quiet = o.quiet;
  t.measure = train::uncertainty_from_string(o.measure);
  t.rules.clear();
  std::size_t begin = 0;
  while (begin <= o.rules.size()) {
    const std::size_t comma = std::min(o.rules.find(',', begin), o.rules.size());
    t.rules.push_back(train::pick_rule_from_string(o.rules.substr(begin, comma - begin)));
    begin = comma + 1;
  }
  const json r = train::labelling_trial(t);
  std::printf("test accuracy by labelled examples (%s, %zu examples in the pool file)\n", o.test.c_str(),
              r["examples"].get<std::size_t>());
  std::printf("%-10s", "labelled");
  for (const auto& p : r["rules"][0]["points"]) std::printf("%9zu", p["labelled"].get<std::size_t>());
  std::printf("\n");
  for (const auto& rule : r["rules"]) {
    std::printf("%-10s", rule["rule"].get<std::string>().c_str());
    for (const auto& p : rule["points"]) std::printf("%9.4f", p["accuracy"].get<double>());
    std::printf("\n");
  }
  std::printf("written: %s/labelling.json (gyre report %s draws it)\n", t.out.string().c_str(),
              t.out.string().c_str());
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "pick-trial", "Simulate labelling rounds: does gyre pick beat random choice?", 46,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<TrialCliOptions>();
      sub.footer(
          "Example:\n"
          "  gyre pick-trial --train corpora/demo/intents.train.tsv --dev corpora/demo/intents.dev.tsv \\\n"
          "      --test corpora/demo/intents.test.tsv --out trials/intents --epochs 8\n"
          "The training file plays the unlabelled pool: a random --start share is labelled first, then each\n"
          "rule adds --step of it per round (labels revealed), retraining each time with the settings "
          "below.");
      sub.add_option("--config", o->config_path, "JSON file of training settings");
      sub.add_option("--out", o->out, "trial directory to create (must not exist or be empty)");
      sub.add_option("--test", o->test, "labelled file the accuracy is measured on")->required();
      sub.add_option("--rules", o->rules, "comma-separated rules to compare: random, uncertain, diverse")
          ->default_str("random,uncertain,diverse");
      sub.add_option("--uncertainty", o->measure, "margin | entropy")
          ->check(CLI::IsMember({"margin", "entropy"}))
          ->default_str("margin");
      sub.add_option("--start", o->start, "share of the training file labelled at first")->default_str("0.1");
      sub.add_option("--step", o->step, "share added per round")->default_str("0.05");
      sub.add_option("--rounds", o->rounds, "rounds of picking")
          ->check(CLI::PositiveNumber)
          ->default_str("4");
      sub.add_option("--trial-seed", o->trial_seed, "seed of the first labelled share and of random picks")
          ->default_str("1");
      sub.add_flag("--quiet", o->quiet, "no progress output");
      add_train_setting_options(sub, o->given);
      return [o] { return run_trial(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
