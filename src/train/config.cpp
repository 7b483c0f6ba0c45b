#include "gyre/train/config.hpp"

#include <nlohmann/json.hpp>

#include <initializer_list>
#include <set>

#include "gyre/core/error.hpp"

namespace gyre::train {
namespace {

using nlohmann::json;

// One table drives to_json, from_json and the unknown-key check.
template <typename F>
void for_each_field(TrainConfig& c, F&& f) {
  f("train", c.train);
  f("dev", c.dev);
  f("task", c.task);
  f("dev_fraction", c.dev_fraction);
  f("skip_bad_lines", c.skip_bad_lines);
  f("repair_tags", c.repair_tags);
  f("tokenizer", c.tokenizer);
  f("nfkc", c.nfkc);
  f("case_fold", c.case_fold);
  f("fold_digits", c.fold_digits);
  f("keep_punctuation", c.keep_punctuation);
  f("max_tokens", c.max_tokens);
  f("min_count", c.min_count);
  f("max_vocab_size", c.max_vocab_size);
  f("cell", c.cell);
  f("embedding_size", c.embedding_size);
  f("hidden_size", c.hidden_size);
  f("layers", c.layers);
  f("bidirectional", c.bidirectional);
  f("pooling", c.pooling);
  f("output", c.output);
  f("dropout", c.dropout);
  f("embedding_dropout", c.embedding_dropout);
  f("pretrained_embeddings", c.pretrained_embeddings);
  f("freeze_embeddings", c.freeze_embeddings);
  f("optimizer", c.optimizer);
  f("learning_rate", c.learning_rate);
  f("momentum", c.momentum);
  f("nesterov", c.nesterov);
  f("weight_decay", c.weight_decay);
  f("schedule", c.schedule);
  f("warmup_steps", c.warmup_steps);
  f("clip_norm", c.clip_norm);
  f("label_smoothing", c.label_smoothing);
  f("class_weights", c.class_weights);
  f("batch_size", c.batch_size);
  f("epochs", c.epochs);
  f("patience", c.patience);
  f("early_stop_metric", c.early_stop_metric);
  f("bptt_window", c.bptt_window);
  f("max_length", c.max_length);
  f("seed", c.seed);
  f("threads", c.threads);
}

template <typename T>
void read_value(const json& j, const char* key, T& out) {
  const json& v = j.at(key);
  if constexpr (std::is_same_v<T, bool>) {
    if (!v.is_boolean()) throw ConfigError(key, "expected true or false, got " + v.dump());
    out = v.get<bool>();
  } else if constexpr (std::is_same_v<T, std::string>) {
    if (!v.is_string()) throw ConfigError(key, "expected a string, got " + v.dump());
    out = v.get<std::string>();
  } else if constexpr (std::is_integral_v<T>) {
    if (!v.is_number_integer()) throw ConfigError(key, "expected an integer, got " + v.dump());
    if constexpr (std::is_unsigned_v<T>) {
      if (v.is_number_unsigned() || v.get<long long>() >= 0) {
        out = v.get<T>();
      } else {
        throw ConfigError(key, "must not be negative");
      }
    } else {
      out = v.get<T>();
    }
  } else {
    if (!v.is_number()) throw ConfigError(key, "expected a number, got " + v.dump());
    out = v.get<T>();
  }
}

void require_one_of(const char* key, const std::string& value, std::initializer_list<const char*> allowed) {
  std::string list;
  for (const char* a : allowed) {
    if (value == a) return;
    list += list.empty() ? "" : ", ";
    list += a;
  }
  throw ConfigError(key, "'" + value + "' is not one of: " + list);
}

}  // namespace

json config_to_json(const TrainConfig& config) {
  json j = json::object();
  TrainConfig copy = config;
  for_each_field(copy, [&](const char* key, auto& value) { j[key] = value; });
  return j;
}

json default_config_json() {
  return config_to_json(TrainConfig{});
}

TrainConfig config_from_json(const json& j) {
  if (!j.is_object()) throw ConfigError("config", "expected a JSON object");
  TrainConfig c;
  std::set<std::string> known;
  for_each_field(c, [&](const char* key, auto& value) {
    known.insert(key);
    if (j.contains(key) && !j.at(key).is_null()) read_value(j, key, value);
  });
  for (const auto& [key, value] : j.items()) {
    if (!known.count(key))
      throw ConfigError(key, "unknown setting (check the spelling; see `gyre train --help`)");
  }
  return c;
}

void validate(const TrainConfig& c) {
  if (c.train.empty()) throw ConfigError("train", "a training file is required");
  require_one_of("task", c.task, {"auto", "classify", "tag"});
  if (!(c.dev_fraction > 0.0 && c.dev_fraction < 1.0)) throw ConfigError("dev_fraction", "must be in (0, 1)");
  require_one_of("tokenizer", c.tokenizer, {"words", "chars", "whitespace"});
  if (c.max_tokens < 0) throw ConfigError("max_tokens", "must be >= 0");
  if (c.min_count < 1) throw ConfigError("min_count", "must be >= 1");
  if (c.max_vocab_size != 0 && c.max_vocab_size < 3)
    throw ConfigError("max_vocab_size", "must be 0 (no limit) or >= 3");
  require_one_of("cell", c.cell, {"lstm", "gru"});
  if (c.embedding_size < 1) throw ConfigError("embedding_size", "must be >= 1");
  if (c.hidden_size < 1) throw ConfigError("hidden_size", "must be >= 1");
  if (c.layers < 1) throw ConfigError("layers", "must be >= 1");
  require_one_of("bidirectional", c.bidirectional, {"auto", "yes", "no"});
  require_one_of("pooling", c.pooling, {"last", "mean", "max"});
  require_one_of("output", c.output, {"auto", "softmax", "sigmoid", "crf"});
  if (!(c.dropout >= 0.0 && c.dropout < 1.0)) throw ConfigError("dropout", "must be in [0, 1)");
  if (!(c.embedding_dropout >= 0.0 && c.embedding_dropout < 1.0))
    throw ConfigError("embedding_dropout", "must be in [0, 1)");
  require_one_of("optimizer", c.optimizer, {"sgd", "adam", "adamw"});
  if (!(c.learning_rate > 0.0)) throw ConfigError("learning_rate", "must be > 0");
  if (!(c.momentum >= 0.0 && c.momentum < 1.0)) throw ConfigError("momentum", "must be in [0, 1)");
  if (!(c.weight_decay >= 0.0)) throw ConfigError("weight_decay", "must be >= 0");
  require_one_of("schedule", c.schedule, {"constant", "linear", "cosine", "plateau"});
  if (c.warmup_steps < 0) throw ConfigError("warmup_steps", "must be >= 0");
  if (!(c.clip_norm >= 0.0)) throw ConfigError("clip_norm", "must be >= 0 (0 turns clipping off)");
  if (!(c.label_smoothing >= 0.0 && c.label_smoothing < 1.0))
    throw ConfigError("label_smoothing", "must be in [0, 1)");
  require_one_of("class_weights", c.class_weights, {"none", "balanced"});
  if (c.batch_size < 1) throw ConfigError("batch_size", "must be >= 1");
  if (c.epochs < 1) throw ConfigError("epochs", "must be >= 1");
  if (c.patience < 0) throw ConfigError("patience", "must be >= 0");
  require_one_of("early_stop_metric", c.early_stop_metric,
                 {"auto", "accuracy", "macro_f1", "loss", "span_f1"});
  if (c.bptt_window < 0) throw ConfigError("bptt_window", "must be >= 0");
  if (c.max_length < 0) throw ConfigError("max_length", "must be >= 0");
  if (c.bptt_window > 0 && c.max_length > 0 && c.bptt_window > c.max_length)
    throw ConfigError("bptt_window", "window (" + std::to_string(c.bptt_window) +
                                         ") is longer than max_length (" + std::to_string(c.max_length) +
                                         "): no example would ever be cut");
  if (c.bptt_window > 0 && c.bidirectional == "yes")
    throw ConfigError("bptt_window",
                      "truncated BPTT needs a unidirectional model (the backward direction would "
                      "only ever see one window); drop --bidirectional or --bptt-window");
  if (c.bptt_window > 0 && c.pooling != "last" && c.task == "classify")
    throw ConfigError("bptt_window",
                      "a classifier trained with truncated BPTT must pool the last state "
                      "(--pooling last): mean/max pooling would span windows the gradient cannot reach");
  if (c.threads < 1 || c.threads > 256) throw ConfigError("threads", "must be in 1..256");
}

}  // namespace gyre::train
