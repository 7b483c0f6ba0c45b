// gyre hone: search training settings on dev within a budget of trials or minutes, by Hyperband
// (successive halving in brackets; gyre/train/hone.hpp), and write the winner as an ordinary run
// directory.

#include <cstdio>
#include <memory>
#include <set>
#include <string>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/train_settings.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/hone.hpp"
#include "gyre/train/process_group.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct HoneCliOptions {
  std::string config_path, out;
  int trials = 0;
  double minutes = 0.0;
  int epoch_cap = 9;
  int keep_one_in = 3;
  int rows = 15;
  bool quiet = false;
  std::shared_ptr<TrainSettingValues> given = std::make_shared<TrainSettingValues>();
};

ExitCode run_hone_cli(const HoneCliOptions& o) {
  std::string out_from_file;
  const json j = merge_train_settings(o.config_path, *o.given, &out_from_file);
  train::HoneSpec spec;
  spec.out = o.out.empty() ? out_from_file : o.out;
  if (spec.out.empty()) throw ConfigError("out", "give the output directory with --out DIR");
  spec.base = train::config_from_json(j);
  // Settings the user gave (flags or --config) are held fixed; the rest of the space is searched.
  std::set<std::string> fixed;
  for (const auto& [key, value] : o.given->given.items()) fixed.insert(key);
  if (!o.config_path.empty())
    for (const auto& [key, value] : train::read_settings_file(o.config_path).items()) fixed.insert(key);
  for (const auto& d : train::default_hone_space())
    if (!fixed.count(d.key)) spec.space.push_back(d);
  spec.max_epochs = o.epoch_cap;
  spec.eta = o.keep_one_in;
  spec.max_trials = o.trials;
  spec.max_minutes = o.minutes;
  spec.progress = o.quiet ? nullptr : stderr;
  const bool rank0 = train::process_group().rank() == 0;  // under mpirun, rank 0 speaks for the job
  if (!o.quiet && rank0) {
    std::string searched;
    for (const auto& d : spec.space) searched += (searched.empty() ? "" : ", ") + d.key;
    std::fprintf(stderr,
                 "gyre hone: searching %s and epochs (up to %d, keeping one in %d per rung) into %s\n",
                 searched.empty() ? "nothing but" : searched.c_str(), spec.max_epochs, spec.eta,
                 spec.out.string().c_str());
  }
  const train::HoneResult result = train::run_hone(spec);
  if (result.interrupted) {
    if (!rank0) return ExitCode::kInterrupted;
    std::fprintf(stderr,
                 "gyre hone: interrupted; the search is saved in %s; repeat the same command to continue\n",
                 (spec.out / "hone-state.json").string().c_str());
    return ExitCode::kInterrupted;
  }
  if (!rank0) return ExitCode::kOk;
  std::printf("%s", train::hone_table(result, static_cast<std::size_t>(o.rows)).c_str());
  if (result.budget_exhausted) std::printf("the minute budget ended the search\n");
  if (!result.best) {
    std::printf("no trial finished a rung within the budget\n");
    return ExitCode::kFailure;
  }
  const auto& best = result.trials[static_cast<std::size_t>(*result.best)];
  std::printf("\n%-22s trial %d, %d epoch(s), dev %s %.4f (network alone %.4f)\n", "best", best.id,
              best.epochs, result.metric.c_str(), best.score, best.network_score);
  if (result.baseline.is_object() && result.baseline.contains("dev") &&
      result.baseline["dev"].contains(result.metric))
    std::printf("%-22s dev %s %.4f (%s)\n", "linear baseline", result.metric.c_str(),
                result.baseline["dev"][result.metric].get<double>(),
                result.baseline["name"].get<std::string>().c_str());
  std::printf("%-22s %.1f s\n", "search time", result.seconds);
  std::printf("%-22s %s  (gyre eval / predict / export take it)\n", "best run",
              (spec.out / "best").string().c_str());
  std::printf("%-22s %s\n", "every trial", (spec.out / "hone.json").string().c_str());
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "hone", "Search training settings on dev within a budget (Hyperband); the best becomes a run", 65,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<HoneCliOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre hone --train corpora/demo/intents.train.tsv --dev corpora/demo/intents.dev.tsv \\\n"
          "            --trials 17 --out runs/intents-hone\n"
          "  gyre hone --train t.tsv --dev d.tsv --minutes 30 --epoch-cap 27 --cell gru --out hone\n"
          "Searched: learning rate, hidden and embedding size, dropout, pooling, the character\n"
          "encoder on/off, and epochs (the resource: a trial trains 1..cap epochs). A setting given as\n"
          "an option or in --config is held fixed instead. Hyperband (Li et al. 2017) plays brackets of "
          "successive halving: many trials\n"
          "for few epochs, keep the best one in --keep-one-in, train those longer, until the cap. Trials\n"
          "are chosen on dev only; all use --seed for training, and the settings are drawn from --seed\n"
          "too, so the same command gives the same search. Ctrl-C saves OUT/hone-state.json; the same\n"
          "command continues. OUT/trials/t<N>/ hold the trials, OUT/hone.json every number, OUT/best/\n"
          "the winner as an ordinary run directory (gyre eval, predict, export). Exit codes: 0 done,\n"
          "1 runtime failure, 2 bad settings or input, 3 interrupted (rerun to continue).");
      sub.add_option("--out", o->out, "output directory (created; rerun with the same one to continue)");
      sub.add_option("--trials", o->trials, "settings to try in all (0 = no limit; give this or --minutes)")
          ->default_str("0")
          ->check(CLI::Range(0, 1000000));
      sub.add_option("--minutes", o->minutes,
                     "wall-clock budget over all sessions; no new rung starts after it (0 = no limit)")
          ->default_str("0")
          ->check(CLI::Range(0.0, 1e7));
      sub.add_option("--epoch-cap", o->epoch_cap, "most epochs a trial gets (the last rung)")
          ->default_str("9")
          ->check(CLI::Range(1, 100000));
      sub.add_option("--keep-one-in", o->keep_one_in, "trials kept per rung: the best one in this many")
          ->default_str("3")
          ->check(CLI::Range(2, 1000));
      sub.add_option("--rows", o->rows, "rows of the printed table (all are in hone.json)")
          ->default_str("15")
          ->check(CLI::Range(1, 1000000));
      sub.add_option("--config", o->config_path, "JSON file of fixed training settings (gyre train keys)");
      sub.add_flag("--quiet", o->quiet, "no progress lines");
      add_train_setting_options(sub, o->given, {"epochs"});
      return [o] { return run_hone_cli(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
