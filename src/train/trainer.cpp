#include "gyre/train/trainer.hpp"

#include <sys/resource.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <limits>
#include <map>
#include <memory>
#include <optional>
#include <sstream>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/data/encoded_corpus.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/data/tag_scheme.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/model/sequence_model.hpp"
#include "gyre/optim/grad_clip.hpp"
#include "gyre/optim/lr_schedule.hpp"
#include "gyre/optim/optimizer.hpp"
#include "gyre/train/baseline.hpp"
#include "gyre/train/calibrate.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/explain.hpp"
#include "gyre/train/interrupt.hpp"
#include "gyre/train/ngram_blend.hpp"
#include "gyre/train/process_group.hpp"
#include "gyre/train/progress.hpp"
#include "gyre/train/reducer.hpp"
#include "gyre/train/worker_pool.hpp"

namespace gyre::train {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

// Clusters seen once map to <unk>, so its row is trained on rare characters (common practice,
// no source).
constexpr std::uint64_t kMinCharacterCount = 2;

// ---------------------------------------------------------------- data preparation

struct PreparedData {
  text::VocabFile vocab;
  data::Task task = data::Task::kClassify;
  bool multi_label = false;
  data::TagScheme tag_scheme = data::TagScheme::kNone;
  data::EncodedCorpus train;  // the training split in one arena (data/encoded_corpus.hpp)
  std::vector<data::EncodedExample> dev;
  std::uint64_t fingerprint = 0;  // of the encoded training data (resume checks it)
  std::size_t repaired = 0;
  json cut_examples = json::object();  // examples max_tokens cut, by file
};

// Skipped records are a warning, so --quiet does not hide it: data was left out of training.
void warn_about_skipped(const std::string& path, const data::ReadReport& report, ProgressLine& progress) {
  if (report.skipped == 0) return;
  std::string lines;
  for (const auto line : report.first_skipped_lines)
    lines += (lines.empty() ? "" : ", ") + std::to_string(line);
  progress.warn(path + ": skipped " + std::to_string(report.skipped) + " bad record(s) (lines " + lines +
                (report.skipped > report.first_skipped_lines.size() ? ", ..." : "") + ")");
}

std::vector<data::Example> read_examples(const std::string& path, const TrainConfig& config,
                                         ProgressLine& progress, data::ReadReport& report) {
  std::vector<data::Example> examples;
  const data::ReadOptions options = read_options(config);
  report = data::read_corpus(path, options, [&](data::Example&& ex) { examples.push_back(std::move(ex)); });
  warn_about_skipped(path, report, progress);
  if (examples.empty()) throw ParseError(path, 0, "no examples in the file");
  return examples;
}

// Names the examples that max_tokens cut (the model sees only their first max_tokens tokens);
// returns the same as JSON for metrics.json: {path: {"count": n, "first_lines": [...]}}.
json warn_about_cuts(const data::EncodedCorpus& train, const std::string& train_path,
                     const std::vector<data::EncodedExample>& dev, const std::string& dev_path,
                     std::size_t max_tokens, ProgressLine& progress) {
  std::map<std::string, std::vector<std::size_t>> cut;  // path -> lines
  for (std::size_t i = 0; i < train.size(); ++i)
    if (train.cut(i)) cut[train_path].push_back(train.source_line(i));
  for (const auto& ex : dev)
    if (ex.cut) cut[dev_path].push_back(ex.source_line);
  json record = json::object();
  for (auto& [path, lines] : cut) {
    std::sort(lines.begin(), lines.end());
    constexpr std::size_t kNamed = 10;
    record[path] = {
        {"count", lines.size()},
        {"first_lines",
         std::vector<std::size_t>(
             lines.begin(), lines.begin() + static_cast<std::ptrdiff_t>(std::min(kNamed, lines.size())))}};
    std::string named;
    for (std::size_t i = 0; i < lines.size() && i < kNamed; ++i)
      named += (i ? ", " : "") + std::to_string(lines[i]);
    progress.warn(path + ": " + std::to_string(lines.size()) + " example(s) longer than " +
                  std::to_string(max_tokens) + " tokens, cut to their first " + std::to_string(max_tokens) +
                  " (line" + (lines.size() > 1 ? "s " : " ") + named +
                  (lines.size() > kNamed ? ", ..." : "") + "); --max-tokens N sets the limit, 0 = none");
  }
  return record;
}

// The share of training tokens that map to <unk> beyond which the vocabulary is too small to
// learn from: our own threshold (no source); a plain run has none, --min-count 2 on the demo
// corpora about 4%.
constexpr double kUnknownShareWarning = 0.5;

// --min-count or --max-vocab-size that leave (almost) nothing to learn from train a model that
// sees mostly <unk>: say so before the time is spent.
void warn_about_small_vocabulary(const data::EncodedCorpus& train, const text::VocabFile& vocab,
                                 const TrainConfig& config, ProgressLine& progress) {
  std::size_t tokens = 0, unknown = 0;
  for (std::size_t i = 0; i < train.size(); ++i) {
    tokens += train.length(i);
    for (const auto id : train.ids(i)) unknown += id == text::Vocab::kUnk;
  }
  if (tokens == 0 || static_cast<double>(unknown) <= kUnknownShareWarning * static_cast<double>(tokens))
    return;
  std::string cause;
  if (config.min_count > 1) cause += "--min-count " + std::to_string(config.min_count);
  if (config.max_vocab_size > 0 && vocab.vocab.size() >= static_cast<std::size_t>(config.max_vocab_size))
    cause += (cause.empty() ? "" : " and ") + std::string("--max-vocab-size ") +
             std::to_string(config.max_vocab_size);
  if (cause.empty()) cause = "the vocabulary settings";
  char share[32];
  std::snprintf(share, sizeof share, "%.0f%%",
                100.0 * static_cast<double>(unknown) / static_cast<double>(tokens));
  progress.warn(cause + " leaves a vocabulary of " + std::to_string(vocab.vocab.size() - 2) +
                " token(s) besides <pad> and <unk>: " + share + " of the training tokens (" +
                std::to_string(unknown) + " of " + std::to_string(tokens) +
                ") become <unk>; a lower --min-count keeps more words");
}

// Checks one BIO/BIOES sequence: true when it needs repair and repair_tags is on; without
// repair_tags an invalid sequence is refused naming file:line of the token.
bool needs_tag_repair(const data::Example& ex, const std::string& path, data::TagScheme scheme, bool repair,
                      bool columns_format) {
  const auto issues = data::check_tags(ex.tags, scheme);
  if (issues.empty()) return false;
  if (!repair) {
    const std::size_t line = columns_format ? ex.line + issues.front().position : ex.line;
    throw ParseError(path, line, issues.front().message + " (--repair-tags fixes such sequences)");
  }
  return true;
}

// Checks (and with repair_tags fixes) BIO/BIOES sequences; reports file:line of the token.
std::size_t check_tag_sequences(std::vector<data::Example>& examples, const std::string& path,
                                data::TagScheme scheme, bool repair, bool columns_format) {
  std::size_t repaired = 0;
  for (auto& ex : examples) {
    if (!needs_tag_repair(ex, path, scheme, repair, columns_format)) continue;
    ex.tags = data::repair_tags(ex.tags, scheme);
    ++repaired;
  }
  return repaired;
}

// The first tokenizer setting on which a vocabulary file and the run's settings differ.
void check_vocab_tokenizer(const std::string& path, const text::TokenizerSettings& file,
                           const text::TokenizerSettings& run) {
  auto on_off = [](bool b) { return std::string(b ? "on" : "off"); };
  auto differ = [&](const char* key, const std::string& in_file, const std::string& in_run) {
    if (in_file != in_run)
      throw ConfigError("vocab", path + " was built with " + key + " " + in_file + " but this run has " +
                                     key + " " + in_run +
                                     "; give gyre train the same tokenizer options as gyre vocab");
  };
  differ("tokenizer", text::to_string(file.mode), text::to_string(run.mode));
  differ("nfkc", on_off(file.nfkc), on_off(run.nfkc));
  differ("case_fold", on_off(file.case_fold), on_off(run.case_fold));
  differ("fold_digits", on_off(file.fold_digits), on_off(run.fold_digits));
  differ("keep_punctuation", on_off(file.keep_punctuation), on_off(run.keep_punctuation));
  differ("max_tokens", std::to_string(file.max_tokens), std::to_string(run.max_tokens));
}

// The run's vocabulary: a resumed run's own, a `gyre vocab` file given with --vocab, or built
// from the training split only (the configured tokenizer, token and label counts).
// `tokens` (when not null) gets the training split's token count when the vocabulary is counted
// here (0 when it comes from a file and no pass runs).
text::VocabFile resolve_vocab(const TrainConfig& config, data::Task task, const ExampleStream& train_split,
                              const text::VocabFile* saved_vocab, std::size_t* token_count) {
  const bool chars = config.char_encoder.value_or(false);  // resolved by prepare_data
  if (saved_vocab != nullptr) {
    if (saved_vocab->characters.empty() == chars)
      throw FormatError("vocab.json", chars
                                          ? "the run's config has a character encoder but its vocabulary no "
                                            "character list"
                                          : "the vocabulary has a character list but the run's config no "
                                            "character encoder");
    return *saved_vocab;
  }
  text::TokenizerSettings tokenizer;
  tokenizer.mode = config.tokenizer;
  tokenizer.nfkc = config.nfkc;
  tokenizer.case_fold = config.case_fold;
  tokenizer.fold_digits = config.fold_digits;
  tokenizer.keep_punctuation = config.keep_punctuation;
  tokenizer.max_tokens = static_cast<std::size_t>(config.max_tokens);
  text::VocabFile vocab;
  const bool given = !config.vocab.empty();
  if (given) {
    // A vocabulary from `gyre vocab`: its tokens only mean something with the tokenizer that
    // counted them, so the settings must agree; labels are checked as the examples are encoded.
    vocab = text::load_vocab_file(config.vocab);
    check_vocab_tokenizer(config.vocab, vocab.tokenizer, tokenizer);
    vocab.characters.clear();
    if (!chars) return vocab;
    // `gyre vocab` writes no character list: it is counted from the training split below.
  } else {
    vocab.tokenizer = tokenizer;
  }
  data::Encoder tokenizing(vocab, task);
  text::VocabBuilder builder;
  text::CharacterListBuilder characters;
  text::LabelCounts labels;
  std::vector<std::string> tokens, surfaces;
  std::size_t counted = 0;
  train_split([&](const data::Example& ex) {
    if (chars) {
      tokenizing.tokens(ex, config.train, tokens, surfaces);
      for (const auto& s : surfaces) characters.add(s);
    } else {
      tokenizing.tokens(ex, config.train, tokens);
    }
    counted += tokens.size();
    if (given) return;
    builder.add(tokens);
    for (const auto& l : task == data::Task::kClassify ? ex.labels : ex.tags) ++labels[l];
  });
  if (token_count != nullptr) *token_count = counted;
  if (chars) vocab.characters = characters.build(kMinCharacterCount, 0);
  if (given) return vocab;
  vocab.vocab = builder.build(static_cast<std::uint64_t>(config.min_count),
                              static_cast<std::size_t>(config.max_vocab_size));
  vocab.labels = text::LabelSet(labels);
  return vocab;
}

// Ids and targets of both splits, warnings about texts cut at max_tokens and about a vocabulary
// too small to learn from, and the fingerprint of the encoded training data (a resumed run
// checks it).
// train_tokens: the training split's token count when the vocabulary pass counted it (the arena
// is then reserved exactly for single-label classifiers and taggers), else 0.
void encode_splits(const TrainConfig& config, ProgressLine& progress, bool saved_vocab,
                   const ExampleStream& train_split, std::size_t train_count, std::size_t train_tokens,
                   const std::vector<data::Example>& dev_examples, PreparedData& out) {
  const data::Encoder encoder(out.vocab, out.task);
  if (train_tokens > 0)  // one target per example (classifiers) or per token (taggers)
    out.train.reserve(train_count, train_tokens, out.task == data::Task::kTag ? train_tokens : train_count);
  train_split([&](const data::Example& ex) { out.train.add(encoder.encode(ex, config.train)); });
  if (out.train.size() != train_count)
    throw IoError(config.train + ": the file changed while it was read: " + std::to_string(out.train.size()) +
                  " training examples instead of " + std::to_string(train_count));
  out.train.shrink_to_fit();
  out.dev.reserve(dev_examples.size());
  const std::string& dev_source = config.dev.empty() ? config.train : config.dev;
  for (const auto& ex : dev_examples) out.dev.push_back(encoder.encode(ex, dev_source));
  out.cut_examples =
      warn_about_cuts(out.train, config.train, out.dev, dev_source, out.vocab.tokenizer.max_tokens, progress);
  if (!saved_vocab) warn_about_small_vocabulary(out.train, out.vocab, config, progress);

  std::uint64_t h = 0;
  for (std::size_t i = 0; i < out.train.size(); ++i) {
    const auto ids = out.train.ids(i), targets = out.train.targets(i), chars = out.train.example_char_ids(i);
    h = stable_hash(ids.data(), ids.size() * sizeof(std::int32_t), h);
    h = stable_hash(targets.data(), targets.size() * sizeof(std::int32_t), h);
    if (!chars.empty()) h = stable_hash(chars.data(), chars.size() * sizeof(std::int32_t), h);
  }
  out.fingerprint = h;
}

// Reads the data without holding the training split's text (issue 13, "Scale"): the training
// file is read once for its task, the dev part of a hash split (config.dev empty: a split by a
// hash of each example, independent of --seed, so runs with different seeds share it) and the
// evidence for the tag scheme; taggers once more to check (and with repair_tags count the
// repairs of) their sequences; once to count the vocabulary (unless a resumed run or --vocab
// gives it); once to encode into the arena. Each pass sees the same examples (read_run_split),
// repaired alike.
PreparedData prepare_data(TrainConfig& config, ProgressLine& progress, const text::VocabFile* saved_vocab) {
  PreparedData out;
  std::error_code ec;
  if (fs::exists(config.train, ec) && !fs::is_regular_file(config.train, ec))
    throw ConfigError("train",
                      config.train +
                          " is not a regular file (a pipe or a device): gyre train reads the training "
                          "file more than once; save it to a file first");
  const data::ReadOptions options = read_options(config);
  const bool split = config.dev.empty();
  std::vector<data::Example> dev_examples;
  std::size_t read_count = 0, train_count = 0;
  bool several_labels = false, bioes = false;
  const data::ReadReport train_report = data::read_corpus(config.train, options, [&](data::Example&& ex) {
    ++read_count;
    if (split && in_dev_split(ex, config.dev_fraction)) {
      dev_examples.push_back(std::move(ex));
      return;
    }
    ++train_count;
    several_labels = several_labels || ex.labels.size() != 1;
    for (const auto& tag : ex.tags) {
      const auto parts = data::split_tag(tag);
      bioes = bioes || parts.prefix == 'E' || parts.prefix == 'S';
    }
  });
  warn_about_skipped(config.train, train_report, progress);
  if (read_count == 0) throw ParseError(config.train, 0, "no examples in the file");
  out.task = train_report.task;
  if (config.task && *config.task != out.task)
    throw ConfigError("task", std::string("'") + data::to_string(*config.task) + "' does not fit " +
                                  config.train + ", which is a " + data::to_string(out.task) + " corpus (" +
                                  data::to_string(train_report.format) + ")");
  config.task = out.task;

  data::ReadReport dev_report;
  if (!split) {
    dev_examples = read_examples(config.dev, config, progress, dev_report);
    if (dev_report.task != out.task)
      throw ConfigError("dev", config.dev + " is a " + std::string(data::to_string(dev_report.task)) +
                                   " corpus but the training file is a " + data::to_string(out.task) +
                                   " corpus");
  } else if (dev_examples.empty() || train_count == 0) {
    throw ConfigError("dev_fraction",
                      "splitting " + config.train + " left an empty train or dev part; give --dev FILE");
  }
  out.multi_label = several_labels && out.task == data::Task::kClassify;
  if (out.task == data::Task::kTag) {
    // Taggers: the scheme the training tags use (BIOES if any E- or S- tag), and every sequence
    // checked against it (repaired with --repair-tags, else refused naming the line).
    const auto scheme = bioes ? data::TagScheme::kBioes : data::TagScheme::kBio;
    out.tag_scheme = scheme;
    const bool columns = train_report.format == data::CorpusFormat::kColumns;
    read_run_split(config, false, data::TagScheme::kNone)([&](const data::Example& ex) {
      out.repaired += needs_tag_repair(ex, config.train, scheme, config.repair_tags, columns) ? 1 : 0;
    });
    if (!split)
      out.repaired += check_tag_sequences(dev_examples, config.dev, scheme, config.repair_tags,
                                          dev_report.format == data::CorpusFormat::kColumns);
    if (out.repaired > 0)
      progress.note("repaired invalid tag transitions in " + std::to_string(out.repaired) + " sentence(s)");
  }

  config.char_encoder = resolve_char_encoder(config, out.task);
  config.learning_rate = resolve_learning_rate(config, out.task);
  const ExampleStream train_split = read_run_split(config, false, out.tag_scheme);
  std::size_t train_tokens = 0;
  out.vocab = resolve_vocab(config, out.task, train_split, saved_vocab, &train_tokens);
  encode_splits(config, progress, saved_vocab != nullptr, train_split, train_count, train_tokens,
                dev_examples, out);
  return out;
}

// ---------------------------------------------------------------- memory, before allocating

// A lower bound on the memory training needs: only buffers that certainly exist (per replica the
// weights and their gradients, the optimizer's moments once, the gate values and states of the
// batch with the longest example, kept for the backward pass), counted in float32. So a refusal is never
// wrong; what passes may still need more (workspaces, the data, the vocabulary).
struct MemoryEstimate {
  double parameters = 0;
  double parameter_bytes = 0;   // weights + gradients of every replica, optimizer state
  double activation_bytes = 0;  // gates and states of the largest batch
  double total() const { return parameter_bytes + activation_bytes; }
};

MemoryEstimate estimate_memory(const model::ModelSpec& spec, const TrainConfig& config, std::size_t longest,
                               std::size_t examples) {
  const double V = spec.vocab_size, E = spec.embedding_size, H = spec.hidden_size, L = spec.layers;
  const double dirs = spec.directions(), C = spec.num_labels(), F = H * dirs;
  const double G = spec.cell == nn::CellType::kLstm ? 4 : 3;
  const double biases = spec.cell == nn::CellType::kLstm ? 1 : 2;
  MemoryEstimate m;
  m.parameters = V * E + C * F + C;
  for (int k = 0; k < spec.layers; ++k)
    m.parameters += dirs * (G * H * (k == 0 ? E : F) + G * H * H + biases * G * H);
  if (spec.output == model::OutputKind::kCrf) m.parameters += C * C + 2 * C;
  const double optimizer_slots =
      config.optimizer == optim::OptimizerKind::kSgd ? (config.momentum > 0 ? 1 : 0) : 2;
  const double threads = config.threads;
  m.parameter_bytes = 4 * m.parameters * (2 * threads + optimizer_slots);
  // The batch holding the longest example is padded to its length; the workers share its rows.
  const double rows = static_cast<double>(std::min(static_cast<std::size_t>(config.batch_size), examples)) *
                      static_cast<double>(longest);
  m.activation_bytes = 4 * rows * (E + L * dirs * (G * H + 2 * H));
  return m;
}

// Physical memory, or less when an address-space limit (ulimit -v) is set.
double memory_limit_bytes() {
  double limit =
      static_cast<double>(::sysconf(_SC_PHYS_PAGES)) * static_cast<double>(::sysconf(_SC_PAGESIZE));
  rlimit as{};
  if (::getrlimit(RLIMIT_AS, &as) == 0 && as.rlim_cur != RLIM_INFINITY)
    limit = std::min(limit, static_cast<double>(as.rlim_cur));
  return limit;
}

std::string gib(double bytes) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.1f GiB", bytes / (1024.0 * 1024.0 * 1024.0));
  return buf;
}

