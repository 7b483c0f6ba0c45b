// gyre train: the main job. Every setting is a long option and a JSON config key (same name with
// '_' for '-'); flags win over --config, which wins over the defaults.

#include <cstdio>
#include <map>
#include <memory>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/train_settings.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/process_group.hpp"
#include "gyre/train/trainer.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct TrainCliOptions {
  std::string config_path;
  std::string out;
  std::string resume;
  bool quiet = false;
  bool no_baseline = false;
  std::shared_ptr<TrainSettingValues> given = std::make_shared<TrainSettingValues>();
};

void print_summary(const train::TrainResult& r, const std::string& dir) {
  std::printf("\n%-22s %s\n", "run", dir.c_str());
  std::printf("%-22s %d%s\n", "epochs", r.epochs_completed,
              r.outcome == train::TrainOutcome::kEarlyStopped ? " (stopped early)" : "");
  std::printf("%-22s %d\n", "best epoch", r.best_epoch);
  if (r.final_metrics.contains("dev")) {
    const auto& dev = r.final_metrics["dev"];
    for (const char* key : {"accuracy", "loss"})
      if (dev.contains(key))
        std::printf("%-22s %.4f\n", (std::string("dev ") + key).c_str(), dev[key].get<double>());
    if (dev.contains("macro")) std::printf("%-22s %.4f\n", "dev macro F1", dev["macro"]["f1"].get<double>());
    if (dev.contains("token_accuracy"))
      std::printf("%-22s %.4f\n", "dev token accuracy", dev["token_accuracy"].get<double>());
    if (dev.contains("micro") && dev.value("task", "") == "tagging")
      std::printf("%-22s %.4f\n", "dev span F1", dev["micro"]["f1"].get<double>());
  }
  if (r.final_metrics.contains("baseline")) {
    // The linear baseline on the same split, so the recurrent model's score has a yardstick.
    const auto& base = r.final_metrics["baseline"];
    std::printf("%-22s %s\n", "linear baseline", base["name"].get<std::string>().c_str());
    for (const auto& [key, label] : {std::pair{"accuracy", "  dev accuracy"},
                                     {"macro_f1", "  dev macro F1"},
                                     {"token_accuracy", "  dev token accuracy"},
                                     {"span_f1", "  dev span F1"}})
      if (base["dev"].contains(key)) std::printf("%-22s %.4f\n", label, base["dev"][key].get<double>());
  }
  std::printf("%-22s %.1f s\n", "training time", r.seconds);
  std::printf("%-22s %.0f\n", "tokens/s", r.tokens_per_second);
  std::printf("%-22s %.1f MiB\n", "peak memory (RSS)",
              static_cast<double>(r.peak_rss_bytes) / (1024.0 * 1024.0));
  std::printf("%-22s %s/selected.bin\n", "best model", dir.c_str());
}

ExitCode run_train(const TrainCliOptions& o) {
  train::TrainOptions options;
  options.quiet = o.quiet;
  options.fit_baseline = !o.no_baseline;
  train::TrainResult result;
  if (!o.resume.empty()) {
    json given = o.given->given;
    if (given.contains("epochs")) {
      options.epochs = given["epochs"].get<int>();
      given.erase("epochs");
    }
    if (!given.empty() || !o.config_path.empty() || !o.out.empty())
      throw UsageError(
          "--resume continues with the run's saved config.json; of the settings only --epochs "
          "(a new total, to extend the run) may be given");
    options.out = o.resume;
    result = train::resume(options);
  } else {
    std::string out_from_file;
    const json j = merge_train_settings(o.config_path, *o.given, &out_from_file);
    options.out = out_from_file;
    if (!o.out.empty()) options.out = o.out;
    if (options.out.empty()) throw ConfigError("out", "give the run directory with --out DIR");
    result = train::train(train::config_from_json(j), options);
  }
  if (result.outcome == train::TrainOutcome::kInterrupted) return ExitCode::kInterrupted;
  if (train::process_group().rank() == 0) print_summary(result, options.out.string());  // once per job
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "train", "Train a classifier or tagger into a run directory", 20, [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<TrainCliOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre train --train corpora/demo/intents.train.tsv --dev corpora/demo/intents.dev.tsv --out "
          "runs/intents-lstm\n"
          "  gyre train --train corpora/demo/slots.train.tsv --output crf --out runs/slots-crf\n"
          "  gyre train --config run.json --cell gru --hidden-size 64 --out runs/gru64\n"
          "  gyre train --resume runs/intents-lstm        # continue an interrupted run\n"
          "  gyre train --resume runs/intents-lstm --epochs 30   # extend a run (finished too) to 30 epochs\n"
          "Every option is also a key of the --config JSON file (with '_' for '-'); flags win.\n"
          "Exit codes: 0 done, 1 runtime failure (e.g. diverged), 2 bad settings or input, 3 interrupted "
          "(resumable).");
      sub.add_option("--config", o->config_path, "JSON file of settings (keys as the options below)");
      sub.add_option("--out", o->out, "run directory to create (must not exist or be empty)");
      sub.add_option(
          "--resume", o->resume,
          "continue the interrupted run in this directory (with --epochs N: extend it to N epochs)");
      sub.add_flag("--quiet", o->quiet, "no progress output");
      sub.add_flag(
          "--no-baseline", o->no_baseline,
          "skip the linear baseline's report (by default fitted on the same split and shown beside the "
          "model; with --ngram-part auto the fit still runs, as the n-gram part)");
      add_train_setting_options(sub, o->given);
      return [o] { return run_train(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
