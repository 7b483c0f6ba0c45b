#include "gyre/train/config.hpp"

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/runtime/ngram_part.hpp"

namespace gyre::train {
namespace {

using nlohmann::json;

// Groups, in --help and README order.
constexpr const char* kData = "data";
constexpr const char* kTokens = "tokenizer and vocabulary";
constexpr const char* kModel = "model";
constexpr const char* kTraining = "training";
constexpr const char* kMachine = "machine";

// Choice names come from each enum's own to_string, so the names in configs, model files and
// messages are one spelling.
template <typename E>
ChoiceOf<E> named(E value, std::string name, std::string help) {
  return {value, {std::move(name), std::move(help)}};
}
ChoiceOf<data::Task> opt(data::Task v, std::string help) {
  return named(v, data::to_string(v), std::move(help));
}
ChoiceOf<text::TokenizerMode> opt(text::TokenizerMode v, std::string help) {
  return named(v, text::to_string(v), std::move(help));
}
ChoiceOf<nn::CellType> opt(nn::CellType v, std::string help) {
  return named(v, model::to_string(v), std::move(help));
}
ChoiceOf<nn::PoolingKind> opt(nn::PoolingKind v, std::string help) {
  return named(v, model::to_string(v), std::move(help));
}
ChoiceOf<model::OutputKind> opt(model::OutputKind v, std::string help) {
  return named(v, model::to_string(v), std::move(help));
}
ChoiceOf<optim::OptimizerKind> opt(optim::OptimizerKind v, std::string help) {
  return named(v, optim::to_string(v), std::move(help));
}
ChoiceOf<optim::ScheduleKind> opt(optim::ScheduleKind v, std::string help) {
  return named(v, optim::to_string(v), std::move(help));
}
ChoiceOf<ClassWeights> opt(ClassWeights v, std::string help) {
  return named(v, to_string(v), std::move(help));
}
ChoiceOf<NgramPartMode> opt(NgramPartMode v, std::string help) {
  return named(v, to_string(v), std::move(help));
}
ChoiceOf<Metric> opt(Metric v, std::string help) {
  return named(v, to_string(v), std::move(help));
}

using C = TrainConfig;

// The input files and how they are read.
void add_data_settings(std::vector<Setting<C>>& t) {
  t.push_back(
      text(&C::train, {.key = "train",
                       .group = kData,
                       .help = "labelled training file (TSV label<TAB>text, CSV with a header row, JSON "
                               "Lines, or token<TAB>tag columns)",
                       .value_name = "FILE",
                       .required = true}));
  t.push_back(text(&C::dev, {.key = "dev",
                             .group = kData,
                             .help = "labelled dev file, scored after every epoch (default: a share of the "
                                     "training file, see --dev-fraction)",
                             .value_name = "FILE"}));
  t.push_back(choice(&C::task, {.key = "task", .group = kData, .help = "what to train"},
                     {"auto", "from the file format"},
                     {opt(data::Task::kClassify, "one label (or several) per text"),
                      opt(data::Task::kTag, "one tag per token")}));
  t.push_back(
      real(&C::dev_fraction, {.key = "dev_fraction",
                              .group = kData,
                              .help = "share of the training file held out as dev when no --dev is given "
                                      "(chosen by a hash of each example)",
                              .min = 0,
                              .max = 1,
                              .min_exclusive = true,
                              .max_exclusive = true}));
  t.push_back(
      flag(&C::skip_bad_lines, {.key = "skip_bad_lines",
                                .group = kData,
                                .help = "skip malformed records (counted, first line numbers reported) "
                                        "instead of stopping"}));
  t.push_back(
      flag(&C::repair_tags, {.key = "repair_tags",
                             .group = kData,
                             .help = "repair invalid BIO/BIOES transitions in tagging data instead of "
                                     "stopping"}));
  t.push_back(
      text(&C::text_column, {.key = "text_column",
                             .group = kData,
                             .help = "CSV files: the header name of the text column; JSON Lines: the key of "
                                     "the text",
                             .value_name = "NAME"}));
  t.push_back(
      text(&C::label_column, {.key = "label_column",
                              .group = kData,
                              .help = "CSV files: the header name of the label column; JSON Lines: the key "
                                      "of the label (or array of labels)",
                              .value_name = "NAME"}));
}

// How texts become tokens, and the vocabulary.
void add_tokenizer_settings(std::vector<Setting<C>>& t) {
  t.push_back(choice(&C::tokenizer,
                     {.key = "tokenizer", .group = kTokens, .help = "how texts are cut into tokens"},
                     {opt(text::TokenizerMode::kWords, "Unicode word boundaries (UAX #29)"),
                      opt(text::TokenizerMode::kChars, "extended grapheme clusters"),
                      opt(text::TokenizerMode::kWhitespace, "split at white space")}));
  t.push_back(flag(&C::nfkc, {.key = "nfkc", .group = kTokens, .help = "Unicode NFKC normalization first"}));
  t.push_back(
      flag(&C::case_fold, {.key = "case_fold", .group = kTokens, .help = "Unicode full case folding"}));
  t.push_back(
      flag(&C::fold_digits, {.key = "fold_digits", .group = kTokens, .help = "map every digit to 0"}));
  t.push_back(
      flag(&C::keep_punctuation,
           {.key = "keep_punctuation", .group = kTokens, .help = "keep tokens made only of punctuation"}));
  t.push_back(integer(&C::max_tokens,
                      {.key = "max_tokens",
                       .group = kTokens,
                       .help = "keep the first N tokens of each text or sentence, warn about longer ones",
                       .min = 0,
                       .note = "0 = all"}));
  t.push_back(integer(&C::min_count, {.key = "min_count",
                                      .group = kTokens,
                                      .help = "tokens seen fewer times in the training data become <unk>",
                                      .min = 1}));
  t.push_back(integer(&C::max_vocab_size, {.key = "max_vocab_size",
                                           .group = kTokens,
                                           .help = "largest vocabulary, <pad> and <unk> included (the most "
                                                   "frequent tokens are kept)",
                                           .min = 0,
                                           .max = 100000000,
                                           .note = "0 = no limit, else >= 3"}));
  t.push_back(
      text(&C::vocab, {.key = "vocab",
                       .group = kTokens,
                       .help = "use this vocabulary file (written by gyre vocab with the same tokenizer "
                               "settings) instead of building one from the training file",
                       .value_name = "FILE"}));
}

// The network: cell, sizes, pooling, output, dropout.
void add_model_settings(std::vector<Setting<C>>& t) {
  t.push_back(choice(&C::cell, {.key = "cell", .group = kModel, .help = "recurrent cell"},
                     {opt(nn::CellType::kLstm, "long short-term memory with forget gate"),
                      opt(nn::CellType::kGru, "gated recurrent unit")}));
  t.push_back(integer(
      &C::embedding_size,
      {.key = "embedding_size", .group = kModel, .help = "token embedding width", .min = 1, .max = 65536}));
  t.push_back(integer(&C::hidden_size, {.key = "hidden_size",
                                        .group = kModel,
                                        .help = "recurrent state width per direction",
                                        .min = 1,
                                        .max = 65536}));
  t.push_back(
      integer(&C::layers,
              {.key = "layers", .group = kModel, .help = "stacked recurrent layers", .min = 1, .max = 32}));
  t.push_back(
      auto_flag(&C::bidirectional, {.key = "bidirectional",
                                    .group = kModel,
                                    .help = "read each text in both directions (default: yes for taggers, "
                                            "no for classifiers)",
                                    .negative = "unidirectional"}));
  t.push_back(choice(
      &C::pooling,
      {.key = "pooling", .group = kModel, .help = "classifiers: how the states of a text become one vector"},
      {opt(nn::PoolingKind::kLast, "the final state of each direction"),
       opt(nn::PoolingKind::kMean, "mean over the tokens"),
       opt(nn::PoolingKind::kMax, "maximum over the tokens")}));
  t.push_back(choice(&C::output, {.key = "output", .group = kModel, .help = "output layer"},
                     {"auto", "softmax, or sigmoid when the training file is multi-label"},
                     {opt(model::OutputKind::kSoftmax, "one label (taggers: per-token tags)"),
                      opt(model::OutputKind::kSigmoid, "any number of labels (multi-label)"),
                      opt(model::OutputKind::kCrf, "taggers: linear-chain CRF over the tags")}));
  t.push_back(real(&C::multi_label_threshold,
                   {.key = "multi_label_threshold",
                    .group = kModel,
                    .help = "output sigmoid: a label is chosen when its probability is at least this (train "
                            "stores it in the model for labels without a tuned threshold; given to eval or "
                            "predict, it replaces every threshold of the model)",
                    .min = 0,
                    .max = 1,
                    .min_exclusive = true,
                    .max_exclusive = true}));
  t.push_back(flag(&C::tune_label_thresholds,
                   {.key = "tune_label_thresholds",
                    .group = kModel,
                    .help = "output sigmoid: after training, give each label the threshold with its best dev "
                            "F1 (ties keep --multi-label-threshold), stored in the model"}));
  t.push_back(real(&C::dropout, {.key = "dropout",
                                 .group = kModel,
                                 .help = "dropout between recurrent layers and before the output layer",
                                 .min = 0,
                                 .max = 1,
                                 .max_exclusive = true}));
  t.push_back(real(&C::embedding_dropout, {.key = "embedding_dropout",
                                           .group = kModel,
                                           .help = "dropout on token embeddings",
                                           .min = 0,
                                           .max = 1,
                                           .max_exclusive = true}));
  t.push_back(choice(&C::ngram_part,
                     {.key = "ngram_part",
                      .group = kModel,
                      .help = "single-label classifiers: add a logistic regression over token n-grams to the "
                              "network's logits, its weight chosen on dev (README \"N-gram part\")"},
                     {opt(NgramPartMode::kAuto, "fitted after training, kept when dev gives it a weight > 0"),
                      opt(NgramPartMode::kOff, "the network alone")}));
  t.push_back(
      integer(&C::ngram_order, {.key = "ngram_order",
                                .group = kModel,
                                .help = "highest n-gram order of the n-gram part and the linear baseline",
                                .min = 0,
                                .max = runtime::kMaxNgramOrder,
                                .note = "0 = auto: 4 with --tokenizer chars, else 2"}));
  t.push_back(integer(&C::linear_fit_examples,
                      {.key = "linear_fit_examples",
                       .group = kModel,
                       .help = "the n-gram part and the linear baseline are fitted on at most N training "
                               "examples, chosen by a hash of each example (README \"N-gram part\")",
                       .min = 0,
                       .max = 1000000000,
                       .note = "0 = all"}));
  t.push_back(integer(&C::linear_fit_features,
                      {.key = "linear_fit_features",
                       .group = kModel,
                       .help = "the n-gram part and the linear baseline keep at most N n-grams, those in the "
                               "most training examples",
                       .min = 0,
                       .max = 1000000000,
                       .note = "0 = all"}));
}

// The character encoder and the token embeddings.
void add_char_encoder_settings(std::vector<Setting<C>>& t) {
  t.push_back(auto_flag(&C::char_encoder, {.key = "char_encoder",
                                           .group = kModel,
                                           .help = "join a character CNN over each token's un-folded "
                                                   "characters to its embedding (default: yes for taggers, "
                                                   "no for classifiers)"}));
  t.push_back(integer(&C::char_embedding_size, {.key = "char_embedding_size",
                                                .group = kModel,
                                                .help = "character encoder: character embedding width",
                                                .min = 1,
                                                .max = 65536}));
  t.push_back(
      integer(&C::char_filters, {.key = "char_filters",
                                 .group = kModel,
                                 .help = "character encoder: convolution filters (features per token)",
                                 .min = 1,
                                 .max = 65536}));
  t.push_back(integer(&C::char_width, {.key = "char_width",
                                       .group = kModel,
                                       .help = "character encoder: convolution window in characters",
                                       .min = 1,
                                       .max = 31,
                                       .note = "odd"}));
  t.push_back(text(&C::pretrained_embeddings, {.key = "pretrained_embeddings",
                                               .group = kModel,
                                               .help = "text file of vectors, one 'token v1 v2 ...' per line",
                                               .value_name = "FILE"}));
  t.push_back(flag(
      &C::freeze_embeddings,
      {.key = "freeze_embeddings", .group = kModel, .help = "keep the embeddings fixed while training"}));
}

// Optimizer, learning-rate schedule, clipping and loss.
void add_optimizer_settings(std::vector<Setting<C>>& t) {
  t.push_back(choice(
      &C::optimizer, {.key = "optimizer", .group = kTraining, .help = "optimizer"},
      {opt(optim::OptimizerKind::kSgd, "stochastic gradient descent with momentum"),
       opt(optim::OptimizerKind::kAdam, "Adam (Kingma & Ba 2015)"),
       opt(optim::OptimizerKind::kAdamW, "Adam with decoupled weight decay (Loshchilov & Hutter 2019)")}));
  t.push_back(real(&C::learning_rate, {.key = "learning_rate",
                                       .group = kTraining,
                                       .help = "peak learning rate",
                                       .min = 0,
                                       .note = "0 = by task: 0.005 for classifiers, 0.002 for taggers"}));
  t.push_back(real(&C::momentum, {.key = "momentum",
                                  .group = kTraining,
                                  .help = "sgd: momentum",
                                  .min = 0,
                                  .max = 1,
                                  .max_exclusive = true}));
  t.push_back(flag(&C::nesterov, {.key = "nesterov", .group = kTraining, .help = "sgd: Nesterov momentum"}));
  t.push_back(real(&C::weight_decay, {.key = "weight_decay",
                                      .group = kTraining,
                                      .help = "L2 penalty (sgd, adam) or decoupled decay (adamw)",
                                      .min = 0}));
  t.push_back(choice(&C::schedule, {.key = "schedule", .group = kTraining, .help = "learning-rate schedule"},
                     {opt(optim::ScheduleKind::kConstant, "the same rate throughout"),
                      opt(optim::ScheduleKind::kLinear, "linear decay to 0 after warm-up"),
                      opt(optim::ScheduleKind::kCosine, "cosine decay to 0 after warm-up"),
                      opt(optim::ScheduleKind::kPlateau, "lowered when the dev metric stops improving")}));
  t.push_back(integer(&C::warmup_steps, {.key = "warmup_steps",
                                         .group = kTraining,
                                         .help = "linear learning-rate warm-up, in optimizer steps",
                                         .min = 0}));
  t.push_back(real(&C::clip_norm, {.key = "clip_norm",
                                   .group = kTraining,
                                   .help = "clip the global gradient norm to this value",
                                   .min = 0,
                                   .note = "0 = off"}));
  t.push_back(real(&C::label_smoothing, {.key = "label_smoothing",
                                         .group = kTraining,
                                         .help = "label smoothing for softmax outputs",
                                         .min = 0,
                                         .max = 1,
                                         .max_exclusive = true}));
  t.push_back(choice(&C::class_weights,
                     {.key = "class_weights", .group = kTraining, .help = "loss weight per label"},
                     {opt(ClassWeights::kNone, "every label weighs the same"),
                      opt(ClassWeights::kBalanced, "inversely proportional to the label's frequency")}));
}

// Batches, epochs, early stopping and sequence lengths.
void add_epoch_settings(std::vector<Setting<C>>& t) {
  t.push_back(integer(&C::batch_size, {.key = "batch_size",
                                       .group = kTraining,
                                       .help = "texts per batch (training: per optimizer step)",
                                       .min = 1,
                                       .max = 1000000}));
  t.push_back(integer(&C::epochs, {.key = "epochs",
                                   .group = kTraining,
                                   .help = "passes over the training data",
                                   .min = 1,
                                   .max = 1000000}));
  t.push_back(integer(&C::epoch_step_limit,
                      {.key = "epoch_step_limit",
                       .group = kTraining,
                       .help = "end each epoch after this many optimizer steps (the first batches of its "
                               "shuffled plan): a quick trial, or dev checks and checkpoints more often on a "
                               "large corpus",
                       .min = 0,
                       .note = "0 = a full pass over the training split"}));
  t.push_back(integer(&C::patience, {.key = "patience",
                                     .group = kTraining,
                                     .help = "stop after this many epochs without a better dev score",
                                     .min = 0,
                                     .note = "0 = never stop early"}));
  t.push_back(
      choice(&C::metric,
             {.key = "metric",
              .group = kTraining,
              .help = "dev score that picks the best epoch, stops early and ranks compare's configurations"},
             {"auto", "accuracy; macro_f1 for multi-label; span_f1 for taggers"},
             {opt(Metric::kAccuracy, "share of texts (taggers: tokens) labelled exactly right"),
              opt(Metric::kMacroF1, "classifiers: F1 averaged over labels"),
              opt(Metric::kSpanF1, "taggers: span F1 (CoNLL-2000 rules)"),
              opt(Metric::kTokenAccuracy, "taggers: share of tokens tagged right"),
              opt(Metric::kLoss, "dev loss per token (lower is better)")}));
  t.push_back(integer(&C::bptt_window, {.key = "bptt_window",
                                        .group = kTraining,
                                        .help = "truncated backpropagation through time: window in tokens",
                                        .min = 0,
                                        .note = "0 = full"}));
  t.push_back(integer(&C::max_length, {.key = "max_length",
                                       .group = kTraining,
                                       .help = "cut training texts to this many tokens",
                                       .min = 0,
                                       .note = "0 = keep all"}));
}

// Seed and threads.
void add_machine_settings(std::vector<Setting<C>>& t) {
  t.push_back(integer(&C::seed, {.key = "seed",
                                 .group = kMachine,
                                 .help = "random seed (same seed and --threads: identical weights)",
                                 .min = 0}));
  t.push_back(integer(&C::threads,
                      {.key = "threads", .group = kMachine, .help = "worker threads", .min = 1, .max = 256}));
}

// Every training setting, group by group (the order of the table is kept).
SettingTable<TrainConfig> make_table() {
  std::vector<Setting<C>> t;
  add_data_settings(t);
  add_tokenizer_settings(t);
  add_model_settings(t);
  add_char_encoder_settings(t);
  add_optimizer_settings(t);
  add_epoch_settings(t);
  add_machine_settings(t);
  return SettingTable<TrainConfig>(std::move(t));
}

}  // namespace

const char* to_string(ClassWeights w) noexcept {
  return w == ClassWeights::kBalanced ? "balanced" : "none";
}

const char* to_string(NgramPartMode m) noexcept {
  return m == NgramPartMode::kOff ? "off" : "auto";
}

const SettingTable<TrainConfig>& train_settings() {
  static const SettingTable<TrainConfig> table = make_table();
  return table;
}

json config_to_json(const TrainConfig& config) {
  return train_settings().to_json(config);
}

json default_config_json() {
  return config_to_json(TrainConfig{});
}

TrainConfig config_from_json(const json& j) {
  return train_settings().from_json(j);
}

data::ReadOptions read_options(const TrainConfig& c) {
  data::ReadOptions options;
  options.skip_bad_lines = c.skip_bad_lines;
  options.text_column = c.text_column;
  options.label_column = c.label_column;
  return options;
}

void validate(const TrainConfig& c) {
  train_settings().check(c);
  if (c.text_column.empty() || c.label_column.empty() || c.text_column == c.label_column)
    throw ConfigError(
        c.text_column.empty() || c.text_column == c.label_column ? "text_column" : "label_column",
        "the text and label columns need two different, non-empty names");
  if (c.train.empty()) throw ConfigError("train", "a training file is required (--train FILE)");
  if (c.max_vocab_size == 1 || c.max_vocab_size == 2)
    throw ConfigError("max_vocab_size", "must be 0 (no limit) or >= 3 (<pad>, <unk> and one token)");
  if (c.bptt_window > 0 && c.max_length > 0 && c.bptt_window > c.max_length)
    throw ConfigError("bptt_window", "window (" + std::to_string(c.bptt_window) +
                                         ") is longer than max_length (" + std::to_string(c.max_length) +
                                         "): no example would ever be cut");
  if (c.bptt_window > 0 && c.bidirectional.value_or(false))
    throw ConfigError("bptt_window",
                      "truncated BPTT needs a unidirectional model (the backward direction would "
                      "only ever see one window); drop --bidirectional or --bptt-window");
  if (c.bptt_window > 0 && c.pooling != nn::PoolingKind::kLast && c.task == data::Task::kClassify)
    throw ConfigError("bptt_window",
                      "a classifier trained with truncated BPTT must pool the last state "
                      "(--pooling last): mean/max pooling would span windows the gradient cannot reach");
  if (c.task && c.metric && !metric_applies(*c.metric, *c.task))
    throw ConfigError("metric", std::string("'") + to_string(*c.metric) + "' is not a " +
                                    (*c.task == data::Task::kTag ? "tagger" : "classifier") + " metric");
  if (c.output == model::OutputKind::kCrf && c.task == data::Task::kClassify)
    throw ConfigError("output", "crf needs a tagging corpus");
  if (c.char_width % 2 == 0)
    throw ConfigError("char_width", "must be odd (the window is centred on each character); found " +
                                        std::to_string(c.char_width));
}

bool resolve_char_encoder(const TrainConfig& c, data::Task task) {
  if (c.char_encoder) return *c.char_encoder;
  return task == data::Task::kTag;
}

double resolve_learning_rate(const TrainConfig& c, data::Task task) {
  if (c.learning_rate > 0.0) return c.learning_rate;
  return task == data::Task::kTag ? kTaggerLearningRate : kClassifierLearningRate;
}

}  // namespace gyre::train
