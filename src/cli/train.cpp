// gyre train: the main job. Every setting is a long option and a JSON config key (same name with
// '_' for '-'); flags win over --config, which wins over the defaults.

#include <cstdio>
#include <map>
#include <memory>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/trainer.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

// Help text per config key; the key order of default_config_json() decides the --help order.
const std::map<std::string, std::string>& help_texts() {
  static const std::map<std::string, std::string> texts{
      {"train", "labelled training file (TSV label<TAB>text, JSON Lines, or token<TAB>tag columns)"},
      {"dev", "labelled dev file for evaluation after each epoch (default: split off the training file)"},
      {"task", "auto | classify | tag (auto: from the file format)"},
      {"dev_fraction", "share of the training file held out as dev when no --dev is given"},
      {"skip_bad_lines", "skip malformed records (reported with line numbers) instead of stopping"},
      {"repair_tags", "repair invalid BIO/BIOES transitions in tagging data instead of stopping"},
      {"tokenizer", "words (Unicode word boundaries) | chars (grapheme clusters) | whitespace"},
      {"nfkc", "Unicode NFKC normalization"},
      {"case_fold", "Unicode full case folding"},
      {"fold_digits", "map every digit to 0"},
      {"keep_punctuation", "keep punctuation tokens"},
      {"max_tokens", "keep at most this many tokens per text when tokenizing (0 = all)"},
      {"min_count", "tokens seen fewer times in training become <unk>"},
      {"max_vocab_size", "vocabulary size cap including <pad> and <unk> (0 = no cap)"},
      {"cell", "lstm | gru"},
      {"embedding_size", "token embedding width"},
      {"hidden_size", "recurrent state width per direction"},
      {"layers", "stacked recurrent layers"},
      {"bidirectional", "auto | yes | no (auto: yes for taggers, no for classifiers)"},
      {"pooling", "classifiers: last | mean | max over the recurrent states"},
      {"output", "auto | softmax | sigmoid (multi-label) | crf (taggers)"},
      {"dropout", "dropout between recurrent layers and before the output layer"},
      {"embedding_dropout", "dropout on token embeddings"},
      {"pretrained_embeddings", "text file of vectors, one 'token v1 v2 ...' per line"},
      {"freeze_embeddings", "do not train the embeddings"},
      {"optimizer", "sgd | adam | adamw"},
      {"learning_rate", "peak learning rate"},
      {"momentum", "SGD momentum"},
      {"nesterov", "SGD with Nesterov momentum"},
      {"weight_decay", "L2 penalty (sgd, adam) or decoupled decay (adamw)"},
      {"schedule", "constant | linear | cosine | plateau"},
      {"warmup_steps", "linear learning-rate warm-up steps"},
      {"clip_norm", "clip the global gradient norm to this value (0 = off)"},
      {"label_smoothing", "label smoothing for softmax outputs"},
      {"class_weights", "none | balanced (weights inversely proportional to label frequency)"},
      {"batch_size", "examples per optimizer step"},
      {"epochs", "maximum passes over the training data"},
      {"patience", "stop after this many epochs without dev improvement (0 = never)"},
      {"early_stop_metric", "auto | accuracy | macro_f1 | loss | span_f1"},
      {"bptt_window", "truncated backpropagation through time window in tokens (0 = full)"},
      {"max_length", "cut training examples to this many tokens (0 = keep all)"},
      {"seed", "random seed (same seed + same --threads = identical weights)"},
      {"threads", "data-parallel worker threads"},
  };
  return texts;
}

std::string flag_name(const std::string& key) {
  std::string out = key;
  for (char& c : out)
    if (c == '_') c = '-';
  return out;
}

struct TrainCliOptions {
  std::string config_path;
  std::string out;
  std::string resume;
  bool quiet = false;
  std::map<std::string, std::string> values;  // key -> text given on the command line
  std::map<std::string, bool> flags;          // key -> value set by a boolean flag
};

