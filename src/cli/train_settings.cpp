#include "cli/train_settings.hpp"

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/train/config.hpp"

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

}  // namespace

std::string flag_name(const std::string& key) {
  std::string out = key;
  for (char& c : out)
    if (c == '_') c = '-';
  return out;
}

json parse_setting_value(const std::string& key, const std::string& text, const json& default_value) {
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

void add_train_setting_options(CLI::App& sub, const std::shared_ptr<TrainSettingValues>& into,
                               const std::set<std::string>& skip) {
  const json defaults = train::default_config_json();
  for (const auto& [key, value] : defaults.items()) {
    if (skip.count(key)) continue;
    const std::string help = help_texts().count(key) ? help_texts().at(key) : key;
    if (key == "bidirectional") {
      sub.add_flag_callback(
          "--bidirectional", [into] { into->flags["bidirectional"] = true; },
          "bidirectional recurrent layers (default: yes for taggers, no for classifiers)");
      sub.add_flag_callback(
          "--unidirectional", [into] { into->flags["bidirectional"] = false; },
          "unidirectional recurrent layers");
    } else if (value.is_boolean()) {
      const bool default_on = value.get<bool>();
      const std::string name = default_on ? "--no-" + flag_name(key) : "--" + flag_name(key);
      const std::string k = key;
      sub.add_flag_callback(
          name, [into, k, default_on] { into->flags[k] = !default_on; },
          default_on ? "turn off: " + help : help);
    } else {
      const std::string k = key;
      const std::string shown = value.is_string() ? value.get<std::string>() : value.dump();
      auto* opt = sub.add_option_function<std::string>(
          "--" + flag_name(key), [into, k](const std::string& text) { into->values[k] = text; }, help);
      if (!shown.empty()) opt->default_str(shown);
      opt->type_name(value.is_string() ? "TEXT" : value.is_number_integer() ? "INT" : "NUMBER");
    }
  }
}

json merge_train_settings(const std::string& config_path, const TrainSettingValues& given,
                          std::string* out_from_file) {
  const json defaults = train::default_config_json();
  json j = defaults;
  if (!config_path.empty()) {
    json file;
    try {
      file = json::parse(read_file(config_path));
    } catch (const json::parse_error& e) {
      throw ParseError(config_path, 0, std::string("not valid JSON: ") + e.what());
    }
    if (!file.is_object()) throw ParseError(config_path, 0, "expected a JSON object of settings");
    for (const auto& [key, value] : file.items()) {
      if (key == "out") {
        if (out_from_file != nullptr && value.is_string()) *out_from_file = value.get<std::string>();
        continue;
      }
      j[key] = value;
    }
  }
  for (const auto& [key, text] : given.values) j[key] = parse_setting_value(key, text, defaults.at(key));
  for (const auto& [key, value] : given.flags)
    j[key] = key == "bidirectional" ? json(value ? "yes" : "no") : json(value);
  return j;
}

}  // namespace gyre::cli
