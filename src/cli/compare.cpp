// gyre compare: train every (cell, hidden size) over several seeds on the same data and splits,
// score all runs on the same dev (and test) examples, and print the evidence: a verdict on the best
// LSTM against the best GRU configuration, then mean ± sample std per configuration.

#include <cstdio>
#include <map>
#include <memory>
#include <sstream>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/train_settings.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/report/html_report.hpp"
#include "gyre/train/compare.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/process_group.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct CompareCliOptions {
  std::string train, dev, test, config_path, out;
  std::string cells = "lstm,gru";
  std::string hidden_sizes = "64,128";
  int seeds = 3;
  int bootstrap_samples = 2000;
  bool quiet = false;
  std::shared_ptr<TrainSettingValues> given =
      std::make_shared<TrainSettingValues>();  // pass-through settings
};

std::vector<std::string> split_list(const std::string& text, const char* setting) {
  std::vector<std::string> out;
  std::stringstream in(text);
  std::string item;
  while (std::getline(in, item, ',')) {
    const auto a = item.find_first_not_of(" \t"), b = item.find_last_not_of(" \t");
    if (a == std::string::npos) throw ConfigError(setting, "empty item in '" + text + "'");
    out.push_back(item.substr(a, b - a + 1));
  }
  if (out.empty()) throw ConfigError(setting, "give a comma-separated list");
  return out;
}

ExitCode run_compare_cli(const CompareCliOptions& o) {
  json j = merge_train_settings(o.config_path, *o.given);  // compare has its own --out
  if (!o.train.empty()) j["train"] = o.train;
  if (!o.dev.empty()) j["dev"] = o.dev;
  // compare weighs recurrent cells against each other: an n-gram part (train's default for
  // single-label classifiers) would add the same linear model's scores to every cell and blur the
  // difference, so it is off unless the settings ask for it.
  if (!j.contains("ngram_part")) j["ngram_part"] = "off";

  train::CompareSpec spec;
  spec.base = train::config_from_json(j);
  spec.cells = split_list(o.cells, "cells");
  spec.hidden_sizes.clear();
  for (const auto& s : split_list(o.hidden_sizes, "hidden_sizes")) {
    const json v = parse_setting_value("hidden_sizes", s, json(1));
    spec.hidden_sizes.push_back(static_cast<int>(v.get<long long>()));
  }
  spec.seeds = o.seeds;
  spec.test = o.test;
  spec.metric = j.at("metric").get<std::string>();  // the training setting: runs stop on what ranks them
  spec.out = o.out;
  spec.bootstrap_samples = o.bootstrap_samples;
  spec.progress = o.quiet ? nullptr : stderr;
  spec.messages = stderr;  // a retrained run is news even with --quiet
  if (!o.quiet && train::process_group().rank() == 0)
    std::fprintf(stderr, "gyre compare: %zu cell(s) x %zu size(s) x %d seed(s) = %zu runs into %s\n",
                 spec.cells.size(), spec.hidden_sizes.size(), spec.seeds,
                 spec.cells.size() * spec.hidden_sizes.size() * std::size_t(spec.seeds),
                 spec.out.string().c_str());
  const train::CompareResult result = train::run_compare(spec);
  if (train::process_group().rank() != 0) return ExitCode::kOk;  // rank 0 prints the one table
  std::printf("%s\n%s", train::compare_verdict(result).c_str(),
              train::compare_table(result, !spec.test.empty()).c_str());
  const auto report = report::write_report(spec.out);
  std::printf("\nevery number: %s\nreport:       %s\n", (spec.out / "compare.json").string().c_str(),
              report.string().c_str());
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "compare", "Train LSTM/GRU configs over several seeds on the same data; table, significance, report", 60,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<CompareCliOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre compare --train corpora/demo/intents.train.tsv --dev corpora/demo/intents.dev.tsv \\\n"
          "               --test corpora/demo/intents.test.tsv --out runs/intents-compare\n"
          "  gyre compare --train t.tsv --dev d.tsv --cells gru --hidden-sizes 32,64,128 --seeds 5 --epochs "
          "5 --out cmp\n"
          "Runs go to OUT/<cell>-h<size>-s<seed>/ (seeds 1..N), every number to OUT/compare.json, the HTML\n"
          "report to OUT/report.html. A finished run is reused only when every training setting, the\n"
          "contents of the train, dev and test files and the gyre version match what it was trained\n"
          "from; otherwise it is retrained and a line names what differs. Rerunning after adding a size\n"
          "or a seed trains only the new runs.\n"
          "The verdict compares the best LSTM configuration with the best GRU configuration (each chosen by\n"
          "mean dev score) on the test set (dev without --test: optimistic), using every seed: a 95% "
          "interval\n"
          "of the difference from a two-level bootstrap (runs, then examples), a permutation test over the\n"
          "per-seed scores, and per-seed McNemar tests as detail. Any `gyre train` setting may be given\n"
          "(see its --help).");
      sub.add_option("--train", o->train, "labelled training file")->required();
      sub.add_option("--dev", o->dev, "labelled dev file (every run is scored and chosen on it)")->required();
      sub.add_option("--test", o->test, "labelled held-out test file (scored only)");
      sub.add_option("--out", o->out, "output directory (created; finished runs inside are reused)")
          ->required();
      sub.add_option("--cells", o->cells, "comma-separated cells to compare")->default_str("lstm,gru");
      sub.add_option("--hidden-sizes", o->hidden_sizes, "comma-separated hidden sizes")
          ->default_str("64,128");
      sub.add_option("--seeds", o->seeds, "seeds per configuration (1..N)")
          ->default_str("3")
          ->check(CLI::Range(1, 1000));
      sub.add_option("--bootstrap-samples", o->bootstrap_samples, "two-level bootstrap resamples")
          ->default_str("2000")
          ->check(CLI::Range(1, 1000000));
      sub.add_option("--config", o->config_path, "JSON file of shared training settings (gyre train keys)");
      sub.add_flag("--quiet", o->quiet, "no progress lines");
      add_train_setting_options(sub, o->given, {"train", "dev", "cell", "hidden_size", "seed"});
      return [o] { return run_compare_cli(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
