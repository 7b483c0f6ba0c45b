// gyre vocab: build the vocabulary and label set of a training file, save them with the
// tokenizer settings as vocab.json, and print what helps to choose settings.

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <iostream>
#include <map>
#include <memory>
#include <set>
#include <string>
#include <vector>

#include "cli/command.hpp"
#include "cli/train_settings.hpp"
#include "gyre/core/error.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/text/vocab.hpp"
#include "gyre/train/config.hpp"

namespace gyre::cli {
namespace {

namespace fs = std::filesystem;

// Warn when the most frequent label has more than this many times the examples of the least
// frequent one (a common rule of thumb, no single source).
constexpr double kImbalanceRatio = 10.0;

// The settings vocab shares with train (same names, defaults and checks: src/train/config.cpp),
// so `gyre vocab` reports the vocabulary that `gyre train` with the same options builds.
const std::set<std::string> kSharedSettings = {
    "train",      "tokenizer", "nfkc",           "case_fold",      "fold_digits", "keep_punctuation",
    "max_tokens", "min_count", "max_vocab_size", "skip_bad_lines", "text_column", "label_column"};

struct VocabOptions {
  std::string out = "vocab.json", format = "auto", dev;
  std::shared_ptr<TrainSettingValues> given = std::make_shared<TrainSettingValues>();
};

// Token count per example, as a histogram (constant memory in the number of examples).
class LengthHistogram {
 public:
  void add(std::size_t length) {
    if (length >= counts_.size()) counts_.resize(length + 1, 0);
    ++counts_[length];
    ++total_;
  }
  // Nearest-rank percentile: the smallest length L with at least p% of examples <= L.
  std::size_t percentile(double p) const {
    if (total_ == 0) return 0;
    const auto rank =
        static_cast<std::uint64_t>(std::max(1.0, std::ceil(p / 100.0 * static_cast<double>(total_))));
    std::uint64_t seen = 0;
    for (std::size_t len = 0; len < counts_.size(); ++len) {
      seen += counts_[len];
      if (seen >= rank) return len;
    }
    return counts_.size() - 1;
  }
  std::size_t max() const { return counts_.empty() ? 0 : counts_.size() - 1; }

