#include "gyre/data/reader.hpp"

#include <cerrno>
#include <cstring>
#include <fstream>
#include <string>
#include <utility>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/text/tokenizer.hpp"
#include "runtime/detail/segment.hpp"

namespace gyre::data {

namespace {

namespace fs = std::filesystem;
using nlohmann::json;

constexpr std::size_t kDetectLines = 1000;

// Reads a file line by line with constant memory; strips "\r" before "\n" and a leading BOM.
class LineReader {
 public:
  explicit LineReader(const fs::path& path) : path_(path), in_(path, std::ios::binary) {
    if (!in_) throw IoError("cannot open corpus '" + path.string() + "': " + std::strerror(errno));
  }
  bool next(std::string& line) {
    if (!std::getline(in_, line)) {
      if (in_.bad()) throw IoError("error while reading '" + path_.string() + "'");
      return false;
    }
    ++number_;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    if (number_ == 1 && line.compare(0, 3, "\xEF\xBB\xBF") == 0) line.erase(0, 3);
    return true;
  }
  std::size_t number() const { return number_; }

 private:
  fs::path path_;
  std::ifstream in_;
  std::size_t number_ = 0;
};

bool is_blank(std::string_view s) {
  for (char c : s)
    if (c != ' ' && c != '\t') return false;
  return true;
}

// A ParseError for this record; the reading loop decides whether to rethrow or count it.
struct BadRecord {
  std::size_t line;
  std::string message;
};

[[noreturn]] void bad(std::size_t line, std::string message) {
  throw BadRecord{line, std::move(message)};
}

void check_utf8(std::string_view line, std::size_t line_no) {
  const std::size_t at = runtime::detail::first_invalid_utf8(line);
  if (at != std::string_view::npos)
    bad(line_no, "invalid UTF-8 at byte " + std::to_string(at + 1) + " of the line");
}

json parse_json_line(const std::string& line, std::size_t line_no) {
  json j;
  try {
    j = json::parse(line);
  } catch (const json::parse_error& e) {
    // nlohmann's message names the column ("syntax error while parsing ... at line 1, column 7").
    bad(line_no, std::string("bad JSON: ") + e.what());
  }
  if (!j.is_object()) bad(line_no, "expected a JSON object, got " + std::string(j.type_name()));
  return j;
}

std::string string_field(const json& j, const char* key, std::size_t line_no) {
  const auto it = j.find(key);
  if (it == j.end()) bad(line_no, std::string("missing key \"") + key + "\"");
  if (!it->is_string()) bad(line_no, std::string("\"") + key + "\" must be a string, got " + it->type_name());
  return it->get<std::string>();
}

std::vector<std::string> string_array(const json& j, const char* key, std::size_t line_no) {
  const auto it = j.find(key);
  if (it == j.end()) bad(line_no, std::string("missing key \"") + key + "\"");
  if (!it->is_array())
    bad(line_no, std::string("\"") + key + "\" must be an array of strings, got " + it->type_name());
  std::vector<std::string> out;
  out.reserve(it->size());
  for (std::size_t i = 0; i < it->size(); ++i) {
    const auto& e = (*it)[i];
    if (!e.is_string())
      bad(line_no,
          std::string("\"") + key + "\"[" + std::to_string(i) + "] must be a string, got " + e.type_name());
    out.push_back(e.get<std::string>());
    if (is_blank(out.back()))
      bad(line_no, std::string("\"") + key + "\"[" + std::to_string(i) + "] is empty");
  }
  return out;
}

void check_label(const std::string& label, std::size_t line_no) {
  if (is_blank(label)) bad(line_no, "empty label");
}

void check_text(const std::string& text, std::size_t line_no) {
  if (is_blank(text)) bad(line_no, "empty text");
}

Example parse_tsv(const std::string& line, std::size_t line_no) {
  const std::size_t tab = line.find('\t');
  if (tab == std::string::npos) bad(line_no, "expected TAB between label and text (format label<TAB>text)");
  Example ex;
  ex.line = line_no;
  ex.labels.emplace_back(line, 0, tab);
  check_label(ex.labels.back(), line_no);
  ex.text.assign(line, tab + 1);
  check_text(ex.text, line_no);
  return ex;
}

Example parse_jsonl(const std::string& line, std::size_t line_no) {
  const json j = parse_json_line(line, line_no);
  Example ex;
  ex.line = line_no;
  ex.text = string_field(j, "text", line_no);
  check_text(ex.text, line_no);
  const bool has_label = j.contains("label"), has_labels = j.contains("labels");
  if (has_label && has_labels) bad(line_no, "give either \"label\" or \"labels\", not both");
  if (!has_label && !has_labels) bad(line_no, "missing key \"label\" (or \"labels\" for multi-label)");
  if (has_label) {
    ex.labels.push_back(string_field(j, "label", line_no));
    check_label(ex.labels.back(), line_no);
  } else {
    ex.labels = string_array(j, "labels", line_no);
    for (std::size_t i = 0; i < ex.labels.size(); ++i)
      for (std::size_t k = 0; k < i; ++k)
        if (ex.labels[i] == ex.labels[k])
          bad(line_no, "label '" + ex.labels[i] + "' is repeated in \"labels\"");
  }
  return ex;
}

void join_tokens(Example& ex) {
  ex.text.clear();
  for (const auto& t : ex.tokens) {
    if (!ex.text.empty()) ex.text += ' ';
    ex.text += t;
  }
}

Example parse_tagged_jsonl(const std::string& line, std::size_t line_no) {
  const json j = parse_json_line(line, line_no);
  Example ex;
  ex.line = line_no;
  ex.tokens = string_array(j, "tokens", line_no);
  ex.tags = string_array(j, "tags", line_no);
  if (ex.tokens.empty()) bad(line_no, "empty text: \"tokens\" is empty");
  if (ex.tokens.size() != ex.tags.size())
    bad(line_no, "tokens/tags length mismatch: " + std::to_string(ex.tokens.size()) + " tokens but " +
                     std::to_string(ex.tags.size()) + " tags");
  join_tokens(ex);
  return ex;
}

class Reading {
 public:
  Reading(const fs::path& path, const ReadOptions& options, const std::function<void(Example&&)>& sink)
      : path_(path.string()), options_(options), sink_(sink) {}