// Refuses (exit code 2) settings whose training cannot fit in this machine's memory, with what it
// would need, instead of "out of memory" (exit 1) after minutes of allocation or swapping.
void check_memory(const model::ModelSpec& spec, const TrainConfig& config, const PreparedData& data) {
  std::size_t longest = 1;
  for (std::size_t i = 0; i < data.train.size(); ++i) longest = std::max(longest, data.train.length(i));
  if (config.max_length > 0) longest = std::min(longest, static_cast<std::size_t>(config.max_length));
  const MemoryEstimate m = estimate_memory(spec, config, longest, data.train.size());
  const double limit = memory_limit_bytes();
  if (!(limit > 0) || m.total() <= limit) return;
  char count[32];
  std::snprintf(count, sizeof count, "%.3g", m.parameters);
  const bool weights = m.parameter_bytes >= m.activation_bytes;
  throw ConfigError(
      weights ? "hidden_size" : "batch_size",
      "training this model needs at least " + gib(m.total()) + " of memory (" + count +
          " parameters: " + gib(m.parameter_bytes) + " for weights, gradients and optimizer state with " +
          std::to_string(config.threads) + " thread(s); " + gib(m.activation_bytes) + " for batches of " +
          std::to_string(config.batch_size) + " x " + std::to_string(longest) + " tokens), more than the " +
          gib(limit) +
          " available; choose a smaller --hidden-size, --layers, --embedding-size, --batch-size, "
          "--max-tokens or --threads");
}

model::ModelSpec make_spec(TrainConfig& config, const PreparedData& data) {
  model::ModelSpec spec;
  spec.task = data.task;
  spec.cell = config.cell;
  spec.vocab_size = static_cast<int>(data.vocab.vocab.size());
  spec.embedding_size = config.embedding_size;
  spec.hidden_size = config.hidden_size;
  spec.layers = config.layers;
  if (!config.bidirectional) config.bidirectional = data.task == data::Task::kTag;
  spec.bidirectional = *config.bidirectional;
  spec.dropout = static_cast<float>(config.dropout);
  spec.embedding_dropout = static_cast<float>(config.embedding_dropout);
  // Taggers pool nothing, and the model header records pooling for classifiers only: a tagger's
  // spec keeps the default, so a resumed tagger trained with --pooling max matches its checkpoint.
  spec.pooling = data.task == data::Task::kClassify ? config.pooling : nn::PoolingKind::kMean;
  if (!config.output)
    config.output = data.multi_label ? model::OutputKind::kSigmoid : model::OutputKind::kSoftmax;
  if (data.multi_label && config.output != model::OutputKind::kSigmoid)
    throw ConfigError("output", "the training file has multi-label examples; they need --output sigmoid");
  spec.output = *config.output;
  spec.threshold = static_cast<float>(config.multi_label_threshold);
  spec.labels = data.vocab.labels.names();
  spec.tag_scheme = data.tag_scheme;
  if (config.char_encoder.value_or(false)) {
    spec.char_vocab_size = static_cast<int>(data.vocab.characters.size());
    spec.char_embedding_size = config.char_embedding_size;
    spec.char_filters = config.char_filters;
    spec.char_width = config.char_width;
  }
  if (!config.metric) config.metric = default_metric(data.task, data.multi_label);
  if (!metric_applies(*config.metric, data.task))
    throw ConfigError("metric",
                      std::string("'") + to_string(*config.metric) + "' is not a " +
                          (data.task == data::Task::kTag ? "tagger metric (span_f1, token_accuracy, "
                                                           "accuracy or loss)"
                                                         : "classifier metric (accuracy, macro_f1 or loss)"));
  model::validate(spec);
  return spec;
}

