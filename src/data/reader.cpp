#include "gyre/data/reader.hpp"

#include <cerrno>
#include <cstring>
#include <fstream>
#include <set>
#include <string>
#include <utility>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/data/csv.hpp"
#include "gyre/data/tag_scheme.hpp"
#include "gyre/runtime/utf8.hpp"
#include "gyre/text/tokenizer.hpp"

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
  const std::size_t at = runtime::first_invalid_utf8(line);
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

// Tagging corpora use BIO or BIOES tags (O, or B-/I-/E-/S- and a type); anything else is a bad
// record here, where the line is known, not later when the tag scheme is worked out.
void check_tag(const std::string& tag, std::size_t line_no, const std::string& where) {
  try {
    split_tag(tag);
  } catch (const Error& e) {
    bad(line_no, where + e.what());
  }
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

Example parse_jsonl(const std::string& line, std::size_t line_no, const ReadOptions& options) {
  const json j = parse_json_line(line, line_no);
  Example ex;
  ex.line = line_no;
  ex.text = string_field(j, options.text_column.c_str(), line_no);
  check_text(ex.text, line_no);
  if (options.label_column != "label") {
    // A chosen key holds one label (a string) or several (an array of strings).
    const char* key = options.label_column.c_str();
    if (j.contains(key) && j[key].is_array()) {
      ex.labels = string_array(j, key, line_no);
    } else {
      ex.labels.push_back(string_field(j, key, line_no));
      check_label(ex.labels.back(), line_no);
    }
    return ex;
  }
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
  for (std::size_t i = 0; i < ex.tags.size(); ++i)
    check_tag(ex.tags[i], line_no, "\"tags\"[" + std::to_string(i) + "]: ");
  join_tokens(ex);
  return ex;
}

// Watches the label column of a label<TAB>text file for two mistakes that otherwise surface far
// from their cause: a header line with other names than "label<TAB>text" (it would become a class
// of one example) and swapped columns (the texts read as labels: "label 'Couldn't be happier!'
// was not seen in training" about a dev split the user never made). Memory is bounded: distinct
// labels are counted up to kMaxTracked. The thresholds are common sense, no single source.
class LabelColumnCheck {
 public:
  void add(const std::string& label, const std::string& text, std::size_t line) {
    ++examples_;
    if (examples_ == 1) {
      first_label_ = label;
      first_text_ = text;
      first_line_ = line;
    } else if (label == first_label_) {
      ++first_repeats_;
    }
    if (label.find_first_of(" \t") != std::string::npos) {
      ++spaced_;
      if (spaced_line_ == 0) {
        spaced_line_ = line;
        spaced_label_ = label;
      }
    }
    if (distinct_.size() < kMaxTracked) distinct_.emplace(label);
  }

  /// `layout` completes "are the columns swapped?" for the file's format.
  void finish(const std::string& path, const std::string& layout, bool header_check) const {
    // Free text in the label column: most labels distinct and most with spaces.
    if (examples_ >= kMinExamples && 2 * distinct_.size() > examples_ && 2 * spaced_ >= examples_)
      throw ParseError(path, spaced_line_,
                       "the label column looks like free text (" + std::to_string(distinct_.size()) +
                           (distinct_.size() >= kMaxTracked ? "+" : "") + " distinct labels in " +
                           std::to_string(examples_) + " examples, " + std::to_string(spaced_) +
                           " with spaces, e.g. '" + shorten(spaced_label_) + "'): are the columns swapped? " +
                           layout);
    // A header: the first label occurs nowhere else, its "text" is one word, and the other labels
    // repeat (a real class of one example among repeating classes is rare).
    const std::size_t rest = examples_ - 1, rest_distinct = distinct_.size() - 1;
    if (header_check && examples_ >= 5 && first_repeats_ == 0 &&
        first_text_.find_first_of(" \t") == std::string::npos && rest >= 2 * rest_distinct &&
        distinct_.size() < kMaxTracked)
      throw ParseError(path, first_line_,
                       "looks like a header line ('" + shorten(first_label_) + "<TAB>" +
                           shorten(first_text_) +
                           "'): its label occurs nowhere else and its text is one word; delete the line, "
                           "or write the header as label<TAB>text");
  }

 private:
  static constexpr std::size_t kMaxTracked = 10000;
  static constexpr std::size_t kMinExamples = 20;

  static std::string shorten(const std::string& s) {
    if (s.size() <= 40) return s;
    std::size_t cut = 40;
    while (cut > 0 && (static_cast<unsigned char>(s[cut]) & 0xC0) == 0x80) --cut;  // whole code points
    return s.substr(0, cut) + "...";
  }

  std::size_t examples_ = 0, first_repeats_ = 0, spaced_ = 0, first_line_ = 0, spaced_line_ = 0;
  std::string first_label_, first_text_, spaced_label_;
  std::set<std::string, std::less<>> distinct_;
};

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

void read_lines(LineReader& reader, Reading& reading, CorpusFormat format, const std::string& path,
                const ReadOptions& options) {
  LabelColumnCheck label_column;
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
        ex = parse_jsonl(line, line_no, options);
      } else {
        if (is_blank(line)) return;
        ex = parse_tagged_jsonl(line, line_no);
      }
      have = true;
    });
    if (have && format == CorpusFormat::kTsv) label_column.add(ex.labels.front(), ex.text, ex.line);
    if (have) reading.deliver(std::move(ex));  // outside guarded: sink exceptions propagate
  }
  if (format == CorpusFormat::kTsv) label_column.finish(path, "The format is label<TAB>text", true);
}

