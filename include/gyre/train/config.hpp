#pragma once
// Every setting of a training run, typed. The table train_settings() describes each field once
// (key, type, allowed values, default, help); from it come the JSON config, the command-line
// options of `gyre train`, `gyre compare` and `gyre vocab`, the range checks and the README's
// option table. The JSON keys are the option names with '_' for '-' (`--hidden-size` <->
// "hidden_size"). The fully resolved config is written to RUN_DIR/config.json so a run can be
// repeated exactly. "auto" settings are std::optional: empty until the data decides.

#include <cstdint>
#include <optional>
#include <string>

#include <nlohmann/json_fwd.hpp>

#include "gyre/data/reader.hpp"
#include "gyre/model/spec.hpp"
#include "gyre/optim/lr_schedule.hpp"
#include "gyre/optim/optimizer.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/settings.hpp"

namespace gyre::train {

enum class ClassWeights { kNone, kBalanced };
/// Whether a single-label classifier gets an n-gram part (gyre/runtime/ngram_part.hpp):
/// auto = fitted after training, kept when dev picks a mix > 0 (train/ngram_blend.hpp); off = never.
enum class NgramPartMode { kAuto, kOff };
/// "auto", "off".
const char* to_string(NgramPartMode m) noexcept;
/// "none", "balanced".
const char* to_string(ClassWeights w) noexcept;

struct TrainConfig {
  // Data
  std::string train;                   // labelled training file (required)
  std::string dev;                     // optional; empty = split dev_fraction off the training file
  std::optional<data::Task> task;      // empty: from the file format
  double dev_fraction = 0.1;           // used when dev is empty; split by a hash of each example
  bool skip_bad_lines = false;         // report and skip malformed lines instead of failing
  bool repair_tags = false;            // fix invalid BIO/BIOES transitions in tagging data instead of failing
  std::string text_column = "text";    // CSV header name / JSON Lines key of the text
  std::string label_column = "label";  // CSV header name / JSON Lines key of the label(s)
  // Tokenizer + vocabulary
  text::TokenizerMode tokenizer = text::TokenizerMode::kWords;
  bool nfkc = true;
  bool case_fold = true;
  bool fold_digits = false;
  bool keep_punctuation = true;
  int max_tokens = 1000;       // per example at tokenization (text::kDefaultMaxTokens), 0 = no limit
  int min_count = 1;           // rarer tokens map to the unknown id
  int max_vocab_size = 50000;  // including the padding and unknown ids; 0 = no limit
  std::string vocab;           // vocab.json from `gyre vocab`; empty = built from the training file
  // Model
  nn::CellType cell = nn::CellType::kLstm;
  int embedding_size = 64;
  int hidden_size = 128;
  int layers = 1;
  std::optional<bool> bidirectional;                 // empty: yes for taggers, no for classifiers
  nn::PoolingKind pooling = nn::PoolingKind::kMean;  // classifiers
  std::optional<model::OutputKind> output;           // empty: softmax, or sigmoid for multi-label data
  double multi_label_threshold = 0.5;                // sigmoid output: a label is chosen at p >= this
  /// Sigmoid output: after training, give each label the threshold with its best dev F1
  /// (eval::tune_label_thresholds; ties keep multi_label_threshold), stored in the model.
  bool tune_label_thresholds = true;
  double dropout = 0.2;  // between recurrent layers and before the head
  double embedding_dropout = 0.1;
  /// Single-label classifiers: the n-gram part blended into the logits (multi-label and taggers: none).
  NgramPartMode ngram_part = NgramPartMode::kAuto;
  /// Highest n-gram order of the linear baseline and the n-gram part; 0 = auto: 4 with the
  /// `chars` tokenizer, 2 otherwise (train::ngram_order_for).
  int ngram_order = 0;
  /// The linear fit (baseline and n-gram part) uses at most this many training examples and
  /// n-gram features (train::LinearFitCaps; README "N-gram part"); 0 = no cap.
  int linear_fit_examples = 100000;
  int linear_fit_features = 200000;
  /// Character encoder over each token's un-folded grapheme clusters (CNN, Ma & Hovy 2016);
  /// empty: decided by the task (see resolve_char_encoder).
  std::optional<bool> char_encoder;
  int char_embedding_size = 30;       // Ma & Hovy 2016, table 1
  int char_filters = 30;              // Ma & Hovy 2016, table 1
  int char_width = 3;                 // Ma & Hovy 2016, table 1 (window size)
  std::string pretrained_embeddings;  // text vector file, optional
  bool freeze_embeddings = false;
  // Optimisation
  optim::OptimizerKind optimizer = optim::OptimizerKind::kAdam;
  double learning_rate = 0.0;  // 0 = by task (resolve_learning_rate)
  double momentum = 0.9;       // sgd
  bool nesterov = false;       // sgd
  double weight_decay = 0.0;
  optim::ScheduleKind schedule = optim::ScheduleKind::kConstant;
  int warmup_steps = 0;
  double clip_norm = 5.0;  // global gradient norm; 0 = off
  double label_smoothing = 0.0;
  ClassWeights class_weights = ClassWeights::kNone;
  int batch_size = 32;
  int epochs = 20;
  int epoch_step_limit = 0;      // optimizer steps per epoch at most; 0 = a full pass over the training split
  int patience = 5;              // epochs without dev improvement before stopping; 0 = never stop early
  std::optional<Metric> metric;  // empty: default_metric(task, multi_label)
  int bptt_window = 0;           // truncated BPTT window in tokens; 0 = full BPTT
  int max_length = 0;            // truncate examples to this many tokens; 0 = keep all
  // Machinery
  std::uint64_t seed = 1;
  int threads = 1;
};

/// The description of every field of TrainConfig, in --help order.
const SettingTable<TrainConfig>& train_settings();

/// Defaults, as JSON.
nlohmann::json default_config_json();
/// Reads a config object; unknown keys, null values, wrong types and out-of-range values throw
/// ConfigError naming the key (with a suggestion for a misspelt key or value).
TrainConfig config_from_json(const nlohmann::json& j);
nlohmann::json config_to_json(const TrainConfig& c);
/// "auto" char_encoder for a task: on for taggers, off for classifiers (measured on the open
/// datasets, README "Character encoder").
bool resolve_char_encoder(const TrainConfig& c, data::Task task);

/// Learning rates of learning_rate 0 ("by task"), chosen on the open datasets (README "Defaults
/// against a linear baseline, on open data"): classifiers 0.005 (names: dev log-loss of the blend
/// 0.241 against 0.263 at 0.002, 3 seeds; brown-genre and the demo intents unchanged), taggers
/// 0.002 (brown-names: dev span F1 0.839 at 0.002 and 0.833 at 0.005, 3 seeds).
inline constexpr double kClassifierLearningRate = 5e-3;
inline constexpr double kTaggerLearningRate = 2e-3;
/// The learning rate a run uses: c.learning_rate, or the task's rate above when it is 0.
double resolve_learning_rate(const TrainConfig& c, data::Task task);

/// Checks ranges (as the table describes them) and combinations (window vs max length ...);
/// throws ConfigError naming the setting.
void validate(const TrainConfig& c);

/// How the run's labelled files are read (bad-line policy, CSV columns / JSON Lines keys).
data::ReadOptions read_options(const TrainConfig& c);

}  // namespace gyre::train
