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
#include <optional>
#include <string>
#include <vector>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/text/vocab.hpp"

namespace gyre::cli {
namespace {

namespace fs = std::filesystem;

// Warn when the most frequent label has more than this many times the examples of the least
// frequent one (a common rule of thumb, no single source).
constexpr double kImbalanceRatio = 10.0;

struct VocabOptions {
  std::string train, dev, out = "vocab.json", format = "auto", tokenizer = "words";
  std::uint64_t min_count = 1;
  std::size_t max_size = 0, max_tokens = 0;
  bool no_nfkc = false, no_case_fold = false, fold_digits = false, drop_punctuation = false,
       skip_bad_lines = false;
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

ExitCode run_vocab(const VocabOptions& o) {
  text::TokenizerSettings settings;
  try {
    settings.mode = text::tokenizer_mode_from_string(o.tokenizer);
  } catch (const runtime::Error& e) {
    throw ConfigError("--tokenizer", e.what());
  }
  settings.nfkc = !o.no_nfkc;
  settings.case_fold = !o.no_case_fold;
  settings.fold_digits = o.fold_digits;
  settings.keep_punctuation = !o.drop_punctuation;
  settings.max_tokens = o.max_tokens;
  if (o.max_size == 1) throw ConfigError("--max-size", "must be 0 (no cap) or at least 2 (the reserved ids)");
  std::optional<text::Tokenizer> tokenizer_holder;
  try {
    tokenizer_holder.emplace(settings);
  } catch (const runtime::Error& e) {
    throw ConfigError("--tokenizer", e.what());
  }
  const text::Tokenizer& tokenizer = *tokenizer_holder;

  data::ReadOptions read_options;
  read_options.format = data::corpus_format_from_string(o.format);
  read_options.skip_bad_lines = o.skip_bad_lines;

  // ---- training split: counts only, streamed --------------------------------------------------
  text::VocabBuilder builder;
  text::LabelCounts label_counts;
  LengthHistogram lengths;
  std::uint64_t label_instances = 0;
  std::vector<std::string> tokens;
  const data::ReadReport train = data::read_corpus(o.train, read_options, [&](data::Example&& ex) {
    example_tokens(tokenizer, ex, o.train, tokens);
    builder.add(tokens);
    lengths.add(tokens.size());
    for (const auto& l : ex.tags.empty() ? ex.labels : ex.tags) {
      ++label_counts[l];
      ++label_instances;
    }
  });
  report_skips(o.train, train);
  if (train.examples == 0) throw ParseError(o.train, 0, "no examples in the training file");
  const bool tagging = train.task == data::Task::kTag;

  text::VocabFile file;
  file.tokenizer = settings;
  file.vocab = builder.build(o.min_count, o.max_size);
  file.labels = text::LabelSet(label_counts);

  std::uint64_t train_covered = 0;
  for (std::size_t id = 2; id < file.vocab.size(); ++id)
    train_covered += file.vocab.count(static_cast<std::int32_t>(id));

  std::cout << "train: " << o.train << " (" << data::to_string(train.format) << ", "
            << data::to_string(train.task) << ")\n";
  std::cout << "  examples          " << train.examples << '\n';
  std::cout << "  tokens            " << builder.tokens() << '\n';
  std::cout << "  types             " << builder.types() << '\n';
  std::cout << "  vocabulary size   " << file.vocab.size() << " (ids 0 <pad>, 1 <unk>; min count "
            << o.min_count << ", max size " << (o.max_size ? std::to_string(o.max_size) : std::string("none"))
            << ")\n";
  std::cout << "  train coverage    "
            << percent(static_cast<double>(train_covered), static_cast<double>(builder.tokens()))
            << " of tokens are in the vocabulary\n";
  std::cout << "  tokens/example    p50 " << lengths.percentile(50) << ", p90 " << lengths.percentile(90)
            << ", p99 " << lengths.percentile(99) << ", max " << lengths.max() << '\n';
  std::cout << "  tokenizer         " << text::to_string(settings.mode) << (settings.nfkc ? ", NFKC" : "")
            << (settings.case_fold ? ", case folding" : "") << (settings.fold_digits ? ", digit folding" : "")
            << (settings.keep_punctuation ? "" : ", punctuation dropped")
            << (settings.max_tokens ? ", max " + std::to_string(settings.max_tokens) + " tokens"
                                    : std::string())
            << '\n';

  // ---- dev split: coverage ----------------------------------------------------------------------
  if (!o.dev.empty()) {
    std::uint64_t dev_tokens = 0, dev_oov = 0;
    std::map<std::string, std::uint64_t, std::less<>> unseen_labels;
    const data::ReadReport dev = data::read_corpus(o.dev, read_options, [&](data::Example&& ex) {
      example_tokens(tokenizer, ex, o.dev, tokens);
      dev_tokens += tokens.size();
      for (const auto& t : tokens)
        if (file.vocab.id(t) == text::Vocab::kUnk) ++dev_oov;
      for (const auto& l : ex.tags.empty() ? ex.labels : ex.tags)
        if (!file.labels.find(l)) ++unseen_labels[l];
    });
    report_skips(o.dev, dev);
    if (dev.task != train.task)
      throw ParseError(o.dev, 0,
                       std::string("is a ") + data::to_string(dev.task) +
                           " corpus but the training file is a " + data::to_string(train.task) + " corpus");
    std::cout << "dev: " << o.dev << '\n';
    std::cout << "  examples          " << dev.examples << '\n';
    std::cout << "  tokens            " << dev_tokens << '\n';
    std::cout << "  OOV rate          "
              << percent(static_cast<double>(dev_oov), static_cast<double>(dev_tokens)) << " (" << dev_oov
              << " tokens map to <unk>)\n";
    std::cout << "  coverage          "
              << percent(static_cast<double>(dev_tokens - dev_oov), static_cast<double>(dev_tokens)) << '\n';
    for (const auto& [label, count] : unseen_labels)
      std::cerr << "gyre: warning: " << o.dev << ": " << (tagging ? "tag" : "label") << " '" << label
                << "' is not in the training file (" << count << "x); evaluation would refuse it\n";
  }

  // ---- labels -------------------------------------------------------------------------------------
  std::cout << (tagging ? "tags" : "labels") << " (" << file.labels.size() << "):\n";
  std::size_t width = 0, count_width = 1;
  for (std::size_t i = 0; i < file.labels.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    width = std::max(width, file.labels.name(id).size());
    count_width = std::max(count_width, std::to_string(file.labels.count(id)).size());
  }
  for (std::size_t i = 0; i < file.labels.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    const std::string& name = file.labels.name(id);
    const std::string count = std::to_string(file.labels.count(id));
    const std::string share =
        percent(static_cast<double>(file.labels.count(id)), static_cast<double>(label_instances));
    std::cout << "  " << name << std::string(width - name.size() + 2 + count_width - count.size(), ' ')
              << count << std::string(8 - std::min<std::size_t>(share.size(), 7), ' ') << share << '\n';
  }
  // Imbalance: for tags, "O" (outside any span) always dominates, so it is left out.
  std::int32_t most = -1, least = -1;
  for (std::size_t i = 0; i < file.labels.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    if (tagging && file.labels.name(id) == "O") continue;
    if (most < 0 || file.labels.count(id) > file.labels.count(most)) most = id;
    if (least < 0 || file.labels.count(id) < file.labels.count(least)) least = id;
  }
  if (most >= 0 && least >= 0 && file.labels.count(most) > 0) {
    const double ratio =
        static_cast<double>(file.labels.count(most)) / static_cast<double>(file.labels.count(least));
    if (ratio > kImbalanceRatio) {
      char buf[32];
      std::snprintf(buf, sizeof buf, "%.1f", ratio);
      std::cout << "warning: imbalanced " << (tagging ? "tags" : "labels") << ": '" << file.labels.name(most)
                << "' has " << file.labels.count(most) << ", '" << file.labels.name(least) << "' only "
                << file.labels.count(least) << " (" << buf << " times fewer; warned above " << kImbalanceRatio
                << "x). Consider more data for rare labels or class weights.\n";
    }
  }

  const fs::path out(o.out);
  if (out.has_parent_path()) fs::create_directories(out.parent_path());
  text::save_vocab_file(out, file);
  std::cout << "wrote " << o.out << '\n';
  return ExitCode::kOk;
}

const RegisterCommand registration{
    "vocab", "Build the vocabulary and label set of a training file; report coverage and lengths", 10,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<VocabOptions>();
      sub.add_option("--train", o->train, "Training file (TSV, JSON Lines, or tagging columns / JSON Lines)")
          ->required()
          ->check(CLI::ExistingFile);
      sub.add_option("--dev", o->dev, "Development file: report coverage and OOV rate on it")
          ->check(CLI::ExistingFile);
      sub.add_option("--out", o->out, "Where to write the vocabulary (JSON)")->capture_default_str();
      sub.add_option("--format", o->format, "Corpus format: auto, tsv, jsonl, columns, tagged-jsonl")
          ->capture_default_str();
      sub.add_option("--min-count", o->min_count, "Keep tokens seen at least this many times")
          ->capture_default_str();
      sub.add_option("--max-size", o->max_size, "Largest vocabulary, 2 reserved ids included (0 = no limit)")
          ->capture_default_str();
      sub.add_option("--tokenizer", o->tokenizer,
                     "words (Unicode word boundaries), chars (graphemes) or whitespace")
          ->check(CLI::IsMember({"words", "chars", "whitespace"}))
          ->capture_default_str();
      sub.add_flag("--no-nfkc", o->no_nfkc, "Do not apply Unicode NFKC normalization");
      sub.add_flag("--no-case-fold", o->no_case_fold,
                   "Keep letter case (default: Unicode full case folding)");
      sub.add_flag("--fold-digits", o->fold_digits, "Map every decimal digit to 0");
      sub.add_flag("--drop-punctuation", o->drop_punctuation, "Drop tokens made only of punctuation");
      sub.add_option("--max-tokens", o->max_tokens, "Keep the first N tokens of each example (0 = all)")
          ->capture_default_str();
      sub.add_flag("--skip-bad-lines", o->skip_bad_lines,
                   "Skip malformed records (counted and reported) instead of stopping");
      sub.footer(
          "Example:\n"
          "  gyre vocab --train corpora/demo/intents.train.tsv --dev corpora/demo/intents.dev.tsv \\\n"
          "             --min-count 2 --out runs/intents/vocab.json\n"
          "Exit codes: 0 ok, 1 failure (e.g. cannot write), 2 bad usage or malformed input.");
      return [o] { return run_vocab(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