model::LossOptions make_loss_options(const TrainConfig& config, const PreparedData& data,
                                     const model::ModelSpec& spec) {
  model::LossOptions loss;
  loss.label_smoothing = static_cast<float>(config.label_smoothing);
  if (config.class_weights == ClassWeights::kBalanced) {
    if (spec.output != model::OutputKind::kSoftmax)
      throw ConfigError("class_weights", "balanced class weights need a softmax output");
    // w_c = N / (C * n_c), the "balanced" heuristic of King & Zeng (2001) as sklearn's
    // compute_class_weight documents it; n_c counts training labels (tags for taggers).
    std::vector<double> counts(static_cast<std::size_t>(spec.num_labels()), 0.0);
    double total = 0;
    for (std::size_t i = 0; i < data.train.size(); ++i)
      for (const auto t : data.train.targets(i)) {
        counts[static_cast<std::size_t>(t)] += 1;
        total += 1;
      }
    for (const double n : counts)
      loss.class_weights.push_back(
          n > 0 ? static_cast<float>(total / (static_cast<double>(counts.size()) * n)) : 1.0f);
  }
  return loss;
}

// ---------------------------------------------------------------- run state

struct RunState {
  int epoch = 0;                 // 0-based epoch in progress (== epochs completed at an epoch end)
  std::size_t step = 0;          // next step within the epoch
  std::int64_t global_step = 0;  // optimizer steps taken
  double best_metric = NAN;
  int best_epoch = 0;
  int epochs_without_improvement = 0;
  double epoch_loss_sum = 0, epoch_loss_units = 0;
  std::size_t epoch_tokens = 0;
  double epoch_seconds = 0;  // seconds spent in the epoch before an interruption
  double total_seconds = 0;
  std::size_t total_tokens = 0;
  bool finished = false;
  // Divergence guard: the loss per unit of the run's first step, and a moving average since.
  double loss_reference = NAN;
  double loss_average = NAN;
};

/// The run has diverged when the moving average of the step loss exceeds this many times the
/// loss of its first step (taken at initialisation, i.e. about the loss of guessing). A run
/// that is learning stays far below; our choice, no source.
constexpr double kLossGrowthLimit = 10.0;
/// Weight of the newest step in the moving average (about the last 10 steps).
constexpr double kLossAverageWeight = 0.1;

json state_to_json(const RunState& s, const optim::LearningRateSchedule& schedule,
                   std::uint64_t fingerprint) {
  json sched = json::object();
  for (const auto& [k, v] : schedule.state()) sched[k] = v;
  return json{{"epoch", s.epoch},
              {"step", s.step},
              {"global_step", s.global_step},
              {"best_metric", std::isnan(s.best_metric) ? json(nullptr) : json(s.best_metric)},
              {"best_epoch", s.best_epoch},
              {"epochs_without_improvement", s.epochs_without_improvement},
              {"epoch_loss_sum", s.epoch_loss_sum},
              {"epoch_loss_units", s.epoch_loss_units},
              {"epoch_tokens", s.epoch_tokens},
              {"epoch_seconds", s.epoch_seconds},
              {"total_seconds", s.total_seconds},
              {"total_tokens", s.total_tokens},
              {"finished", s.finished},
              {"loss_reference", std::isnan(s.loss_reference) ? json(nullptr) : json(s.loss_reference)},
              {"loss_average", std::isnan(s.loss_average) ? json(nullptr) : json(s.loss_average)},
              {"schedule", sched},
              {"data_fingerprint", std::to_string(fingerprint)}};
}

std::string fmt_count(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.0f", v);
  return buf;
}

RunState state_from_json(const json& j) {
  // Counts are whole numbers that fit their fields (a float or a huge value cast to int is
  // undefined behaviour); a wrong one is named.
  const auto count = [&](const char* key, double most) {
    const json& v = j.at(key);
    if (!v.is_number_integer() || v.get<double>() < 0 || v.get<double>() > most)
      throw Error(std::string("\"trainer.") + key + "\" must be a whole number in [0, " + fmt_count(most) +
                  "], not " + v.dump());
    return v.get<double>();
  };
  RunState s;
  s.epoch = static_cast<int>(count("epoch", 1e6));
  s.step = static_cast<std::size_t>(count("step", 1e15));
  s.global_step = static_cast<std::int64_t>(count("global_step", 1e15));
  s.best_metric = j.at("best_metric").is_null() ? NAN : j.at("best_metric").get<double>();
  s.best_epoch = static_cast<int>(count("best_epoch", 1e6));
  s.epochs_without_improvement = static_cast<int>(count("epochs_without_improvement", 1e6));
  s.epoch_loss_sum = j.at("epoch_loss_sum").get<double>();
  s.epoch_loss_units = j.at("epoch_loss_units").get<double>();
  s.epoch_tokens = static_cast<std::size_t>(count("epoch_tokens", 1e18));
  s.epoch_seconds = j.at("epoch_seconds").get<double>();
  s.total_seconds = j.at("total_seconds").get<double>();
  s.total_tokens = static_cast<std::size_t>(count("total_tokens", 1e18));
  s.finished = j.at("finished").get<bool>();
  // Absent from checkpoints written before the guard existed: it restarts from the next step.
  const auto optional_number = [&](const char* key) {
    return j.contains(key) && j.at(key).is_number() ? j.at(key).get<double>() : NAN;
  };
  s.loss_reference = optional_number("loss_reference");
  s.loss_average = optional_number("loss_average");
  return s;
}

std::uint64_t mix_seed(std::uint64_t seed, std::uint64_t a, std::uint64_t b, std::uint64_t c) {
  std::uint64_t words[4] = {seed, a, b, c};
  return stable_hash(words, sizeof words, 0x5EEDULL);
}

std::string fmt(double v, int decimals = 4) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

// Shortest form: 0.002, 1e+06.
std::string fmt_general(double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%g", v);
  return buf;
}

// ---------------------------------------------------------------- the run

// Where the wall-clock time of this process's training steps went (metrics.json "step_time"): the
// evidence for how well several workers scale. Each phase is timed on the calling thread from the
// end of the previous one, so the phases add up to the steps' time; `worker_busy` is each
// worker's own time in its forward and backward, so a fork-join's waiting is
// forward_backward - worker_busy[w].
struct StepClock {
  using Clock = std::chrono::steady_clock;
  double batch = 0;             // the batch's contents and its split between the workers
  double weight_packs = 0;      // packing the shared recurrent weights (several workers)
  double forward_backward = 0;  // the workers' forward and backward, from hand-over to the last one's end
  double exchange = 0;          // the gradient exchange between ranks
  double optimizer = 0;         // reduction, clipping norm, update, zeroing and copies
  double other = 0;             // loss checks, progress
  std::vector<double> worker_busy;
  long long steps = 0;
  Clock::time_point mark;
  // Seconds since the previous lap (or start()), added to `phase`.
  void start() { mark = Clock::now(); }
  void lap(double& phase) {
    const auto now = Clock::now();
    phase += std::chrono::duration<double>(now - mark).count();
    mark = now;
  }
  json to_json() const {
    return json{{"steps", steps},
                {"seconds",
                 {{"batch", batch},
                  {"weight_packs", weight_packs},
                  {"forward_backward", forward_backward},
                  {"exchange", exchange},
                  {"optimizer", optimizer},
                  {"other", other}}},
                {"worker_forward_backward_seconds", worker_busy}};
  }
};

// Scratch of one training step, one entry per worker of this process, kept across the steps and
// epochs of the run.
struct StepBuffers {
  StepBuffers() = default;
  explicit StepBuffers(int workers)
      : sub(static_cast<std::size_t>(workers)),
        losses(static_cast<std::size_t>(workers)),
        slices(static_cast<std::size_t>(workers)) {}
  std::vector<data::Batch> sub;                  // each worker's part of the batch
  std::vector<double> losses;                    // each worker's summed loss
  std::vector<std::vector<std::size_t>> slices;  // each worker's example indices
};

class Run {
 public:
  // How the run starts: a new directory, from the resume checkpoint, or again from the beginning
  // in the directory of a run that was killed before it wrote its first checkpoint.
  enum class Start { kNew, kResume, kRestart };

  Run(TrainConfig config, const TrainOptions& options, Start start, ProcessGroup& group)
      : config_(std::move(config)),
        options_(options),
        start_(start),
        resuming_(start == Start::kResume),
        group_(group),
        lead_(group.rank() == 0),
        progress_(options.progress, options.interactive, options.quiet || !lead_) {
    if (!lead_) options_.quiet = true;  // rank 0 alone speaks and writes the run directory
  }

  TrainResult execute();

 private:
  void prepare();
  void open_run_directory();
  void note_start();
  void setup_model();
  void load_resume_state();
  void run_epoch();
  void workers_forward_backward(std::span<const std::size_t> indices, double normalizer, StepBuffers& buf);
  void grow_step_buffers(const std::vector<std::vector<std::size_t>>& plan, std::size_t plan_steps);
  void note_padding(std::size_t plan_steps, std::size_t padded, std::size_t tokens);
  void end_epoch();
  void save_last();
  void optimizer_step(std::span<nn::ParameterStore* const> others);
  void share_weight_packs();
  void stop_sharing_weight_packs() noexcept;
  double reduce_and_measure(std::span<nn::ParameterStore* const> others);
  void finish(TrainOutcome outcome, TrainResult& result);
  void release_training_state();
  json calibrate(const LinearBaseline* baseline, json& ngram);
  json tune_thresholds(model::SequenceModel& m, const EvaluationResult& calibrated);
  json dev_mistakes(const io::TrainedModel& trained, const EvaluationResult& dev);
  [[noreturn]] void diverged(const std::string& what) const;
  void check_loss_growth(double step_loss);
  int global_workers() const { return group_.size() * config_.threads; }
  // config.json: the settings, and the job's shape when it has several ranks.
  json run_config_json() const {
    json j = config_to_json(config_);
    if (group_.size() > 1) j["job"] = {{"ranks", group_.size()}, {"threads_per_rank", config_.threads}};
    return j;
  }
  bool exchange_gradients(std::span<const double> losses, bool interrupt, double& loss_sum);

