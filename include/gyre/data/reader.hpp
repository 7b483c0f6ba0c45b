#pragma once
// Streaming readers for the corpus formats of DESIGN.md "Files". Memory use is constant in the
// size of the file: one line (or one tagging sentence) is held at a time.
//
//   kTsv          label<TAB>text per line; an optional first line "label<TAB>text" is a header.
//                 The text is everything after the first TAB (it may contain more TABs).
//   kJsonl        {"text": "...", "label": "..."} or {"text": "...", "labels": ["...", ...]}
//                 (multi-label: "labels" may be empty, must not repeat a label; other keys are ignored)
//   kColumns      token<TAB>tag per line, blank line(s) between sentences
//   kTaggedJsonl  {"tokens": ["...", ...], "tags": ["...", ...]}
//   kCsv          RFC 4180 comma-separated values (gyre/data/csv.hpp) with a header row; the text
//                 and label are the columns named text_column and label_column
// text_column and label_column also name the keys of kJsonl records (default "text", "label";
// with the default label key, "labels": [...] is read as multi-label).
// kTsv and kCsv files are checked for a label column that looks like free text (swapped columns)
// and, in kTsv, for a header line with other names than label<TAB>text: ParseError with the line.
// Every line may end in "\r\n" (the \r is stripped). Blank lines are ignored in kTsv/kJsonl/
// kTaggedJsonl. A UTF-8 byte-order mark at the start of the file is skipped.
// Bad records throw gyre::ParseError("path:line: what is wrong"); with skip_bad_lines they are
// counted in ReadReport instead (a bad tagging sentence counts once, at its first bad line).

#include <cstddef>
#include <filesystem>
#include <functional>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/data/example.hpp"
#include "gyre/data/task.hpp"

namespace gyre::data {

enum class CorpusFormat { kAuto, kTsv, kJsonl, kColumns, kTaggedJsonl, kCsv };

/// "auto", "tsv", "jsonl", "columns", "tagged-jsonl", "csv".
const char* to_string(CorpusFormat format);
/// Inverse of to_string(CorpusFormat); throws gyre::ConfigError("format", ...) on other names.
CorpusFormat corpus_format_from_string(std::string_view name);
Task task_of(CorpusFormat format);  // kAuto -> throws gyre::Error

struct ReadOptions {
  CorpusFormat format = CorpusFormat::kAuto;
  bool skip_bad_lines = false;
  std::string text_column = "text";    // CSV header name / JSON Lines key of the text
  std::string label_column = "label";  // CSV header name / JSON Lines key of the label(s)
};

struct ReadReport {
  std::size_t examples = 0, skipped = 0;
  /// The first kMaxSkippedLines skipped line numbers (1-based), in file order.
  std::vector<std::size_t> first_skipped_lines;
  CorpusFormat format = CorpusFormat::kAuto;  // the format actually read (never kAuto)
  Task task = Task::kClassify;
  static constexpr std::size_t kMaxSkippedLines = 10;
};

/// Calls sink once per example, in file order. Throws gyre::ParseError on a bad record unless
/// options.skip_bad_lines, gyre::IoError when the file cannot be read. Exceptions thrown by sink
/// propagate unchanged.
ReadReport read_corpus(const std::filesystem::path& path, const ReadOptions& options,
                       const std::function<void(Example&&)>& sink);

/// read_corpus into a vector (for files that fit in memory: dev/test splits, small corpora).
std::vector<Example> load_corpus(const std::filesystem::path& path, const ReadOptions& options = {},
                                 ReadReport* report = nullptr);

/// Guesses the format from the content of the first 1000 lines (the extension is not used):
///   - the first non-blank line (after a BOM) starts with '{': JSON Lines; kTaggedJsonl when that
///     object has a "tokens" key, else kJsonl;
///   - a first line without a TAB but with a comma: kCsv;
///   - otherwise kColumns when a blank line separates two non-blank lines and no sampled line has
///     a space after its first TAB (tags never contain spaces; texts almost always do);
///   - otherwise kTsv.
/// Pass an explicit format for files this guesses wrong (e.g. one-word texts separated by blank
/// lines). Throws gyre::IoError when the file cannot be read, gyre::ParseError when it is empty.
CorpusFormat detect_format(const std::filesystem::path& path);

}  // namespace gyre::data