json parse_value(const std::string& key, const std::string& text, const json& default_value) {
  try {
    std::size_t used = 0;
    if (default_value.is_number_unsigned()) {
      if (!text.empty() && text[0] == '-') throw ConfigError(key, "must not be negative");
      const auto v = std::stoull(text, &used);
      if (used == text.size()) return v;
    } else if (default_value.is_number_integer()) {
      const auto v = std::stoll(text, &used);
      if (used == text.size()) return v;
    } else if (default_value.is_number()) {
      const auto v = std::stod(text, &used);
      if (used == text.size()) return v;
    } else {
      return text;
    }
  } catch (const std::logic_error&) {
  }
  throw ConfigError(key, "'" + text + "' is not a valid " +
                             std::string(default_value.is_number_integer() ? "integer" : "number"));
}

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
  std::printf("%-22s %.1f s\n", "training time", r.seconds);
  std::printf("%-22s %.0f\n", "tokens/s", r.tokens_per_second);
  std::printf("%-22s %.1f MiB\n", "peak memory (RSS)",
              static_cast<double>(r.peak_rss_bytes) / (1024.0 * 1024.0));
  std::printf("%-22s %s/checkpoint-best.bin\n", "best model", dir.c_str());
}

ExitCode run_train(const TrainCliOptions& o) {
  train::TrainOptions options;
  options.quiet = o.quiet;
  train::TrainResult result;
  if (!o.resume.empty()) {
    if (!o.values.empty() || !o.flags.empty() || !o.config_path.empty())
      throw ConfigError(
          "resume", "--resume continues with the run's saved config.json; other settings are not allowed");
    options.out = o.resume;
    result = train::resume(options);
  } else {
    json j = train::default_config_json();
    if (!o.config_path.empty()) {
      json file;
      try {
        file = json::parse(read_file(o.config_path));
      } catch (const json::parse_error& e) {
        throw ParseError(o.config_path, 0, std::string("not valid JSON: ") + e.what());
      }
      if (!file.is_object()) throw ParseError(o.config_path, 0, "expected a JSON object of settings");
      for (const auto& [key, value] : file.items()) j[key] = value;
      if (j.contains("out")) {
        if (o.out.empty() && j["out"].is_string()) options.out = j["out"].get<std::string>();
        j.erase("out");
      }
    }
    const json defaults = train::default_config_json();
    for (const auto& [key, text] : o.values) j[key] = parse_value(key, text, defaults.at(key));
    for (const auto& [key, value] : o.flags) {
      if (key == "bidirectional") {
        j[key] = value ? "yes" : "no";
      } else {
        j[key] = value;
      }
    }
    if (!o.out.empty()) options.out = o.out;
    if (options.out.empty()) throw ConfigError("out", "give the run directory with --out DIR");
    result = train::train(train::config_from_json(j), options);
  }
  if (result.outcome == train::TrainOutcome::kInterrupted) return ExitCode::kInterrupted;
  print_summary(result, options.out.string());
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
          "Every option is also a key of the --config JSON file (with '_' for '-'); flags win.\n"
          "Exit codes: 0 done, 1 runtime failure (e.g. diverged), 2 bad settings or input, 3 interrupted "
          "(resumable).");
      sub.add_option("--config", o->config_path, "JSON file of settings (keys as the options below)");
      sub.add_option("--out", o->out, "run directory to create (must not exist or be empty)");
      sub.add_option("--resume", o->resume, "continue the interrupted run in this directory");
      sub.add_flag("--quiet", o->quiet, "no progress output");
      const json defaults = train::default_config_json();
      for (const auto& [key, value] : defaults.items()) {
        const std::string help = help_texts().count(key) ? help_texts().at(key) : key;
        if (key == "bidirectional") {
          sub.add_flag_callback(
              "--bidirectional", [o] { o->flags["bidirectional"] = true; },
              "bidirectional recurrent layers (default: yes for taggers, no for classifiers)");
          sub.add_flag_callback(
              "--unidirectional", [o] { o->flags["bidirectional"] = false; },
              "unidirectional recurrent layers");
        } else if (value.is_boolean()) {
          const bool default_on = value.get<bool>();
          const std::string name = default_on ? "--no-" + flag_name(key) : "--" + flag_name(key);
          const std::string k = key;
          sub.add_flag_callback(
              name, [o, k, default_on] { o->flags[k] = !default_on; },
              default_on ? "turn off: " + help : help);
        } else {
          const std::string k = key;
          std::string shown = value.is_string() ? value.get<std::string>() : value.dump();
          auto* opt = sub.add_option_function<std::string>(
              "--" + flag_name(key), [o, k](const std::string& text) { o->values[k] = text; }, help);
          if (!shown.empty()) opt->default_str(shown);
          opt->type_name(value.is_string() ? "TEXT" : value.is_number_integer() ? "INT" : "NUMBER");
        }
      }
      return [o] { return run_train(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