  TrainConfig config_;
  TrainOptions options_;
  Start start_;
  bool resuming_;
  ProcessGroup& group_;
  bool lead_;  // rank 0 (the only process of a plain run)
  ProgressLine progress_;
  fs::path dir_;
  PreparedData data_;
  model::ModelSpec spec_;
  std::vector<std::unique_ptr<model::SequenceModel>> replicas_;  // [0] is the master
  std::unique_ptr<optim::Optimizer> optimizer_;
  std::unique_ptr<optim::LearningRateSchedule> schedule_;
  std::unique_ptr<WorkerPool> pool_;
  InProcessReducer reducer_;
  std::vector<nn::ParameterStore*> replica_ptrs_;  // replicas 1.. (they get the new values in the step)
  // With several workers: every replica's recurrent layers, in the same order ([0]: the master's),
  // for the weight packs they share during a step (share_weight_packs()); empty with one worker.
  std::vector<std::vector<nn::RecurrentLayer*>> packed_layers_;
  std::vector<std::int32_t> merge_scratch_;               // merge_touched_rows()
  std::vector<optim::Optimizer::GradCheck> part_checks_;  // per worker of this process
  std::vector<double> part_squares_;  // per global worker: sum of squared gradients of its part
  // Ranks > 1: every global worker's gradient (1.. ; worker 0's goes into the master) and the
  // exchange buffers, allocated once.
  std::vector<nn::ParameterStore> peer_grads_;
  std::vector<nn::ParameterStore*> peer_ptrs_;
  std::vector<std::byte> send_, received_;
  std::vector<std::size_t> offsets_;
  double sent_bytes_ = 0;  // by this rank, over exchanges_ steps of this call
  long long exchanges_ = 0;
  RunState state_;
  std::size_t steps_per_epoch_ = 0;
  long long steps_this_run_ = 0;
  bool interrupted_ = false;
  bool early_stopped_ = false;
  json last_dev_ = json::object();
  json best_dev_ = json::object();
  json mistakes_;          // filled by calibrate() for single-label classifiers
  json label_thresholds_;  // filled by calibrate() for multi-label classifiers that tune them
  std::chrono::steady_clock::time_point epoch_start_;
  StepClock clock_;
  // The epoch's plan and the step's batch and worker slices, kept from epoch to epoch: the next
  // epoch's steps reuse the storage the first one grew instead of growing it again (issue 13).
  data::BatchPlan plan_;
  data::Batch batch_;
  StepBuffers step_buffers_;
  bool step_buffers_grown_ = false;  // grow_step_buffers ran in this process
};

void Run::setup_model() {
  spec_ = make_spec(config_, data_);
  validate(config_);                     // again, now that task/bidirectional/output are resolved
  io::model_header(spec_, data_.vocab);  // what a model file cannot hold is refused before training
  check_memory(spec_, config_, data_);   // and what cannot fit in memory, before allocating it
  const auto loss = make_loss_options(config_, data_, spec_);
  for (int w = 0; w < config_.threads; ++w) {
    replicas_.push_back(std::make_unique<model::SequenceModel>(spec_));
    replicas_.back()->set_loss_options(loss);
  }
  model::SequenceModel& master = *replicas_[0];
  Rng init_rng(config_.seed);
  master.init_parameters(init_rng);
  if (!config_.pretrained_embeddings.empty()) {
    const auto stats =
        master.embedding().load_pretrained(config_.pretrained_embeddings, [&](std::string_view token) {
          const auto id = data_.vocab.vocab.id(token);
          return id == text::Vocab::kUnk && token != text::Vocab::kUnkToken ? -1 : static_cast<int>(id);
        });
    progress_.note("pretrained vectors: " + std::to_string(stats.matched) + " of " +
                   std::to_string(data_.vocab.vocab.size()) + " vocabulary rows set from " +
                   std::to_string(stats.lines) + " lines of " + config_.pretrained_embeddings);
  }
  for (auto& r : replicas_) r->embedding().set_trainable(!config_.freeze_embeddings);
  for (std::size_t w = 1; w < replicas_.size(); ++w) replicas_[w]->copy_values_from(master);
  for (std::size_t w = 1; w < replicas_.size(); ++w) replica_ptrs_.push_back(&replicas_[w]->params());
  if (replicas_.size() > 1) {
    for (auto& r : replicas_) {
      nn::RnnStack& rnn = r->rnn();
      auto& layers = packed_layers_.emplace_back();
      for (int k = 0; k < rnn.config().layers; ++k)
        for (int d = 0; d < rnn.directions(); ++d) layers.push_back(&rnn.layer(k, d));
    }
  }

  optim::OptimizerConfig oc;
  oc.momentum = config_.optimizer == optim::OptimizerKind::kSgd ? static_cast<float>(config_.momentum) : 0.0f;
  oc.nesterov = config_.nesterov;
  oc.weight_decay = static_cast<float>(config_.weight_decay);
  optimizer_ = optim::make_optimizer(config_.optimizer, oc);
  optimizer_->bind(master.params());

  data::BatchPlanOptions plan;
  plan.batch_size = config_.batch_size;
  steps_per_epoch_ = (data_.train.size() + static_cast<std::size_t>(config_.batch_size) - 1) /
                     static_cast<std::size_t>(config_.batch_size);
  if (config_.epoch_step_limit > 0)
    steps_per_epoch_ = std::min(steps_per_epoch_, static_cast<std::size_t>(config_.epoch_step_limit));
  optim::ScheduleConfig sc;
  sc.base_rate = static_cast<float>(config_.learning_rate);
  sc.warmup_steps = config_.warmup_steps;
  sc.total_steps = static_cast<std::int64_t>(steps_per_epoch_) * config_.epochs;
  sc.plateau_goal =
      config_.metric == Metric::kLoss ? optim::PlateauGoal::kLower : optim::PlateauGoal::kHigher;
  schedule_ = optim::make_schedule(config_.schedule, sc);
  pool_ = std::make_unique<WorkerPool>(config_.threads);
  clock_.worker_busy.assign(static_cast<std::size_t>(config_.threads), 0.0);
  step_buffers_ = StepBuffers(config_.threads);
  if (group_.size() > 1) {
    // Gradient holders for the other global workers (values unused), allocated once.
    peer_grads_.assign(static_cast<std::size_t>(global_workers() - 1), master.params());
    for (auto& store : peer_grads_) peer_ptrs_.push_back(&store);
  }
}

void Run::save_last() {
  if (!lead_) return;
  io::write_checkpoint(dir_ / io::kResumeCheckpointFile, *replicas_[0], data_.vocab, optimizer_.get(),
                       state_to_json(state_, *schedule_, data_.fingerprint), config_to_json(config_));
}

void Run::diverged(const std::string& what) const {
  // Say only what is true of the run directory: checkpoints are written at epoch ends.
  std::error_code ec;
  std::string kept;
  if (state_.best_epoch > 0 && fs::exists(dir_ / io::kSelectedCheckpointFile, ec))
    kept = "the best model so far (epoch " + std::to_string(state_.best_epoch) + ", dev " +
           to_string(*config_.metric) + " " + fmt(state_.best_metric) + ") is in " +
           (dir_ / io::kSelectedCheckpointFile).string();
  else
    kept = "no checkpoint was written (the first epoch did not end)";
  throw DivergenceError(what + " at epoch " + std::to_string(state_.epoch + 1) + ", step " +
                        std::to_string(state_.step + 1) + ". Training stopped; " + kept +
                        ". Likely fixes: a lower --learning-rate (now " + fmt_general(config_.learning_rate) +
                        "), gradient clipping (--clip-norm, now " + fmt(config_.clip_norm, 2) +
                        "), or --warmup-steps.");
}

void Run::check_loss_growth(double step_loss) {
  if (std::isnan(state_.loss_reference) || std::isnan(state_.loss_average)) {
    state_.loss_reference = step_loss;
    state_.loss_average = step_loss;
    return;
  }
  state_.loss_average = (1.0 - kLossAverageWeight) * state_.loss_average + kLossAverageWeight * step_loss;
  if (state_.loss_reference > 0 && state_.loss_average > kLossGrowthLimit * state_.loss_reference)
    diverged("the training loss grew to " + fmt(state_.loss_average) + " (average of the last steps), over " +
             fmt(kLossGrowthLimit, 0) + " times its " + fmt(state_.loss_reference) + " at the first step");
}

// Reduce, gradient norm (when clipping), optimizer update, zeroing of every replica's gradients
// and the copy of the new values into replicas 1.., split across the workers by element ranges of
// the dense parameters and by touched rows of the sparse-row ones. Without clipping all of it is
// one pass over the parameters (optim::Optimizer::Fusion) in one fork-join; clipping needs the
// norm of the reduced gradient first (one more fork-join: reduce + norm, whose parts are added in
// worker order). Every operation is element-wise except the norm, so the result depends on the
// seed and the thread count only; with one thread it is the serial reduce + clip_grad_norm +
// Optimizer::step + zero_grad.
void Run::optimizer_step(std::span<nn::ParameterStore* const> others) {
  auto& master = replicas_[0]->params();
  const int parts = pool_->size();
  optim::Optimizer::Fusion fusion;
  fusion.zero = true;
  fusion.zero_also = replica_ptrs_;
  fusion.copy_to = replica_ptrs_;
  if (config_.clip_norm > 0) {
    const double norm = reduce_and_measure(others);
    if (!std::isfinite(norm)) diverged("the gradient norm became " + fmt(norm));
    // Pascanu et al. 2013, Algorithm 1: g <- (threshold / |g|) g when |g| exceeds the threshold.
    if (norm > config_.clip_norm) fusion.grad_scale = static_cast<float>(config_.clip_norm / norm);
  } else {
    // No norm needed: the reduction moves into the update's pass. Its sparse rows are split by
    // row across the workers, so the union of the touched rows is known first.
    optim::Optimizer::merge_touched_rows(master, others, merge_scratch_);
    fusion.add = others;
  }
  optimizer_->prepare_step(master, schedule_->rate(state_.global_step));
  part_checks_.assign(static_cast<std::size_t>(parts), optim::Optimizer::GradCheck::kFinite);
  pool_->run([&](int part) {
    part_checks_[static_cast<std::size_t>(part)] = optimizer_->update_part(master, part, parts, fusion);
  });
  for (auto& r : replicas_)
    for (nn::Parameter& p : r->params()) p.touched_rows.clear();  // capacity kept
  // Without clipping the gradients were checked in the update's pass (a non-finite value makes
  // the norm non-finite: the same stop, after the update instead of before; nothing is saved).
  using Check = optim::Optimizer::GradCheck;
  if (std::find(part_checks_.begin(), part_checks_.end(), Check::kNaN) != part_checks_.end())
    diverged("the gradient norm became " + fmt(std::numeric_limits<double>::quiet_NaN()));
  if (std::find(part_checks_.begin(), part_checks_.end(), Check::kInfinite) != part_checks_.end())
    diverged("the gradient norm became " + fmt(std::numeric_limits<double>::infinity()));
  ++state_.global_step;
}