 private:
  std::vector<std::uint64_t> counts_;
  std::uint64_t total_ = 0;
};

std::string percent(double part, double whole) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.1f%%", whole > 0 ? 100.0 * part / whole : 0.0);
  return buf;
}

void report_skips(const std::string& path, const data::ReadReport& r) {
  if (r.skipped == 0) return;
  std::cerr << "gyre: warning: " << path << ": skipped " << r.skipped << " bad record"
            << (r.skipped == 1 ? "" : "s") << " (--skip-bad-lines); first at line"
            << (r.first_skipped_lines.size() == 1 ? "" : "s");
  for (std::size_t i = 0; i < r.first_skipped_lines.size(); ++i)
    std::cerr << (i ? ", " : " ") << r.first_skipped_lines[i];
  std::cerr << '\n';
}

// Tokens of one example: the tokenizer's for classification, the given (normalized) tokens for tagging.
void example_tokens(const text::Tokenizer& tok, const data::Example& ex, const std::string& path,
                    std::vector<std::string>& out) {
  if (!ex.tokens.empty())
    text::normalize_tokens_at(tok, ex.tokens, path, ex.line, out);
  else
    text::tokenize_at(tok, ex.text, path, ex.line, out);
}

// The tokenizer the settings ask for; bad settings are a ConfigError naming "tokenizer".
text::Tokenizer make_tokenizer(const train::TrainConfig& o) {
  text::TokenizerSettings settings;
  settings.mode = o.tokenizer;
  settings.nfkc = o.nfkc;
  settings.case_fold = o.case_fold;
  settings.fold_digits = o.fold_digits;
  settings.keep_punctuation = o.keep_punctuation;
  settings.max_tokens = static_cast<std::size_t>(o.max_tokens);
  try {
    return text::Tokenizer(settings);
  } catch (const runtime::Error& e) {
    throw ConfigError("tokenizer", e.what());
  }
}

// What one streamed pass over the training split counts.
struct TrainCounts {
  data::ReadReport report;
  text::VocabBuilder builder;
  text::LabelCounts label_counts;
  LengthHistogram lengths;
  std::uint64_t label_instances = 0;
};

// ---- training split: counts only, streamed --------------------------------------------------
void count_training_split(const train::TrainConfig& o, const data::ReadOptions& read_options,
                          const text::Tokenizer& tokenizer, TrainCounts& c) {
  std::vector<std::string> tokens;
  c.report = data::read_corpus(o.train, read_options, [&](data::Example&& ex) {
    example_tokens(tokenizer, ex, o.train, tokens);
    c.builder.add(tokens);
    c.lengths.add(tokens.size());
    for (const auto& l : ex.tags.empty() ? ex.labels : ex.tags) {
      ++c.label_counts[l];
      ++c.label_instances;
    }
  });
  report_skips(o.train, c.report);
  if (c.report.examples == 0) throw ParseError(o.train, 0, "no examples in the training file");
}

void print_train_summary(const train::TrainConfig& o, const TrainCounts& c, const text::VocabFile& file) {
  const text::TokenizerSettings& settings = file.tokenizer;
  std::uint64_t train_covered = 0;
  for (std::size_t id = 2; id < file.vocab.size(); ++id)
    train_covered += file.vocab.count(static_cast<std::int32_t>(id));

  std::cout << "train: " << o.train << " (" << data::to_string(c.report.format) << ", "
            << data::to_string(c.report.task) << ")\n";
  std::cout << "  examples          " << c.report.examples << '\n';
  std::cout << "  tokens            " << c.builder.tokens() << '\n';
  std::cout << "  types             " << c.builder.types() << '\n';
  std::cout << "  vocabulary size   " << file.vocab.size() << " (ids 0 <pad>, 1 <unk>; min count "
            << o.min_count << ", max size "
            << (o.max_vocab_size ? std::to_string(o.max_vocab_size) : std::string("none")) << ")\n";
  std::cout << "  train coverage    "
            << percent(static_cast<double>(train_covered), static_cast<double>(c.builder.tokens()))
            << " of tokens are in the vocabulary\n";
  std::cout << "  tokens/example    p50 " << c.lengths.percentile(50) << ", p90 " << c.lengths.percentile(90)
            << ", p99 " << c.lengths.percentile(99) << ", max " << c.lengths.max() << '\n';
  std::cout << "  tokenizer         " << text::to_string(settings.mode) << (settings.nfkc ? ", NFKC" : "")
            << (settings.case_fold ? ", case folding" : "") << (settings.fold_digits ? ", digit folding" : "")
            << (settings.keep_punctuation ? "" : ", punctuation dropped")
            << (settings.max_tokens ? ", max " + std::to_string(settings.max_tokens) + " tokens"
                                    : std::string())
            << '\n';
}

// ---- dev split: coverage ----------------------------------------------------------------------
// The dev split's coverage by the training vocabulary, and labels the training split lacks.
void report_dev_coverage(const std::string& dev_path, const data::ReadOptions& read_options,
                         const text::Tokenizer& tokenizer, const text::VocabFile& file,
                         data::Task train_task) {
  const bool tagging = train_task == data::Task::kTag;
  std::vector<std::string> tokens;
  std::uint64_t dev_tokens = 0, dev_oov = 0;
  std::map<std::string, std::uint64_t, std::less<>> unseen_labels;
  const data::ReadReport dev = data::read_corpus(dev_path, read_options, [&](data::Example&& ex) {
    example_tokens(tokenizer, ex, dev_path, tokens);
    dev_tokens += tokens.size();
    for (const auto& t : tokens)
      if (file.vocab.id(t) == text::Vocab::kUnk) ++dev_oov;
    for (const auto& l : ex.tags.empty() ? ex.labels : ex.tags)
      if (!file.labels.find(l)) ++unseen_labels[l];
  });
  report_skips(dev_path, dev);
  if (dev.task != train_task)
    throw ParseError(dev_path, 0,
                     std::string("is a ") + data::to_string(dev.task) +
                         " corpus but the training file is a " + data::to_string(train_task) + " corpus");
  std::cout << "dev: " << dev_path << '\n';
  std::cout << "  examples          " << dev.examples << '\n';
  std::cout << "  tokens            " << dev_tokens << '\n';
  std::cout << "  OOV rate          "
            << percent(static_cast<double>(dev_oov), static_cast<double>(dev_tokens)) << " (" << dev_oov
            << " tokens map to <unk>)\n";
  std::cout << "  coverage          "
            << percent(static_cast<double>(dev_tokens - dev_oov), static_cast<double>(dev_tokens)) << '\n';
  for (const auto& [label, count] : unseen_labels)
    std::cerr << "gyre: warning: " << dev_path << ": " << (tagging ? "tag" : "label") << " '" << label
              << "' is not in the training file (" << count << "x); evaluation would refuse it\n";
}

// ---- labels -------------------------------------------------------------------------------------
void print_labels(const text::LabelSet& labels, bool tagging, std::uint64_t label_instances) {
  std::cout << (tagging ? "tags" : "labels") << " (" << labels.size() << "):\n";
  std::size_t width = 0, count_width = 1;
  for (std::size_t i = 0; i < labels.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    width = std::max(width, labels.name(id).size());
    count_width = std::max(count_width, std::to_string(labels.count(id)).size());
  }
  for (std::size_t i = 0; i < labels.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    const std::string& name = labels.name(id);
    const std::string count = std::to_string(labels.count(id));
    const std::string share =
        percent(static_cast<double>(labels.count(id)), static_cast<double>(label_instances));
    std::cout << "  " << name << std::string(width - name.size() + 2 + count_width - count.size(), ' ')
              << count << std::string(8 - std::min<std::size_t>(share.size(), 7), ' ') << share << '\n';
  }
}

// Imbalance: for tags, "O" (outside any span) always dominates, so it is left out.
void warn_imbalance(const text::LabelSet& labels, bool tagging) {
  std::int32_t most = -1, least = -1;
  for (std::size_t i = 0; i < labels.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    if (tagging && labels.name(id) == "O") continue;
    if (most < 0 || labels.count(id) > labels.count(most)) most = id;
    if (least < 0 || labels.count(id) < labels.count(least)) least = id;
  }
  if (most < 0 || least < 0 || labels.count(most) == 0) return;
  const double ratio = static_cast<double>(labels.count(most)) / static_cast<double>(labels.count(least));
  if (ratio <= kImbalanceRatio) return;
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.1f", ratio);
  std::cout << "warning: imbalanced " << (tagging ? "tags" : "labels") << ": '" << labels.name(most)
            << "' has " << labels.count(most) << ", '" << labels.name(least) << "' only "
            << labels.count(least) << " (" << buf << " times fewer; warned above " << kImbalanceRatio
            << "x). Consider more data for rare labels or class weights.\n";
}

ExitCode run_vocab(const VocabOptions& opts) {
  const train::TrainConfig o = train::config_from_json(merge_train_settings("", *opts.given));
  if (o.train.empty()) throw ConfigError("train", "give the training file with --train FILE");
  std::error_code ec;
  for (const auto& [key, path] : {std::pair{"train", o.train}, {"dev", opts.dev}})
    if (!path.empty() && !fs::is_regular_file(path, ec)) throw ConfigError(key, "no such file: " + path);
  if (o.max_vocab_size == 1 || o.max_vocab_size == 2)
    throw ConfigError("max_vocab_size", "must be 0 (no limit) or >= 3 (<pad>, <unk> and one token)");
  const text::Tokenizer tokenizer = make_tokenizer(o);

  data::ReadOptions read_options;
  read_options.format = data::corpus_format_from_string(opts.format);
  read_options.skip_bad_lines = o.skip_bad_lines;
  read_options.text_column = o.text_column;
  read_options.label_column = o.label_column;

  TrainCounts counts;
  count_training_split(o, read_options, tokenizer, counts);
  const bool tagging = counts.report.task == data::Task::kTag;
  text::VocabFile file;
  file.tokenizer = tokenizer.settings();
  file.vocab = counts.builder.build(static_cast<std::uint64_t>(o.min_count),
                                    static_cast<std::size_t>(o.max_vocab_size));
  file.labels = text::LabelSet(counts.label_counts);
  print_train_summary(o, counts, file);
  if (!opts.dev.empty()) report_dev_coverage(opts.dev, read_options, tokenizer, file, counts.report.task);
  print_labels(file.labels, tagging, counts.label_instances);
  warn_imbalance(file.labels, tagging);

  const fs::path out(opts.out);
  if (out.has_parent_path()) fs::create_directories(out.parent_path());
  text::save_vocab_file(out, file);
  std::cout << "wrote " << opts.out << " (gyre train --vocab " << opts.out
            << " trains with it; give train the same tokenizer options)\n";
  return ExitCode::kOk;
}

const RegisterCommand registration{
    "vocab", "Build the vocabulary and label set of a training file; report coverage and lengths", 10,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<VocabOptions>();
      sub.add_option("--out", o->out, "where to write the vocabulary (JSON)")->capture_default_str();
      sub.add_option("--input-format", o->format,
                     "corpus format: auto, tsv, jsonl, csv, columns, tagged-jsonl")
          ->check(one_of({"auto", "tsv", "jsonl", "csv", "columns", "tagged-jsonl"}))
          ->capture_default_str();
      sub.add_option("--dev", o->dev,
                     "labelled dev file: report the coverage and OOV rate of the vocabulary on it")
          ->type_name("FILE");
      add_train_setting_options(sub, o->given, {}, kSharedSettings);
      sub.footer(
          "Example:\n"
          "  gyre vocab --train corpora/demo/intents.train.tsv --dev corpora/demo/intents.dev.tsv \\\n"
          "             --min-count 2 --out runs/intents-vocab.json\n"
          "  gyre train --train corpora/demo/intents.train.tsv --min-count 2 --vocab runs/intents-vocab.json "
          "\\\n"
          "             --out runs/intents-lstm\n"
          "The tokenizer and vocabulary options are gyre train's, with the same defaults.\n"
          "Exit codes: 0 ok, 1 failure (e.g. cannot write), 2 bad usage or malformed input.");
      return [o] { return run_vocab(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