// CSV with a header row: the text and label columns are chosen by name.
void read_csv(const fs::path& path, Reading& reading, const ReadOptions& options) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw IoError("cannot open corpus '" + path.string() + "': " + std::strerror(errno));
  const std::string name = path.string();
  CsvReader csv(in, name);
  std::vector<std::string> fields;
  if (!csv.next(fields)) throw ParseError(name, 0, "the file is empty");
  const std::size_t header_line = csv.line();
  const std::vector<std::string> header = fields;
  for (std::size_t i = 0; i < header.size(); ++i) {
    const std::size_t at = runtime::first_invalid_utf8(header[i]);
    if (at != std::string_view::npos)
      throw ParseError(name, header_line,
                       "column " + std::to_string(csv.field_columns()[i]) + ": invalid UTF-8");
  }
  const std::size_t text_at = csv_column(header, options.text_column, "--text-column", name, header_line);
  const std::size_t label_at = csv_column(header, options.label_column, "--label-column", name, header_line);
  LabelColumnCheck label_column;
  // Broken quoting (CsvReader throws) is never skipped: it leaves no next record to resume at.
  while (csv.next(fields)) {
    const std::size_t line_no = csv.line();
    bool have = false;
    Example ex;
    reading.guarded([&] {
      if (fields.size() != header.size())
        bad(line_no, std::to_string(fields.size()) + " field" + (fields.size() == 1 ? "" : "s") +
                         " but the header (line " + std::to_string(header_line) + ") has " +
                         std::to_string(header.size()));
      for (std::size_t i = 0; i < fields.size(); ++i) {
        const std::size_t at = runtime::first_invalid_utf8(fields[i]);
        if (at != std::string_view::npos)
          bad(csv.field_lines()[i], "column " + std::to_string(csv.field_columns()[i]) +
                                        ": invalid UTF-8 at byte " + std::to_string(at + 1) +
                                        " of the field");
      }
      ex.line = line_no;
      ex.text = fields[text_at];
      if (is_blank(ex.text))
        bad(csv.field_lines()[text_at], "column " + std::to_string(csv.field_columns()[text_at]) +
                                            ": empty text ('" + options.text_column + "')");
      ex.labels.push_back(fields[label_at]);
      if (is_blank(ex.labels.back()))
        bad(csv.field_lines()[label_at], "column " + std::to_string(csv.field_columns()[label_at]) +
                                             ": empty label ('" + options.label_column + "')");
      have = true;
    });
    if (have) label_column.add(ex.labels.front(), ex.text, ex.line);
    if (have) reading.deliver(std::move(ex));
  }
  label_column.finish(name,
                      "The label is column '" + options.label_column + "' and the text column '" +
                          options.text_column + "' (--label-column, --text-column)",
                      false);
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
      check_tag(tag, line_no, "");
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
    case CorpusFormat::kCsv:
      return "csv";
  }
  return "?";
}

CorpusFormat corpus_format_from_string(std::string_view name) {
  for (CorpusFormat f : {CorpusFormat::kAuto, CorpusFormat::kTsv, CorpusFormat::kJsonl,
                         CorpusFormat::kColumns, CorpusFormat::kTaggedJsonl, CorpusFormat::kCsv})
    if (name == to_string(f)) return f;
  throw ConfigError("format", "unknown corpus format '" + std::string(name) +
                                  "' (expected auto, tsv, jsonl, csv, columns or tagged-jsonl)");
}

Task task_of(CorpusFormat format) {
  GYRE_CHECK(format != CorpusFormat::kAuto, "task_of: detect the format first");
  return format == CorpusFormat::kColumns || format == CorpusFormat::kTaggedJsonl ? Task::kTag
                                                                                  : Task::kClassify;
}

CorpusFormat detect_format(const fs::path& path) {
  LineReader reader(path);
  std::string line;
  bool seen_text = false, blank_after_text = false, separated = false;
  std::size_t records = 0, column_like = 0;
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
    if (!seen_text && line.find('\t') == std::string::npos && line.find(',') != std::string::npos)
      return CorpusFormat::kCsv;  // a header row of comma-separated names
    if (blank_after_text) separated = true;
    blank_after_text = false;
    seen_text = true;
    // token<TAB>tag: exactly one TAB and a tag without spaces. Most lines of a columns file look
    // so; a few that do not (a third column, a missing TAB) are errors the columns reader reports
    // with their line, instead of turning the whole file into a classification corpus.
    ++records;
    const std::size_t tab = line.find('\t');
    if (tab != std::string::npos && line.find_first_of(" \t", tab + 1) == std::string::npos) ++column_like;
  }
  if (!seen_text) throw ParseError(path.string(), 0, "the file is empty");
  // A TSV classification corpus has sentences after the TAB, so few of its lines look like
  // token<TAB>tag; 90% is our own margin (no source) between the two.
  return separated && column_like * 10 >= records * 9 ? CorpusFormat::kColumns : CorpusFormat::kTsv;
}

ReadReport read_corpus(const fs::path& path, const ReadOptions& options,
                       const std::function<void(Example&&)>& sink) {
  const CorpusFormat format = options.format == CorpusFormat::kAuto ? detect_format(path) : options.format;
  Reading reading(path, options, sink);
  reading.report.format = format;
  reading.report.task = task_of(format);
  if (format == CorpusFormat::kCsv) {
    read_csv(path, reading, options);
    return reading.report;
  }
  LineReader reader(path);
  if (format == CorpusFormat::kColumns)
    read_columns(reader, reading);
  else
    read_lines(reader, reading, format, path.string(), options);
  return reading.report;
}

std::vector<Example> load_corpus(const fs::path& path, const ReadOptions& options, ReadReport* report) {
  std::vector<Example> out;
  const ReadReport r = read_corpus(path, options, [&](Example&& ex) { out.push_back(std::move(ex)); });
  if (report) *report = r;
  return out;
}

}  // namespace gyre::data