// The reduction of the workers' gradients `others` into the master and the master gradient's
// norm, split across the workers.
double Run::reduce_and_measure(std::span<nn::ParameterStore* const> others) {
  auto& master = replicas_[0]->params();
  const int parts = pool_->size();
  // The norm is summed over as many element ranges as there are workers in the whole job, so R
  // ranks of T threads add the same partial sums in the same order as one process of R*T threads.
  const int norm_parts = global_workers();
  part_squares_.assign(static_cast<std::size_t>(norm_parts), 0.0);
  auto part_norm = [&](int part) {
    double squares = 0.0;
    for (nn::Parameter& p : master) {
      if (!p.trainable) continue;
      if (p.sparse_rows) {
        if (part != 0) continue;
        p.finalize_touched_rows();
        const Eigen::Index cols = p.grad.cols();
        for (const std::int32_t row : p.touched_rows)
          squares += optim::sum_squares(p.grad.data() + row * cols, cols);
        continue;
      }
      const auto [begin, end] = optim::Optimizer::part_range(p.grad.size(), part, norm_parts);
      squares += optim::sum_squares(p.grad.data() + begin, end - begin);
    }
    part_squares_[static_cast<std::size_t>(part)] = squares;
  };
  if (norm_parts == parts) {
    pool_->run([&](int part) {  // each worker reduces and measures the same element range
      if (!others.empty()) reducer_.reduce_part(master, others, part, parts);
      part_norm(part);
    });
  } else {
    if (!others.empty()) pool_->run([&](int part) { reducer_.reduce_part(master, others, part, parts); });
    pool_->run([&](int part) {
      for (int p = part; p < norm_parts; p += parts) part_norm(p);
    });
  }
  double total = 0.0;
  for (const double s : part_squares_) total += s;
  return std::sqrt(total);
}

// Ranks > 1: every rank sends its workers' losses and gradients (dense tensors whole, sparse-row
// tensors as their touched rows) and its interrupt flag; every rank then holds worker 0's gradient
// in the master and worker g's in peer_grads_[g - 1], so the reduction that follows adds them in
// worker order exactly as one process with all the workers as threads would. Returns whether any
// rank saw an interrupt; `loss_sum` gets the workers' losses added in worker order.
bool Run::exchange_gradients(std::span<const double> losses, bool interrupt, double& loss_sum) {
  send_.clear();
  auto put = [&](const void* data, std::size_t bytes) {
    const auto* b = static_cast<const std::byte*>(data);
    send_.insert(send_.end(), b, b + bytes);
  };
  const auto flag = static_cast<std::uint8_t>(interrupt ? 1 : 0);
  put(&flag, 1);
  for (std::size_t w = 0; w < replicas_.size(); ++w) {
    put(&losses[w], sizeof(double));
    for (const nn::Parameter& p : replicas_[w]->params()) {
      if (!p.trainable) continue;
      if (!p.sparse_rows) {
        put(p.grad.data(), static_cast<std::size_t>(p.grad.size()) * sizeof(float));
        continue;
      }
      const auto count = static_cast<std::uint32_t>(p.touched_rows.size());
      const auto cols = static_cast<std::size_t>(p.grad.cols());
      put(&count, sizeof count);
      put(p.touched_rows.data(), count * sizeof(std::int32_t));
      for (const std::int32_t row : p.touched_rows)
        put(p.grad.data() + static_cast<std::size_t>(row) * cols, cols * sizeof(float));
    }
  }
  group_.all_gather(send_, received_, offsets_);
  sent_bytes_ += static_cast<double>(send_.size());
  ++exchanges_;

  bool any_interrupt = false;
  loss_sum = 0;
  std::size_t pos = 0, end = 0;
  auto get = [&](void* data, std::size_t bytes) {
    if (bytes > end - pos) throw Error("gradient exchange: a rank sent fewer bytes than this model needs");
    std::memcpy(data, received_.data() + pos, bytes);
    pos += bytes;
  };
  std::size_t g = 0;
  for (int r = 0; r < group_.size(); ++r) {
    pos = offsets_[static_cast<std::size_t>(r)];
    end = offsets_[static_cast<std::size_t>(r) + 1];
    std::uint8_t their_flag = 0;
    get(&their_flag, 1);
    any_interrupt = any_interrupt || their_flag != 0;
    for (int w = 0; w < config_.threads; ++w, ++g) {
      double loss = 0;
      get(&loss, sizeof loss);
      loss_sum += loss;
      nn::ParameterStore& into = g == 0 ? replicas_[0]->params() : peer_grads_[g - 1];
      for (nn::Parameter& p : into) {
        if (!p.trainable) continue;
        if (!p.sparse_rows) {
          get(p.grad.data(), static_cast<std::size_t>(p.grad.size()) * sizeof(float));
          continue;
        }
        for (const std::int32_t row : p.touched_rows) p.grad.row(row).setZero();
        std::uint32_t count = 0;
        get(&count, sizeof count);
        if (count > static_cast<std::uint32_t>(p.grad.rows()) * 4u)
          throw Error("gradient exchange: a rank sent a bad row count for " + p.name);
        p.touched_rows.resize(count);
        get(p.touched_rows.data(), count * sizeof(std::int32_t));
        const auto cols = static_cast<std::size_t>(p.grad.cols());
        for (const std::int32_t row : p.touched_rows) {
          if (row < 0 || row >= p.grad.rows())
            throw Error("gradient exchange: a rank sent a bad row of " + p.name);
          get(p.grad.data() + static_cast<std::size_t>(row) * cols, cols * sizeof(float));
        }
      }
    }
    if (pos != end) throw Error("gradient exchange: a rank sent more bytes than this model needs");
  }
  return any_interrupt;
}

// Several workers: the recurrent layers' weight packs (the panel layouts the AVX-512 products
// read) are made once per step from the master's weights, split across the workers, and every
// replica's layers read them in this step's forward and backward, instead of each replica packing
// every weight in its forward and again in its backward (issue 13). The replicas hold the
// master's weights (the last optimizer step copied them), and the packs are copies, so the
// results are the same bits. Packed at the start of each step, from the weights of that moment.
void Run::share_weight_packs() {
  if (packed_layers_.empty()) return;
  const std::vector<nn::RecurrentLayer*>& master = packed_layers_[0];
  for (nn::RecurrentLayer* layer : master) layer->reserve_packs();
  const int parts = pool_->size();
  pool_->run([&](int part) {
    for (nn::RecurrentLayer* layer : master) layer->pack_weights(part, parts);
  });
  for (const auto& layers : packed_layers_)
    for (std::size_t i = 0; i < layers.size(); ++i) layers[i]->read_packs_from(master[i]);
}

// After the step's backward: the layers pack per call again (dev evaluation, the weights change).
void Run::stop_sharing_weight_packs() noexcept {
  for (const auto& layers : packed_layers_)
    for (nn::RecurrentLayer* layer : layers) layer->read_packs_from(nullptr);
}

// One step's forward and backward passes over the batch `indices`: this process's share of it,
// split between its workers; each worker's loss goes to buf.losses (not yet checked for being
// finite).
void Run::workers_forward_backward(std::span<const std::size_t> indices, double normalizer,
                                   StepBuffers& buf) {
  const int workers = config_.threads;  // in this process
  const auto all_workers = static_cast<std::size_t>(global_workers());
  const auto first_worker = static_cast<std::size_t>(group_.rank()) * static_cast<std::size_t>(workers);
  // Worker g (of all the job's workers) takes examples g, g + workers, ... of the batch: a batch
  // is cut from a run of length-sorted examples, so dealing them out like cards gives every
  // worker about the same number of tokens (the step waits for the slowest worker).
  for (int w = 0; w < workers; ++w) {
    auto& mine = buf.slices[static_cast<std::size_t>(w)];
    mine.clear();
    for (std::size_t i = first_worker + static_cast<std::size_t>(w); i < indices.size(); i += all_workers)
      mine.push_back(indices[i]);
  }
  // Every worker: forward and backward on its slice of the batch in its replica (which the last
  // optimizer step brought up to the master's weights), then its sparse rows sorted and unique
  // (a row is listed once per token by the embedding's backward; the reduction adds each once).
  clock_.lap(clock_.batch);
  share_weight_packs();
  clock_.lap(clock_.weight_packs);
  struct StopSharing {
    Run& run;
    ~StopSharing() { run.stop_sharing_weight_packs(); }
  } stop_sharing{*this};
  try {
    pool_->run([&](int w) {
      const auto& slice = buf.slices[static_cast<std::size_t>(w)];
      buf.losses[static_cast<std::size_t>(w)] = 0.0;
      if (slice.empty()) return;
      const auto busy_start = StepClock::Clock::now();
      data::Batch& mine = buf.sub[static_cast<std::size_t>(w)];
      data::fill_batch(data_.train, slice, mine, config_.max_length);
      Rng dropout(mix_seed(config_.seed, static_cast<std::uint64_t>(state_.epoch), state_.step,
                           first_worker + static_cast<std::uint64_t>(w)));
      model::SequenceModel& replica = *replicas_[static_cast<std::size_t>(w)];
      buf.losses[static_cast<std::size_t>(w)] =
          replica.train_batch(mine, data_.train, config_.bptt_window, normalizer, dropout);
      for (nn::Parameter& p : replica.params())
        if (p.sparse_rows) p.finalize_touched_rows();
      clock_.worker_busy[static_cast<std::size_t>(w)] +=
          std::chrono::duration<double>(StepClock::Clock::now() - busy_start).count();
    });
  } catch (const DivergenceError& e) {
    diverged(e.what());
  }
  clock_.lap(clock_.forward_backward);
}

// Before the first step of this process: one forward and backward pass of the plan's batch with
// the largest grid (padded length x examples), whose gradients are then dropped, so that the
// step buffers of every replica (and the pages behind them) reach their size before the timed
// steps instead of growing and faulting in over the first epoch (issue 13). Nothing carries over
// into the training: the dropout stream of a step is derived from (seed, epoch, step, worker),
// every buffer is written before it is read, and the gradients and touched rows are cleared.
void Run::grow_step_buffers(const std::vector<std::vector<std::size_t>>& plan, std::size_t plan_steps) {
  std::size_t widest = plan_steps, widest_cells = 0;
  for (std::size_t i = state_.step; i < plan_steps; ++i) {
    std::size_t longest = 0;
    for (const std::size_t e : plan[i]) longest = std::max(longest, data_.train.length(e));
    if (config_.max_length > 0) longest = std::min(longest, static_cast<std::size_t>(config_.max_length));
    if (longest * plan[i].size() > widest_cells) {
      widest_cells = longest * plan[i].size();
      widest = i;
    }
  }
  if (widest == plan_steps) return;
  const StepClock clock = clock_;  // the warm-up is not a training step
  data::fill_batch(data_.train, plan[widest], batch_, config_.max_length);
  workers_forward_backward(plan[widest], replicas_[0]->loss_units(batch_), step_buffers_);
  clock_ = clock;
  for (auto& r : replicas_) r->params().zero_grad();
  // The optimizer's state is zeroed storage that the allocator may have handed out untouched
  // (fresh pages read as zero): every page gets one of its values written back, unchanged, so
  // that the first update does not fault them in.
  for (const optim::StateTensor& t : optimizer_->state_tensors()) {
    volatile float* p = t.second->data();
    const Eigen::Index n = t.second->size();
    for (Eigen::Index i = 0; i < n; i += 1024) p[i] = p[i];  // 1024 floats: a 4 KiB page
    if (n > 0) p[n - 1] = p[n - 1];
  }
}

// The share of the batch grid that was padding, once per run (only meaningful when the epoch
// ran from its start).
void Run::note_padding(std::size_t plan_steps, std::size_t padded, std::size_t tokens) {
  if (state_.epoch != 0 && !resuming_) return;
  if (padded > 0 && state_.step == plan_steps && tokens == state_.epoch_tokens)
    progress_.note(
        "padding: " + fmt(100.0 * (1.0 - static_cast<double>(tokens) / static_cast<double>(padded)), 1) +
        "% of the batch grid (length bucketing on)");
}

