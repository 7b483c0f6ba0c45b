#pragma once
// Every setting of a training run. The JSON keys are the command-line option names with '_' for
// '-' (`--hidden-size` <-> "hidden_size"). The fully resolved config is written to
// RUN_DIR/config.json so a run can be repeated exactly.

#include <cstdint>
#include <string>

#include <nlohmann/json_fwd.hpp>

namespace gyre::train {

struct TrainConfig {
  // Data
  std::string train;            // labelled training file (required)
  std::string dev;              // optional; empty = split dev_fraction off the training file
  std::string task = "auto";    // auto | classify | tag  (auto: from the file format)
  double dev_fraction = 0.1;    // used when dev is empty; split by a hash of each example
  bool skip_bad_lines = false;  // report and skip malformed lines instead of failing
  bool repair_tags = false;     // fix invalid BIO/BIOES transitions in tagging data instead of failing
  // Tokenizer + vocabulary
  std::string tokenizer = "words";  // words | chars | whitespace
  bool nfkc = true;
  bool case_fold = true;
  bool fold_digits = false;
  bool keep_punctuation = true;
  int max_tokens = 0;          // per example at tokenization, 0 = no limit
  int min_count = 1;           // rarer tokens map to the unknown id
  int max_vocab_size = 50000;  // including the padding and unknown ids; 0 = no limit
  // Model
  std::string cell = "lstm";  // lstm | gru
  int embedding_size = 64;
  int hidden_size = 128;
  int layers = 1;
  std::string bidirectional = "auto";  // auto (yes for taggers, no for classifiers) | yes | no
  std::string pooling = "mean";        // last | mean | max (classifiers)
  std::string output = "auto";         // auto | softmax | sigmoid | crf
  double dropout = 0.2;                // between recurrent layers and before the head
  double embedding_dropout = 0.1;
  std::string pretrained_embeddings;  // text vector file, optional
  bool freeze_embeddings = false;
  // Optimisation
  std::string optimizer = "adam";  // sgd | adam | adamw
  double learning_rate = 2e-3;
  double momentum = 0.9;  // sgd
  bool nesterov = false;  // sgd
  double weight_decay = 0.0;
  std::string schedule = "constant";  // constant | linear | cosine | plateau
  int warmup_steps = 0;
  double clip_norm = 5.0;  // global gradient norm; 0 = off
  double label_smoothing = 0.0;
  std::string class_weights = "none";  // none | balanced
  int batch_size = 32;
  int epochs = 10;
  int patience = 3;  // epochs without dev improvement before stopping; 0 = never stop early
  std::string early_stop_metric = "auto";  // auto | accuracy | macro_f1 | loss | span_f1
  int bptt_window = 0;                     // truncated BPTT window in tokens; 0 = full BPTT
  int max_length = 0;                      // truncate examples to this many tokens; 0 = keep all
  // Machinery
  std::uint64_t seed = 1;
  int threads = 1;
};

/// Defaults, as JSON.
nlohmann::json default_config_json();
/// Reads a config object; unknown keys and wrong types throw ConfigError naming the key.
TrainConfig config_from_json(const nlohmann::json& j);
nlohmann::json config_to_json(const TrainConfig& c);
/// Checks ranges and combinations (hidden size 0, window vs max length ...); throws ConfigError
/// naming the setting.
void validate(const TrainConfig& c);

}  // namespace gyre::train