  // Runs f(); a BadRecord becomes a ParseError, or a counted skip with skip_bad_lines.
  template <typename F>
  void guarded(F&& f) {
    try {
      f();
    } catch (const BadRecord& b) {
      skip(b);
    }
  }
  void skip(const BadRecord& b) {
    if (!options_.skip_bad_lines) throw ParseError(path_, b.line, b.message);
    ++report.skipped;
    if (report.first_skipped_lines.size() < ReadReport::kMaxSkippedLines)
      report.first_skipped_lines.push_back(b.line);
  }
  void deliver(Example&& ex) {
    ++report.examples;
    sink_(std::move(ex));
  }

  bool skips() const { return options_.skip_bad_lines; }

  ReadReport report;

 private:
  std::string path_;
  const ReadOptions& options_;
  const std::function<void(Example&&)>& sink_;
};

void read_lines(LineReader& reader, Reading& reading, CorpusFormat format) {
  std::string line;
  while (reader.next(line)) {
    const std::size_t line_no = reader.number();
    if (line.empty()) continue;
    bool have = false;
    Example ex;
    reading.guarded([&] {
      check_utf8(line, line_no);
      if (format == CorpusFormat::kTsv) {
        if (line_no == 1 && line == "label\ttext") return;  // optional header
        ex = parse_tsv(line, line_no);
      } else if (format == CorpusFormat::kJsonl) {
        if (is_blank(line)) return;
        ex = parse_jsonl(line, line_no);
      } else {
        if (is_blank(line)) return;
        ex = parse_tagged_jsonl(line, line_no);
      }
      have = true;
    });
    if (have) reading.deliver(std::move(ex));  // outside guarded: sink exceptions propagate
  }
}

void read_columns(LineReader& reader, Reading& reading) {
  std::string line;
  Example ex;
  std::size_t bad_line = 0;
  std::string bad_message;
  auto finish_sentence = [&] {
    if (ex.tokens.empty() && bad_line == 0) return;
    if (bad_line != 0) {
      reading.skip(BadRecord{bad_line, bad_message});
    } else {
      join_tokens(ex);
      reading.deliver(std::move(ex));
    }
    ex = Example{};
    bad_line = 0;
  };
  while (reader.next(line)) {
    const std::size_t line_no = reader.number();
    if (is_blank(line)) {
      finish_sentence();
      continue;
    }
    if (ex.tokens.empty() && bad_line == 0) ex.line = line_no;
    if (bad_line != 0) continue;  // the rest of a bad sentence
    try {
      check_utf8(line, line_no);
      const std::size_t tab = line.find('\t');
      if (tab == std::string::npos) bad(line_no, "expected TAB between token and tag (format token<TAB>tag)");
      if (line.find('\t', tab + 1) != std::string::npos)
        bad(line_no, "expected exactly one TAB (format token<TAB>tag), found more");
      std::string token(line, 0, tab), tag(line, tab + 1);
      if (is_blank(token)) bad(line_no, "empty token");
      if (is_blank(tag)) bad(line_no, "empty tag");
      ex.tokens.push_back(std::move(token));
      ex.tags.push_back(std::move(tag));
    } catch (const BadRecord& b) {
      if (!reading.skips()) reading.skip(b);  // throws the ParseError
      bad_line = b.line;
      bad_message = b.message;
    }
  }
  finish_sentence();
}

}  // namespace

const char* to_string(CorpusFormat format) {
  switch (format) {
    case CorpusFormat::kAuto:
      return "auto";
    case CorpusFormat::kTsv:
      return "tsv";
    case CorpusFormat::kJsonl:
      return "jsonl";
    case CorpusFormat::kColumns:
      return "columns";
    case CorpusFormat::kTaggedJsonl:
      return "tagged-jsonl";
  }
  return "?";
}

CorpusFormat corpus_format_from_string(std::string_view name) {
  for (CorpusFormat f : {CorpusFormat::kAuto, CorpusFormat::kTsv, CorpusFormat::kJsonl,
                         CorpusFormat::kColumns, CorpusFormat::kTaggedJsonl})
    if (name == to_string(f)) return f;
  throw ConfigError("format", "unknown corpus format '" + std::string(name) +
                                  "' (expected auto, tsv, jsonl, columns or tagged-jsonl)");
}

const char* to_string(Task task) {
  return task == Task::kClassify ? "classify" : "tag";
}

Task task_of(CorpusFormat format) {
  GYRE_CHECK(format != CorpusFormat::kAuto, "task_of: detect the format first");
  return format == CorpusFormat::kColumns || format == CorpusFormat::kTaggedJsonl ? Task::kTag
                                                                                  : Task::kClassify;
}

CorpusFormat detect_format(const fs::path& path) {
  LineReader reader(path);
  std::string line;
  bool seen_text = false, blank_after_text = false, separated = false, space_in_second = false;
  while (reader.number() < kDetectLines && reader.next(line)) {
    if (is_blank(line)) {
      blank_after_text = seen_text;
      continue;
    }
    if (!seen_text && line.front() == '{') {
      // First record is JSON: the tagging form has "tokens".
      try {
        const json j = json::parse(line);
        if (j.is_object() && j.contains("tokens")) return CorpusFormat::kTaggedJsonl;
      } catch (const json::parse_error&) {
        // the reader will report the bad line
      }
      return CorpusFormat::kJsonl;
    }
    if (blank_after_text) separated = true;
    blank_after_text = false;
    seen_text = true;
    const std::size_t tab = line.find('\t');
    if (tab == std::string::npos || line.find_first_of(" \t", tab + 1) != std::string::npos)
      space_in_second = true;
  }
  if (!seen_text) throw ParseError(path.string(), 0, "the file is empty");
  return separated && !space_in_second ? CorpusFormat::kColumns : CorpusFormat::kTsv;
}

ReadReport read_corpus(const fs::path& path, const ReadOptions& options,
                       const std::function<void(Example&&)>& sink) {
  const CorpusFormat format = options.format == CorpusFormat::kAuto ? detect_format(path) : options.format;
  LineReader reader(path);
  Reading reading(path, options, sink);
  reading.report.format = format;
  reading.report.task = task_of(format);
  if (format == CorpusFormat::kColumns)
    read_columns(reader, reading);
  else
    read_lines(reader, reading, format);
  return reading.report;
}

std::vector<Example> load_corpus(const fs::path& path, const ReadOptions& options, ReadReport* report) {
  std::vector<Example> out;
  const ReadReport r = read_corpus(path, options, [&](Example&& ex) { out.push_back(std::move(ex)); });
  if (report) *report = r;
  return out;
}

}  // namespace gyre::data