void Run::run_epoch() {
  data::BatchPlanOptions plan_options;
  plan_options.batch_size = config_.batch_size;
  data::plan_batches(data_.train, plan_options, config_.seed, static_cast<std::uint64_t>(state_.epoch),
                     plan_);
  const std::vector<std::vector<std::size_t>>& plan = plan_.batches;
  // epoch_step_limit: the epoch ends after the first steps of its plan.
  const std::size_t plan_steps = std::min(plan.size(), steps_per_epoch_);
  progress_.start_epoch(state_.epoch + 1, config_.epochs, plan_steps);
  epoch_start_ = std::chrono::steady_clock::now();
  data::Batch& batch = batch_;
  StepBuffers& buf = step_buffers_;
  if (!step_buffers_grown_) {
    grow_step_buffers(plan, plan_steps);
    step_buffers_grown_ = true;
  }
  std::vector<nn::ParameterStore*> others;
  for (std::size_t w = 1; w < replicas_.size(); ++w) others.push_back(&replicas_[w]->params());
  std::size_t padded = 0, tokens = 0;
  for (; state_.step < plan_steps; ++state_.step) {
    const auto& indices = plan[state_.step];
    clock_.start();
    data::fill_batch(data_.train, indices, batch, config_.max_length);
    const double normalizer = replicas_[0]->loss_units(batch);
    workers_forward_backward(indices, normalizer, buf);
    double loss_sum = 0;
    const bool peer_interrupt =
        group_.size() > 1 && exchange_gradients(buf.losses, interrupt_requested(), loss_sum);
    clock_.lap(clock_.exchange);
    if (group_.size() == 1)
      for (const double l : buf.losses) loss_sum += l;
    if (!std::isfinite(loss_sum)) diverged("the training loss became " + fmt(loss_sum));
    // Per token for CRF taggers (their loss units are sentences, whose length varies by batch).
    check_loss_growth(loss_sum / (spec_.output == model::OutputKind::kCrf
                                      ? static_cast<double>(batch.tokens())
                                      : normalizer));
    clock_.lap(clock_.other);
    optimizer_step(group_.size() > 1 ? std::span<nn::ParameterStore* const>(peer_ptrs_) : others);
    clock_.lap(clock_.optimizer);

    state_.epoch_loss_sum += loss_sum;
    // The reported train loss is per token for every output, as the dev loss is (a CRF's loss
    // units for the gradient are sentences).
    state_.epoch_loss_units +=
        spec_.output == model::OutputKind::kCrf ? static_cast<double>(batch.tokens()) : normalizer;
    state_.epoch_tokens += batch.tokens();
    tokens += batch.tokens();
    padded += batch.padded();
    progress_.step(state_.step + 1, state_.epoch_loss_sum / state_.epoch_loss_units, tokens);
    clock_.lap(clock_.other);
    ++clock_.steps;

    ++steps_this_run_;
    const bool step_hook =
        options_.interrupt_after_steps > 0 && steps_this_run_ == options_.interrupt_after_steps;
    // Ranks stop together at the step where any of them saw the signal (told in the exchange).
    if ((group_.size() > 1 ? peer_interrupt : interrupt_requested()) || step_hook) {
      ++state_.step;
      interrupted_ = true;
      return;
    }
  }
  note_padding(plan_steps, padded, tokens);
}

void Run::end_epoch() {
  const double seconds =
      state_.epoch_seconds +
      std::chrono::duration<double>(std::chrono::steady_clock::now() - epoch_start_).count();
  const auto dev = evaluate(*replicas_[0], data_.dev);
  const double metric = dev.metric(*config_.metric);
  const double rate = schedule_->rate(std::max<std::int64_t>(state_.global_step - 1, 0));
  const bool improved = metric_improves(*config_.metric, metric, state_.best_metric);
  const double train_loss = state_.epoch_loss_sum / std::max(state_.epoch_loss_units, 1e-300);
  const double tok_s = seconds > 0 ? static_cast<double>(state_.epoch_tokens) / seconds : 0.0;
  state_.total_seconds += seconds;
  state_.total_tokens += state_.epoch_tokens;
  last_dev_ = dev.summary();
  json line{{"epoch", state_.epoch + 1}, {"train_loss", train_loss}, {"dev", last_dev_},
            {"learning_rate", rate},     {"seconds", seconds},       {"tokens_per_second", tok_s},
            {"improved", improved}};
  if (lead_) {
    std::ofstream log(dir_ / "log.jsonl", std::ios::app);
    log << line.dump() << '\n';
    if (!log) throw IoError("cannot append to " + (dir_ / "log.jsonl").string());
  }
  if (improved) {
    state_.best_metric = metric;
    state_.best_epoch = state_.epoch + 1;
    state_.epochs_without_improvement = 0;
    best_dev_ = dev.to_json();
  } else {
    ++state_.epochs_without_improvement;
  }
  if (config_.schedule == optim::ScheduleKind::kPlateau && schedule_->observe(metric))
    progress_.note("learning rate lowered to " + fmt(schedule_->rate(state_.global_step), 6));
  std::string summary =
      "train loss " + fmt(train_loss) + "  dev loss " + fmt(last_dev_["loss"].get<double>());
  for (const auto& [key, label] : {std::pair{"accuracy", "accuracy"},
                                   {"macro_f1", "macro F1"},
                                   {"token_accuracy", "token accuracy"},
                                   {"span_f1", "span F1"}})
    if (last_dev_.contains(key))
      summary += std::string("  ") + label + " " + fmt(last_dev_[key].get<double>());
  summary += improved ? "  (best)" : "";
  progress_.finish_epoch(summary);

  ++state_.epoch;
  state_.step = 0;
  state_.epoch_loss_sum = state_.epoch_loss_units = 0;
  state_.epoch_tokens = 0;
  state_.epoch_seconds = 0;
  if (config_.patience > 0 && state_.epochs_without_improvement >= config_.patience &&
      state_.epoch < config_.epochs) {
    early_stopped_ = true;
    progress_.note(std::string("early stop: dev ") + to_string(*config_.metric) + " did not improve for " +
                   std::to_string(config_.patience) + " epoch(s); best was epoch " +
                   std::to_string(state_.best_epoch));
  }
  state_.finished = early_stopped_ || state_.epoch >= config_.epochs;
  if (improved && lead_) {
    io::write_checkpoint(dir_ / io::kSelectedCheckpointFile, *replicas_[0], data_.vocab, nullptr,
                         state_to_json(state_, *schedule_, data_.fingerprint), config_to_json(config_));
  }
  save_last();
  if (lead_ && best_dev_.is_object() && !best_dev_.empty())
    write_file_atomic(dir_ / "best-dev-metrics.json", best_dev_.dump(2) + "\n");
}

void Run::load_resume_state() {
  const json saved =
      io::restore_checkpoint(dir_ / io::kResumeCheckpointFile, *replicas_[0], optimizer_.get());
  const json& trainer = saved.at("trainer");
  // The trainer state is JSON in a file that may have been edited or damaged: wrong types and
  // values that would run past the configured epochs are a format error naming the checkpoint.
  const std::string checkpoint = (dir_ / io::kResumeCheckpointFile).string();
  std::vector<optim::StateScalar> sched;
  std::string fingerprint;
  try {
    if (!trainer.is_object()) throw Error("\"trainer\" must be an object");
    fingerprint = trainer.value("data_fingerprint", std::string());
    state_ = state_from_json(trainer);
    for (const auto& [k, v] : trainer.at("schedule").items()) sched.emplace_back(k, v.get<double>());
  } catch (const json::exception& e) {
    throw FormatError(checkpoint, std::string("header: bad \"trainer\" state: ") + e.what());
  } catch (const Error& e) {
    throw FormatError(checkpoint, std::string("header: ") + e.what());
  }
  if (fingerprint != std::to_string(data_.fingerprint))
    throw ConfigError("resume", "the training data of " + dir_.string() + " changed since the run started (" +
                                    config_.train + "); start a new run");
  if (options_.epochs > 0) {
    if (options_.epochs < state_.epoch)
      throw ConfigError("epochs", dir_.string() + " has already done " + std::to_string(state_.epoch) +
                                      " epochs; give at least that many to extend it");
    if (options_.epochs > state_.epoch) {
      // Extending: a finished or early-stopped run trains on; patience counts from here.
      state_.finished = false;
      state_.epochs_without_improvement = 0;
    }
  }
  if (state_.epoch < 0 || state_.epoch > config_.epochs || state_.step > steps_per_epoch_ ||
      state_.global_step < 0 || state_.best_epoch < 0 || state_.best_epoch > state_.epoch ||
      state_.epochs_without_improvement < 0)
    throw FormatError(checkpoint, "header: the \"trainer\" state (epoch " + std::to_string(state_.epoch) +
                                      ", step " + std::to_string(state_.step) + ") does not fit this run's " +
                                      std::to_string(config_.epochs) + " epochs of " +
                                      std::to_string(steps_per_epoch_) + " steps");
  schedule_->load_state(sched);
  optimizer_->set_step_count(state_.global_step);
  for (std::size_t w = 1; w < replicas_.size(); ++w) replicas_[w]->copy_values_from(*replicas_[0]);
  // Keep only the log lines of completed epochs (an interrupted epoch wrote none).
  const fs::path log_path = dir_ / "log.jsonl";
  std::ifstream in(log_path);
  std::string line, kept;
  int lines = 0;
  while (std::getline(in, line) && lines < state_.epoch) {
    kept += line + "\n";
    const json j = json::parse(line, nullptr, false);
    if (!j.is_discarded() && j.value("improved", false)) best_dev_ = j.at("dev");
    ++lines;
  }
  if (lead_) write_file_atomic(log_path, kept);
  const fs::path best_metrics = dir_ / "best-dev-metrics.json";
  if (fs::exists(best_metrics)) best_dev_ = json::parse(read_file(best_metrics));
}

void Run::finish(TrainOutcome outcome, TrainResult& result) {
  result.outcome = outcome;
  result.epochs_completed = state_.epoch;
  result.best_epoch = state_.best_epoch;
  result.metric = to_string(*config_.metric);
  result.best_metric = state_.best_metric;
  result.seconds = state_.total_seconds;
  result.tokens_per_second =
      state_.total_seconds > 0 ? static_cast<double>(state_.total_tokens) / state_.total_seconds : 0;
  result.peak_rss_bytes = peak_rss_bytes();
  if (outcome == TrainOutcome::kInterrupted) return;
  result.final_metrics =
      json{{"task", data::to_string(*config_.task)},
           {"outcome", outcome == TrainOutcome::kEarlyStopped ? "early_stopped" : "finished"},
           {"epochs", state_.epoch},
           {"best_epoch", state_.best_epoch},
           {"metric", to_string(*config_.metric)},
           {"best_metric", state_.best_metric},
           {"dev", best_dev_},
           {"train_examples", data_.train.size()},
           {"dev_examples", data_.dev.size()},
           {"vocabulary_size", data_.vocab.vocab.size()},
           {"parameters", replicas_[0]->params().parameter_count()},
           {"seconds", state_.total_seconds},
           {"tokens_per_second", result.tokens_per_second},
           {"threads", config_.threads},
           {"ranks", group_.size()},
           {"peak_rss_bytes", result.peak_rss_bytes},
           {"step_time", clock_.to_json()}};
  if (!data_.cut_examples.empty()) result.final_metrics["cut_to_max_tokens"] = data_.cut_examples;
  if (exchanges_ > 0)  // what rank 0 sent per step; each rank receives the other ranks' share
    result.final_metrics["exchange_bytes_per_step"] = sent_bytes_ / static_cast<double>(exchanges_);
  if (!lead_) return;
  const std::size_t train_examples = data_.train.size();
  release_training_state();
  // The n-gram part (README "N-gram part") is the linear baseline's fit: with ngram_part auto it is
  // fitted even when the baseline's report is not wanted (--no-baseline).
  const bool want_part = data_.task == data::Task::kClassify && !data_.multi_label &&
                         config_.ngram_part == NgramPartMode::kAuto && state_.best_epoch > 0;
  std::optional<LinearBaseline> fitted;
  if ((options_.fit_baseline || want_part) && !data_.multi_label) {
    const auto start = std::chrono::steady_clock::now();
    const std::string dev_path = config_.dev.empty() ? config_.train : config_.dev;
    // The training split is read again from its file, one example at a time: the run holds only
    // its encoded examples, and the baseline only its interned n-gram rows.
    const ExampleStream train_split = read_run_split(config_, false, data_.tag_scheme);
    // The fit can take a while on a large corpus (its cost follows the distinct n-grams, not the
    // epochs): say what runs now, and its cost when it is done.
    LinearFitCaps caps = linear_fit_caps_for(config_);
    caps.known_examples = train_examples;
    if (options_.interrupt_linear_fit) request_interrupt();
    const bool sampled = caps.examples > 0 && train_examples > caps.examples;
    progress_.note(std::string("fitting the ") +
                   (want_part ? "n-gram part (the linear baseline's model)" : "linear baseline") + " on " +
                   (sampled ? std::to_string(caps.examples) + " of the " : std::string()) +
                   std::to_string(train_examples) + " training examples" +
                   (sampled ? " (capped by --linear-fit-examples: those of lowest hash; " : " (") +
                   "L2 logistic regression, C chosen on dev" +
                   (want_part ? "; --ngram-part off --no-baseline skip it" : "; --no-baseline skips it") +
                   ")");
    try {
      fitted = LinearBaseline::fit(
          data_.vocab, data_.task,
          [&](const ExampleVisitor& visit) {
            std::size_t examples_read = 0;  // per pass: the baseline may read the split more than once
            train_split([&](const data::Example& ex) {
              if (interrupt_requested())
                throw Interrupted("the linear fit was interrupted while reading " + config_.train);
              ++examples_read;
              visit(ex);
            });
            if (examples_read != train_examples)
              throw IoError(
                  config_.train +
                  ": the file changed during training: read again for the linear baseline, it has " +
                  std::to_string(examples_read) + " training examples instead of " +
                  std::to_string(train_examples));
          },
          config_.train, read_run_split(config_, true, data_.tag_scheme), dev_path, 0,
          ngram_order_for(config_), config_.threads, caps);
    } catch (const Interrupted&) {
      // The epochs are saved (the resume checkpoint says training is over): resuming fits again
      // and finishes the run. metrics.json is not written, so the run is not mistaken for finished.
      progress_.note("\ninterrupted during the linear fit; the trained epochs are saved in " +
                     (dir_ / io::kResumeCheckpointFile).string() + "; finish with: gyre train --resume " +
                     dir_.string());
      result.outcome = TrainOutcome::kInterrupted;
      result.final_metrics = json();
      return;
    }
    const LinearBaseline& baseline = *fitted;
    const LinearFitUse& use = baseline.use();
    char c_text[32];
    std::snprintf(c_text, sizeof c_text, "%g", baseline.c());
    const double fit_seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    progress_.note("linear fit: " + std::to_string(baseline.feature_count()) + " features" +
                   (use.features_capped() ? " (capped by --linear-fit-features: the n-grams in the most "
                                            "training examples, of " +
                                                std::to_string(use.candidate_features) + " in two or more)"
                                          : std::string()) +
                   ", " + std::to_string(use.examples) + " training examples, C " + c_text +
                   " chosen on dev, " + fmt(fit_seconds, 1) + " s");
    json fit_use = baseline.use_json();
    fit_use["seconds"] = fit_seconds;
    result.final_metrics["linear_fit"] = std::move(fit_use);
    if (options_.fit_baseline)
      result.final_metrics["baseline"] = {
          {"name", baseline.description()},
          {"c", baseline.c()},
          {"features", baseline.feature_count()},
          {"dev", baseline.score(read_run_split(config_, true, data_.tag_scheme), dev_path)},
          {"seconds", std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count()}};
  }
  if (state_.best_epoch > 0) {
    json ngram;
    result.final_metrics["calibration"] = calibrate(want_part ? &*fitted : nullptr, ngram);
    if (!ngram.is_null()) result.final_metrics["ngram_part"] = std::move(ngram);
    if (!mistakes_.is_null()) result.final_metrics["dev_mistakes"] = std::move(mistakes_);
    if (!label_thresholds_.is_null()) result.final_metrics["label_thresholds"] = std::move(label_thresholds_);
  }
  write_file_atomic(dir_ / "metrics.json", result.final_metrics.dump(2) + "\n");
}

// Training is over (the selected and resume checkpoints are written): the replicas with their
// workspaces, the optimizer's moments, the worker threads and the training arena are freed
// before the linear baseline's fit and the calibration, which read the files and the checkpoint
// again, so the process's peak memory is the larger of training and those steps, not their sum
// (issue 13, "Scale").
void Run::release_training_state() {
  pool_.reset();  // joins the worker threads
  optimizer_.reset();
  std::vector<std::vector<nn::RecurrentLayer*>>().swap(packed_layers_);
  replicas_.clear();
  std::vector<nn::ParameterStore>().swap(peer_grads_);
  std::vector<nn::ParameterStore*>().swap(peer_ptrs_);
  std::vector<std::byte>().swap(send_);
  std::vector<std::byte>().swap(received_);
  std::vector<nn::ParameterStore*>().swap(replica_ptrs_);
  data_.train = data::EncodedCorpus();
  plan_ = data::BatchPlan();
  batch_ = data::Batch();
  step_buffers_ = StepBuffers();
}

// The most confident dev mistakes of the (calibrated) best model, each with its integrated-gradients
// attribution and, for a model with an n-gram part, the part's exact share (train/explain.hpp), for
// the report.
json Run::dev_mistakes(const io::TrainedModel& trained, const EvaluationResult& dev) {
  const model::SequenceModel& m = *trained.model;
  constexpr std::size_t kShown = 8;  // enough to see a pattern, few enough to read (our choice)
  std::vector<std::size_t> wrong;
  for (std::size_t i = 0; i < data_.dev.size(); ++i)
    if (dev.predictions[i].labels.at(0) != data_.dev[i].targets.at(0)) wrong.push_back(i);
  std::stable_sort(wrong.begin(), wrong.end(), [&](std::size_t a, std::size_t b) {
    return dev.predictions[a].confidence > dev.predictions[b].confidence;
  });
  if (wrong.size() > kShown) wrong.resize(kShown);
  // Their texts: the dev split read again (the run keeps only its encoded examples).
  std::map<std::size_t, data::Example> texts;
  for (const std::size_t i : wrong) texts[i];
  std::size_t index = 0;
  read_run_split(config_, true, data_.tag_scheme)([&](const data::Example& ex) {
    if (const auto it = texts.find(index++); it != texts.end()) it->second = ex;
  });
  if (index != data_.dev.size())
    throw IoError((config_.dev.empty() ? config_.train : config_.dev) +
                  ": the file changed during training: read again for the dev mistakes, it has " +
                  std::to_string(index) + " dev examples instead of " + std::to_string(data_.dev.size()));
  data::Encoder encoder(data_.vocab, data::Task::kClassify);
  if (!trained.ngram_part.empty()) encoder.set_ngram_part(&trained.ngram_part);  // the words and scores
  json out = json::array();
  for (const std::size_t i : wrong) {
    const data::Example& ex = texts.at(i);
    std::vector<std::string> tokens;
    data::EncodedExample encoded;
    encoder.encode_text(ex.text, tokens, encoded);
    const int predicted = dev.predictions[i].labels.at(0);
    out.push_back({{"line", ex.line},
                   {"text", ex.text},
                   {"gold", m.spec().labels[static_cast<std::size_t>(data_.dev[i].targets.at(0))]},
                   {"predicted", m.spec().labels[static_cast<std::size_t>(predicted)]},
                   {"probability", dev.predictions[i].confidence},
                   {"why", explain(trained, encoded, tokens, predicted, kAttributionSteps)}});
  }
  return out;
}

// Temperature scaling of the best checkpoint on dev (gyre/train/calibrate.hpp): the checkpoint is
// rewritten (atomically) with the temperature in its header, so eval, predict and export use it.
// A checkpoint that already has one (a finished run extended with --resume) is refitted.
json Run::calibrate(const LinearBaseline* baseline, json& ngram) {
  const fs::path best = dir_ / io::kSelectedCheckpointFile;
  io::TrainedModel trained = io::load_trained_model(best, io::Engine::kLibrary);
  model::SequenceModel& m = *trained.model;
  m.set_temperature({});
  // A resumed run's checkpoint may hold a part from its earlier end: the mix is chosen again.
  runtime::NgramPart part;
  m.set_ngram_part_expected(false);
  for (auto& ex : data_.dev) {
    ex.ngram_scores.clear();
    ex.words.clear();
  }
  if (baseline != nullptr) {
    // Network alone on dev (log-probabilities: the logits up to a constant per row), the part's
    // W x + b (mix 1), the mix from the grid; then the dev rows carry the chosen part's scores so
    // the temperature below is fitted on the blended logits.
    const auto alone = evaluate(m, data_.dev, true);
    const std::size_t C = m.spec().labels.size();
    const runtime::NgramPart unit = baseline->ngram_part(1.0F);
    data::Encoder encoder(data_.vocab, data::Task::kClassify);
    encoder.set_ngram_part(&unit);
    const std::string dev_path = config_.dev.empty() ? config_.train : config_.dev;
    std::vector<float> network, part_scores;
    std::vector<std::int32_t> gold;
    for (std::size_t i = 0; i < data_.dev.size(); ++i) {
      for (const float p : alone.predictions[i].probs)
        network.push_back(std::log(std::max(p, std::numeric_limits<float>::min())));
      gold.push_back(data_.dev[i].targets.at(0));
    }
    // The dev texts, read again from their file (the run holds only their ids).
    std::vector<std::vector<float>> dev_scores;
    read_run_split(config_, true, data_.tag_scheme)(
        [&](const data::Example& ex) { dev_scores.push_back(encoder.encode(ex, dev_path).ngram_scores); });
    GYRE_CHECK(dev_scores.size() == data_.dev.size(), dev_path + ": the dev file changed during training");
    for (const auto& row : dev_scores) part_scores.insert(part_scores.end(), row.begin(), row.end());
    const MixChoice choice = choose_ngram_mix(network, part_scores, gold, static_cast<int>(C), kNgramMixGrid);
    ngram = to_json(choice, kNgramMixGrid);
    ngram["order"] = unit.order();
    ngram["features"] = unit.features();
    if (choice.mix > 0.0F) {
      part = baseline->ngram_part(choice.mix);
      encoder.set_ngram_part(&part);
      std::size_t i = 0;
      read_run_split(config_, true, data_.tag_scheme)([&](const data::Example& ex) {
        GYRE_CHECK(i < data_.dev.size(), dev_path + ": the dev file changed during training");
        data_.dev[i++].ngram_scores = encoder.encode(ex, dev_path).ngram_scores;
      });
      m.set_ngram_part_expected(true);
      // What the saved model scores on dev (the blend in float, through the model).
      ngram["dev_accuracy"]["blend"] = evaluate(m, data_.dev).metric(Metric::kAccuracy);
    }
    progress_.note("n-gram part: mix " + fmt(choice.mix, 2) + " chosen on dev (" +
                   std::to_string(unit.order()) + "-grams, " + std::to_string(unit.features()) +
                   " keys); dev accuracy: network " + fmt(choice.network_accuracy) + ", n-gram part " +
                   fmt(choice.part_accuracy) + ", blend " +
                   fmt(ngram["dev_accuracy"]["blend"].get<double>()));
  }
  if (m.spec().output == model::OutputKind::kSigmoid)  // a refit starts from the global threshold
    m.set_thresholds(static_cast<float>(config_.multi_label_threshold), {});
  const auto before = evaluate(m, data_.dev, true);
  const CalibrationFit fit = fit_calibration(m, data_.dev);
  m.set_temperature(fit.temperature);
  const auto after = evaluate(m, data_.dev, true);
  const eval::Reliability r_before = reliability_of(m.spec(), data_.dev, before.predictions);
  const eval::Reliability r_after = reliability_of(m.spec(), data_.dev, after.predictions);
  if (m.spec().output == model::OutputKind::kSigmoid && config_.tune_label_thresholds)
    label_thresholds_ = tune_thresholds(m, after);
  io::write_checkpoint(best, m, data_.vocab, nullptr, trained.header.at("trainer"),
                       trained.header.at("config"), part.empty() ? nullptr : &part);
  if (data_.task == data::Task::kClassify && !data_.multi_label) {
    trained.ngram_part = std::move(part);  // saved above; the mistakes show its share
    mistakes_ = dev_mistakes(trained, after);
  }
  std::string temps;
  for (const float t : fit.temperature) temps += (temps.empty() ? "" : " ") + fmt(t, 3);
  progress_.note("calibration: temperature " + (fit.temperature.size() > 1 ? "per label " : std::string()) +
                 temps + " fitted on dev; ECE " + fmt(r_before.error) + " -> " + fmt(r_after.error));
  return calibration_json(fit, r_before, r_after);
}

// Per-label decision thresholds of a multi-label model, tuned on the calibrated dev probabilities
// (eval::tune_label_thresholds: each label's best dev F1; ties keep the global threshold) and
// set in the model, which calibrate() then writes. The dev scores after tuning are optimistic:
// they are measured on the rows the thresholds were chosen on.
json Run::tune_thresholds(model::SequenceModel& m, const EvaluationResult& calibrated) {
  const std::size_t C = m.spec().labels.size();
  std::vector<std::uint8_t> gold(data_.dev.size() * C, 0);
  std::vector<float> scores;
  scores.reserve(gold.size());
  for (std::size_t i = 0; i < data_.dev.size(); ++i) {
    for (const auto l : data_.dev[i].targets) gold[i * C + static_cast<std::size_t>(l)] = 1;
    scores.insert(scores.end(), calibrated.predictions[i].probs.begin(),
                  calibrated.predictions[i].probs.end());
  }
  const float global = m.spec().threshold;
  std::vector<float> tuned = eval::tune_label_thresholds(gold, scores, C, global);
  const bool any = std::any_of(tuned.begin(), tuned.end(), [&](float t) { return t != global; });
  if (any) m.set_thresholds(global, tuned);
  const auto after = evaluate(m, data_.dev);
  json per_label = json::object();
  std::string shown;
  for (std::size_t l = 0; l < C; ++l) {
    const float t = m.spec().threshold_of(l);
    per_label[m.spec().labels[l]] = t;
    if (t != global) shown += (shown.empty() ? "" : ", ") + m.spec().labels[l] + " " + fmt(t, 3);
  }
  progress_.note("label thresholds: " + (shown.empty() ? "every label keeps " + fmt(global, 3) : shown) +
                 " (tuned on dev); dev macro F1 " + fmt(calibrated.multilabel->macro.f1) + " -> " +
                 fmt(after.multilabel->macro.f1));
  return {{"method", "per label, the threshold with the best dev F1; ties keep the global threshold"},
          {"global", global},
          {"thresholds", std::move(per_label)},
          {"dev_macro_f1_before", calibrated.multilabel->macro.f1},
          {"dev_macro_f1_after", after.multilabel->macro.f1},
          {"dev_micro_f1_before", calibrated.multilabel->micro.f1},
          {"dev_micro_f1_after", after.multilabel->micro.f1}};
}

// Checks the settings and the run directory, reads and encodes the data (with the saved vocabulary
// when resuming) and builds the model: everything that can refuse the run, before anything is
// written.
void Run::prepare() {
  dir_ = options_.out;
  if (dir_.empty()) throw ConfigError("out", "a run directory is required (--out DIR)");
  validate(config_);
  const text::VocabFile* saved_vocab = nullptr;
  text::VocabFile loaded_vocab;
  if (resuming_) {
    loaded_vocab = text::load_vocab_file(dir_ / "vocab.json");
    saved_vocab = &loaded_vocab;
  } else if (start_ == Start::kNew) {
    std::error_code ec;
    if (fs::exists(dir_, ec) && !(fs::is_directory(dir_, ec) && fs::is_empty(dir_, ec)))
      throw ConfigError("out", dir_.string() +
                                   " already exists and is not empty; choose a new --out, or continue "
                                   "an interrupted run with `gyre train --resume " +
                                   dir_.string() + "`");
  }
  data_ = prepare_data(config_, progress_, saved_vocab);
  setup_model();  // all checks done: nothing is created before this point
}

// Creates the run directory (rank 0) or tidies the one being continued and loads its state.
void Run::open_run_directory() {
  if (start_ != Start::kNew && lead_) {
    // A process killed while writing (kill -9, power loss) leaves "<file>.tmp.<pid>" behind.
    for (const auto& stale : remove_stale_temp_files(dir_))
      progress_.note("removed " + stale.string() +
                     ", left by an earlier process that did not finish writing it");
  }
  if (start_ == Start::kRestart && lead_) {
    // Deterministic training makes starting again equal to resuming; drop what the killed run
    // may have left of its first epoch.
    std::error_code ec;
    for (const char* name : {io::kSelectedCheckpointFile, "best-dev-metrics.json"})
      fs::remove(dir_ / name, ec);
  }
  if (!resuming_ && lead_) {
    fs::create_directories(dir_);
    write_file_atomic(dir_ / "config.json", run_config_json().dump(2) + "\n");
    text::save_vocab_file(dir_ / "vocab.json", data_.vocab);
    write_file_atomic(dir_ / "log.jsonl", "");
  } else if (resuming_) {
    load_resume_state();
    if (options_.epochs > 0 && lead_)
      write_file_atomic(dir_ / "config.json", run_config_json().dump(2) + "\n");
  }
}

// The first progress line: what is trained on what, and from where when resuming.
void Run::note_start() {
  std::ostringstream head;
  head << (resuming_ ? "resuming " : "training ") << model::to_string(config_.cell) << " "
       << data::to_string(*config_.task) << " (" << (spec_.bidirectional ? "bi, " : "") << spec_.layers << "x"
       << spec_.hidden_size << ", embedding " << spec_.embedding_size << ", "
       << replicas_[0]->params().parameter_count() << " parameters) on " << data_.train.size()
       << " examples, dev " << data_.dev.size() << ", vocabulary " << data_.vocab.vocab.size() << ", "
       << spec_.num_labels() << " labels, " << config_.threads << " thread(s)"
       << (group_.size() > 1 ? " in each of " + std::to_string(group_.size()) + " MPI ranks" : "")
       << ", seed " << config_.seed;
  if (resuming_) head << "; from epoch " << state_.epoch + 1 << " step " << state_.step + 1;
  progress_.note(head.str());
}

TrainResult Run::execute() {
  prepare();
  group_.barrier();  // every rank has checked the run directory before rank 0 creates it
  open_run_directory();
  if (!options_.quiet) note_start();
  install_interrupt_handlers();
  TrainResult result;
  while (!state_.finished && state_.epoch < config_.epochs) {
    run_epoch();
    if (interrupted_) {
      state_.epoch_seconds +=
          std::chrono::duration<double>(std::chrono::steady_clock::now() - epoch_start_).count();
      save_last();
      progress_.note("\ninterrupted: saved " + (dir_ / io::kResumeCheckpointFile).string() +
                     "; continue with: gyre train --resume " + dir_.string());
      finish(TrainOutcome::kInterrupted, result);
      return result;
    }
    end_epoch();
    if (early_stopped_) break;
    if (options_.interrupt_after_epochs > 0 && state_.epoch == options_.interrupt_after_epochs &&
        !state_.finished) {
      progress_.note("interrupted after epoch " + std::to_string(state_.epoch) +
                     "; continue with: gyre train --resume " + dir_.string());
      finish(TrainOutcome::kInterrupted, result);
      return result;
    }
  }
  // A resumed run whose epochs were over (interrupted in the linear fit) stopped early if it ended
  // before its last epoch.
  const bool early = early_stopped_ || (state_.finished && state_.epoch < config_.epochs);
  finish(early ? TrainOutcome::kEarlyStopped : TrainOutcome::kFinished, result);
  return result;
}

}  // namespace

TrainResult train(const TrainConfig& config, const TrainOptions& options) {
  reset_interrupt();
  Run run(config, options, Run::Start::kNew, options.group ? *options.group : process_group());
  return run.execute();
}

TrainResult resume(const TrainOptions& options) {
  reset_interrupt();
  const fs::path dir = options.out;
  const fs::path config_path = dir / "config.json";
  io::refuse_version1_run(dir);
  Run::Start start = Run::Start::kResume;
  if (!fs::exists(dir / io::kResumeCheckpointFile)) {
    // config.json is written first, metrics.json last: with the one and not the other, the run
    // was stopped (kill -9, a crash) before its first checkpoint, and starts again from its saved
    // settings, which reaches the same weights as resuming would have.
    if (!fs::exists(config_path) || fs::exists(dir / "metrics.json"))
      throw ConfigError("resume", dir.string() + " has no " + io::kResumeCheckpointFile + " to resume from");
    start = Run::Start::kRestart;
  }
  json j;
  try {
    j = json::parse(read_file(config_path));
  } catch (const json::exception& e) {
    throw FormatError(config_path.string(), std::string("not valid JSON: ") + e.what());
  }
  ProcessGroup& group = options.group ? *options.group : process_group();
  // The job's shape is part of the arithmetic (which worker takes which example): resume with it.
  const int ranks = j.contains("job") ? j["job"].value("ranks", 1) : 1;
  if (ranks != group.size())
    throw ConfigError("resume", dir.string() + " was trained by " + std::to_string(ranks) +
                                    " MPI rank(s); resume it with the same number (now " +
                                    std::to_string(group.size()) + ")");
  j.erase("job");
  TrainConfig config = config_from_json(j);
  if (options.epochs > 0) config.epochs = options.epochs;
  if (start == Run::Start::kRestart && !options.quiet && options.progress != nullptr && group.rank() == 0)
    std::fprintf(options.progress,
                 "%s has no checkpoint yet (the run stopped before its first epoch ended): starting it again "
                 "from the beginning with its saved settings\n",
                 dir.string().c_str());
  Run run(config, options, start, group);
  return run.execute();
}

}  // namespace gyre::train
