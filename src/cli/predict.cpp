// gyre predict: label new text, streaming line by line. Output has exactly one record per input
// line (errors included), flushed after every batch.
//
// --threads N runs N batches at once, one per worker, each worker with its own model replica
// (loaded from the same file) and tokenizer; the batches are exactly the ones one thread would
// form, so every number is computed with the same operations and the output is byte-identical
// to one thread. Output is written in input order after each group of N batches.
//
// Memory is bounded by the settings, not by the input: each text is cut at --max-tokens tokens
// (default: the model's max_tokens, else text::kDefaultMaxTokens), and a line is read up to
// kLineBytesPerToken bytes per allowed token (the rest of a longer line is skipped unread into
// memory). A cut text is still predicted from the part kept, with a warning naming the line.

#include <algorithm>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <iostream>
#include <memory>
#include <numeric>
#include <string>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/train_settings.hpp"
#include "gyre/core/error.hpp"
#include "gyre/data/csv.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/data/tag_scheme.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/error.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/explain.hpp"
#include "gyre/train/worker_pool.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct PredictOptions {
  std::string model;
  std::string input = "-";
  std::string format = "tsv";
  std::string input_format = "text";
  std::shared_ptr<TrainSettingValues> given = std::make_shared<TrainSettingValues>();
  std::string text_column = "text";  // resolved from `given` (CSV header name, JSON Lines key)
  std::string on_error = "record";
  int top_k = 1;
  bool why = false;  // JSON Lines: per-token attributions of the chosen label
  int batch_size = 64;
  int threads = 1;
  long long max_tokens = -1;  // -1: the model's max_tokens, or text::kDefaultMaxTokens if it has none
  std::size_t effective_max_tokens = 0;  // resolved once the model is loaded (0 = no limit)
};

/// Bytes of a line read per allowed token. Real text averages well under 20 bytes per token, so
/// only hostile or binary input reaches this before the token cap (common practice, no source).
constexpr std::size_t kLineBytesPerToken = 1024;

/// Why a line's text was shortened.
enum class Cut { kNone, kTokens, kBytes };

/// One input line as read: at most `limit` bytes of it are kept.
struct InputLine {
  std::size_t number = 0;
  std::string text;        // columns input: the sentence's lines joined by '\n'
  bool bytes_cut = false;  // the line was longer than the limit (columns: the sentence was cut)
  std::string error;       // the reader found the record malformed (CSV field count)
};

struct Pending {
  std::size_t line = 0;
  std::string text;
  std::vector<std::string> tokens;
  std::vector<runtime::ByteRange> token_bytes;  // where each token lies in text (before normalization)
  std::vector<std::string> words;               // a model with an n-gram part: the tokens normalized
  std::string error;                            // non-empty: this line gets an error record
  std::size_t encoded = 0;                      // index into the batch's encoded examples
  Cut cut = Cut::kNone;
};

/// Reads lines from a stream keeping at most `limit` bytes of each (0 = no limit); the rest of a
/// longer line is consumed but not stored, so memory is bounded by the limit, not the input.
class LineSource {
 public:
  LineSource(std::istream& in, std::size_t limit) : in_(*in.rdbuf()), limit_(limit), buffer_(1 << 16) {}

  /// The next line without its '\n' (and a final '\r'); false at the end of the input.
  bool next(InputLine& line) {
    line.text.clear();
    line.bytes_cut = false;
    bool any = false;
    for (;;) {
      if (pos_ == end_ && !fill()) break;
      const char* start = buffer_.data() + pos_;
      const auto* newline = static_cast<const char*>(std::memchr(start, '\n', end_ - pos_));
      const std::size_t n = newline != nullptr ? static_cast<std::size_t>(newline - start) : end_ - pos_;
      any = true;
      const std::size_t room = limit_ == 0 ? n : std::min(n, limit_ - line.text.size());
      line.text.append(start, room);
      line.bytes_cut = line.bytes_cut || room < n;
      pos_ += n;
      if (newline != nullptr) {
        ++pos_;
        break;
      }
    }
    if (!any) return false;
    line.number = ++number_;
    if (line.bytes_cut) {
      drop_partial_code_point(line.text);
    } else if (!line.text.empty() && line.text.back() == '\r') {
      line.text.pop_back();
    }
    return true;
  }

 private:
  bool fill() {
    const std::streamsize got = in_.sgetn(buffer_.data(), static_cast<std::streamsize>(buffer_.size()));
    pos_ = 0;
    end_ = got > 0 ? static_cast<std::size_t>(got) : 0;
    return end_ > 0;
  }

  // A line cut inside a UTF-8 sequence must not end in half a code point.
  static void drop_partial_code_point(std::string& s) {
    std::size_t lead = s.size();
    for (std::size_t back = 1; back <= 4 && back <= s.size(); ++back) {
      const auto c = static_cast<unsigned char>(s[s.size() - back]);
      if ((c & 0xC0) != 0x80) {
        lead = s.size() - back;
        break;
      }
    }
    if (lead == s.size()) return;
    const auto c = static_cast<unsigned char>(s[lead]);
    const std::size_t need = c < 0x80 ? 1 : c >= 0xF0 ? 4 : c >= 0xE0 ? 3 : 2;
    if (s.size() - lead < need) s.resize(lead);
  }

  std::streambuf& in_;
  std::size_t limit_;
  std::vector<char> buffer_;
  std::size_t pos_ = 0, end_ = 0;
  std::size_t number_ = 0;
};

std::string tsv_field(std::string s) {
  for (char& c : s)
    if (c == '\t' || c == '\n' || c == '\r') c = ' ';
  return s;
}

void append(std::string& out, const std::string& line) {
  out += line;
  out += '\n';
}

// One worker: a model replica and a tokenizer; turns one batch of raw lines into its output
// records (appended to a string, written by the caller in input order).
class BatchWorker {
  // --multi-label-threshold replaces the model's thresholds.
  static io::TrainedModel with_threshold(io::TrainedModel trained, const PredictOptions& o) {
    if (o.given->given.contains("multi_label_threshold"))
      io::set_multi_label_threshold(trained, o.given->given["multi_label_threshold"].get<float>());
    return trained;
  }

 public:
  BatchWorker(io::TrainedModel trained, const PredictOptions& o)
      : trained_(with_threshold(std::move(trained), o)),
        o_(o),
        encoder_(trained_.vocab, data::Task::kClassify, o.effective_max_tokens),
        token_encoder_(trained_.vocab, data::Task::kTag, o.effective_max_tokens),
        spec_(trained_.spec) {
    encoder_.set_ngram_part(&trained_.ngram_part);
  }

  /// Processes the lines; with --on-error fail, stops at the first bad line and returns its
  /// ParseError (nothing of this batch is output then, as with one thread). `cuts` receives the
  /// lines whose text was shortened, in input order.
  void run(std::vector<InputLine>& lines, std::string& out, std::vector<std::pair<std::size_t, Cut>>& cuts) {
    pending_.clear();
    encoded_.clear();
    words_.clear();
    for (auto& line : lines) add(line);
    std::vector<train::ExamplePrediction> preds;
    if (!encoded_.empty())
      preds = trained_.runtime ? train::predict_all(*trained_.runtime, encoded_, true, false, words_)
                               : train::predict_all(*trained_.model, encoded_, o_.batch_size);
    train::decide_labels(spec_, preds);  // the thresholds in use (--multi-label-threshold)
    for (const auto& p : pending_) {
      if (p.cut != Cut::kNone && p.error.empty()) cuts.emplace_back(p.line, p.cut);
      if (!p.error.empty()) {
        write_error(p, out);
      } else if (spec_.task == data::Task::kClassify) {
        write_classification(p, preds[p.encoded], out);
      } else {
        write_tags(p, preds[p.encoded], out);
      }
    }
  }

 private:
  void add(InputLine& in) {
    Pending p;
    const std::size_t line = in.number;
    std::string raw = std::move(in.text);
    p.line = line;
    if (in.bytes_cut) p.cut = Cut::kBytes;
    p.error = std::move(in.error);
    // Pre-tokenized input keeps the user's tokens: they are normalised as in training, never cut
    // again into other tokens.
    bool pretokenized = false;
    std::vector<std::string> given_tokens;
    const bool json_input = o_.input_format == "jsonl" || o_.input_format == "tagged-jsonl";
    if (!p.error.empty()) {
      // already malformed
    } else if (json_input) {
      pretokenized = o_.input_format != "jsonl";
      read_json_line(in.bytes_cut, raw, given_tokens, p.error);
    } else if (o_.input_format == "tsv") {
      read_tsv_line(line, raw, p.error);
    } else if (o_.input_format == "columns") {
      pretokenized = true;
      read_columns(raw, given_tokens, p.error);
    }
    p.text = std::move(raw);
    if (p.error.empty()) encode(p, pretokenized, given_tokens);
    if (!p.error.empty() && o_.on_error == "fail") throw ParseError(input_name(), line, p.error);
    pending_.push_back(std::move(p));
  }

  // --input-format jsonl / tagged-jsonl: the text (into `raw`) or the tokens of a JSON object.
  void read_json_line(bool bytes_cut, std::string& raw, std::vector<std::string>& given_tokens,
                      std::string& error) const {
    const char* key = o_.input_format == "jsonl" ? o_.text_column.c_str() : "tokens";
    const json j = bytes_cut ? json() : json::parse(raw, nullptr, false);
    if (bytes_cut) {
      // Half a JSON object cannot be read.
      error = "line longer than " + std::to_string(o_.effective_max_tokens * kLineBytesPerToken) +
              " bytes, the limit for --max-tokens " + std::to_string(o_.effective_max_tokens) + " (" +
              std::to_string(kLineBytesPerToken) + " bytes per token)";
    } else if (j.is_discarded() || !j.is_object() || !j.contains(key)) {
      error = std::string("expected a JSON object with a \"") + key + "\" " +
              (o_.input_format == "jsonl" ? "string" : "array of strings");
    } else if (o_.input_format == "jsonl") {
      if (!j[key].is_string())
        error = std::string("\"") + key + "\" must be a string, got " + j[key].type_name();
      else
        raw = j[key].get<std::string>();
    } else if (!j[key].is_array()) {
      error = "\"tokens\" must be an array of strings";
    } else {
      for (const auto& t : j[key]) {
        if (!t.is_string() || t.get<std::string>().empty()) {
          error = "\"tokens\" must be an array of non-empty strings";
          break;
        }
        given_tokens.push_back(t.get<std::string>());
      }
    }
  }

  // --input-format tsv: labelled TSV; the label column is ignored, the text (left in `raw`) is
  // everything after the first TAB.
  void read_tsv_line(std::size_t line, std::string& raw, std::string& error) const {
    const std::size_t tab = raw.find('\t');
    if (tab == std::string::npos) {
      error = "expected label<TAB>text (--input-format tsv reads the text after the first TAB)";
    } else if (line == 1 && raw.find_first_of(" \t", tab + 1) == std::string::npos &&
               std::find(spec_.labels.begin(), spec_.labels.end(), raw.substr(0, tab)) ==
                   spec_.labels.end()) {
      // "label<TAB>text" itself is skipped by the reader; another first line whose label the
      // model does not know and whose text is one word is most likely a header too.
      error = "looks like a header line ('" + tsv_field(raw.substr(0, tab)) + "<TAB>" +
              tsv_field(raw.substr(tab + 1)) + "'); a header must read label<TAB>text";
    } else {
      raw.erase(0, tab + 1);
    }
  }

  // --input-format columns: one sentence, token<TAB>anything per line (the tag column, if any, is
  // ignored).
  static void read_columns(const std::string& raw, std::vector<std::string>& given_tokens,
                           std::string& error) {
    std::size_t start = 0;
    while (start <= raw.size()) {
      const std::size_t end = std::min(raw.find('\n', start), raw.size());
      const std::string_view row(raw.data() + start, end - start);
      const std::string token(row.substr(0, row.find('\t')));
      if (token.find_first_not_of(' ') == std::string::npos) {
        error = "empty token (a line of the sentence starts with a TAB)";
        break;
      }
      given_tokens.push_back(token);
      start = end + 1;
    }
  }

  // Checks the UTF-8 of the line's text (or of the user's tokens) and encodes it for the model;
  // what goes wrong goes to p.error.
  void encode(Pending& p, bool pretokenized, std::vector<std::string>& given_tokens) {
    const bool valid = pretokenized ? std::all_of(given_tokens.begin(), given_tokens.end(),
                                                  [](const std::string& t) { return text::is_valid_utf8(t); })
                                    : text::is_valid_utf8(p.text);
    if (!valid) {
      p.error = "invalid UTF-8";
      return;
    }
    data::EncodedExample ex;
    try {
      if (pretokenized) {
        data::Example given;
        given.tokens = given_tokens;
        std::vector<std::string> normalized, surfaces;
        if (token_encoder_.tokens(given, input_name(), normalized, surfaces)) p.cut = Cut::kTokens;
        for (const auto& t : normalized) ex.ids.push_back(trained_.vocab.vocab.id(t));
        if (token_encoder_.has_characters()) token_encoder_.add_characters(surfaces, ex);
        encoder_.add_ngram_scores(normalized, ex);
        given_tokens.resize(normalized.size());
        p.tokens = std::move(given_tokens);  // printed as the user wrote them; no byte ranges
        if (!trained_.ngram_part.empty()) p.words = std::move(normalized);
      } else if (encoder_.encode_text(p.text, p.tokens, ex, &p.token_bytes)) {
        // A line cut by bytes usually has more tokens than the cap too: name the cap that bit.
        p.cut = Cut::kTokens;
      }
      if (!pretokenized && !trained_.ngram_part.empty()) p.words = p.tokens;  // the normalized words
    } catch (const runtime::Error& e) {
      p.error = e.what();
    } catch (const ParseError& e) {
      p.error = e.what();
    }
    if (p.error.empty() && ex.ids.empty()) p.error = "no tokens in the line (empty text)";
    if (p.error.empty()) {
      p.encoded = encoded_.size();
      ex.source_line = p.line;
      encoded_.push_back(std::move(ex));
      if (!trained_.ngram_part.empty()) words_.push_back(p.words);
    }
  }

  std::string input_name() const { return o_.input == "-" ? "<stdin>" : o_.input; }

  void write_error(const Pending& p, std::string& out) {
    if (o_.format == "jsonl") {
      append(out, json{{"line", p.line}, {"error", p.error}}.dump());
    } else {
      append(out, "!error\t" + tsv_field(p.error));
    }
  }

  void write_classification(const Pending& p, const train::ExamplePrediction& pred, std::string& out) {
    std::vector<std::size_t> order(pred.probs.size());
    std::iota(order.begin(), order.end(), std::size_t{0});
    std::stable_sort(order.begin(), order.end(),
                     [&](std::size_t a, std::size_t b) { return pred.probs[a] > pred.probs[b]; });
    const std::size_t k = std::min(order.size(), static_cast<std::size_t>(o_.top_k));
    if (o_.format == "jsonl") {
      json top = json::array();
      for (std::size_t i = 0; i < k; ++i)
        top.push_back({{"label", spec_.labels[order[i]]}, {"probability", pred.probs[order[i]]}});
      json chosen = json::array();
      for (const auto l : pred.labels) chosen.push_back(spec_.labels[static_cast<std::size_t>(l)]);
      json record{{"line", p.line}, {"labels", chosen}, {"top", top}};
      if (p.cut != Cut::kNone) record["cut"] = true;
      if (o_.why)
        record["why"] =
            train::explain(trained_, encoded_[p.encoded], trained_.ngram_part.empty() ? p.tokens : p.words,
                           static_cast<int>(order[0]));
      append(out, record.dump());
    } else {
      std::string row;
      if (spec_.output == model::OutputKind::kSigmoid) {
        std::string chosen;
        for (const auto l : pred.labels)
          chosen += (chosen.empty() ? "" : ",") + spec_.labels[static_cast<std::size_t>(l)];
        row = (chosen.empty() ? "-" : chosen);
        for (std::size_t i = 0; i < k; ++i) {
          char buf[64];
          std::snprintf(buf, sizeof buf, "\t%s\t%.4f", spec_.labels[order[i]].c_str(),
                        static_cast<double>(pred.probs[order[i]]));
          row += buf;
        }
      } else {
        for (std::size_t i = 0; i < k; ++i) {
          char buf[64];
          std::snprintf(buf, sizeof buf, "%.4f", static_cast<double>(pred.probs[order[i]]));
          row += (i ? "\t" : "") + spec_.labels[order[i]] + "\t" + buf;
        }
      }
      append(out, row);
    }
  }

  // A span's bytes in the line's text: from its first token's first byte to its last token's
  // last byte, so its text is the user's own (e.g. "１４/03", not the tokens "14 / 03").
  static runtime::ByteRange span_bytes(const Pending& p, const data::TypedSpan& s) {
    return {p.token_bytes[s.begin].begin, p.token_bytes[s.end - 1].end};
  }

  // A span's text: the input's own bytes when the text was tokenized here; pre-tokenized input
  // (columns, tagged-jsonl) has no running text, so its tokens as given, joined by spaces.
  static std::string span_text(const Pending& p, const data::TypedSpan& s) {
    if (p.token_bytes.empty()) {
      std::string words;
      for (std::size_t i = s.begin; i < s.end; ++i) words += (i > s.begin ? " " : "") + p.tokens[i];
      return words;
    }
    const runtime::ByteRange r = span_bytes(p, s);
    return p.text.substr(r.begin, r.end - r.begin);
  }

  void write_tags(const Pending& p, const train::ExamplePrediction& pred, std::string& out) {
    std::vector<std::string> tags;
    for (const auto t : pred.tags) tags.push_back(spec_.labels[static_cast<std::size_t>(t)]);
    const auto spans = data::extract_spans(tags);
    const bool has_bytes = !p.token_bytes.empty();
    if (o_.format == "jsonl") {
      json js = json::array();
      for (const auto& s : spans) {
        json span{{"type", s.type}, {"start", s.begin}, {"end", s.end}};
        if (has_bytes) {
          const runtime::ByteRange r = span_bytes(p, s);
          span["byte_start"] = r.begin;
          span["byte_end"] = r.end;
        }
        span["text"] = span_text(p, s);
        js.push_back(std::move(span));
      }
      json record{{"line", p.line}, {"tokens", p.tokens}};
      if (has_bytes) {
        json token_bytes = json::array();
        for (const auto& r : p.token_bytes) token_bytes.push_back({r.begin, r.end});
        record["token_bytes"] = std::move(token_bytes);
      }
      record["tags"] = tags;
      record["spans"] = std::move(js);
      if (p.cut != Cut::kNone) record["cut"] = true;
      append(out, record.dump());
    } else {
      std::string row;
      for (std::size_t i = 0; i < tags.size(); ++i)
        row += (i ? " " : "") + tsv_field(p.tokens[i]) + "/" + tags[i];
      row += "\t";
      std::string ranges;
      for (std::size_t i = 0; i < spans.size(); ++i) {
        row += (i ? "; " : "") + spans[i].type + "=" + tsv_field(span_text(p, spans[i]));
        if (has_bytes) {
          const runtime::ByteRange r = span_bytes(p, spans[i]);
          ranges += (i ? " " : "") + std::to_string(r.begin) + "-" + std::to_string(r.end);
        }
      }
      append(out, row + "\t" + ranges);
    }
  }

  io::TrainedModel trained_;
  const PredictOptions& o_;
  data::Encoder encoder_;        // raw text: the model's tokenizer
  data::Encoder token_encoder_;  // pre-tokenized input: normalisation only
  const model::ModelSpec& spec_;
  std::vector<Pending> pending_;
  std::vector<data::EncodedExample> encoded_;
  std::vector<std::vector<std::string>> words_;  // n-gram part: Pending::words of encoded_[i]
};

// Reads lines into batches of --batch-size and runs them, --threads batches at a time.
class Predictor {
 public:
  /// Loads the first replica and resolves o.effective_max_tokens from it before the others.
  explicit Predictor(PredictOptions& o) : o_(o), pool_(o.threads) {
    io::TrainedModel first = io::load_trained_model(o.model, io::Engine::kRuntimeForExported);
    if (o.why && first.spec.task != data::Task::kClassify)
      throw ConfigError("why",
                        "--why explains a classifier's label; " + first.path.string() + " is a tagger");
    const std::size_t model_cap = first.vocab.tokenizer.max_tokens;
    o.effective_max_tokens = o.max_tokens >= 0 ? static_cast<std::size_t>(o.max_tokens)
                             : model_cap != 0  ? model_cap
                                               : text::kDefaultMaxTokens;
    workers_.push_back(std::make_unique<BatchWorker>(std::move(first), o));
    for (int w = 1; w < o.threads; ++w)
      workers_.push_back(
          std::make_unique<BatchWorker>(io::load_trained_model(o.model, io::Engine::kRuntimeForExported), o));
    batches_.resize(static_cast<std::size_t>(o.threads));
    outputs_.resize(static_cast<std::size_t>(o.threads));
    errors_.resize(static_cast<std::size_t>(o.threads));
    cuts_.resize(static_cast<std::size_t>(o.threads));
  }

  /// Bytes of a line worth reading: kLineBytesPerToken per allowed token (0 = no limit).
  std::size_t line_limit() const { return o_.effective_max_tokens * kLineBytesPerToken; }

  void add(InputLine& line) {
    auto& batch = batches_[filled_];
    batch.push_back(std::move(line));
    if (batch.size() >= static_cast<std::size_t>(o_.batch_size) && ++filled_ == batches_.size()) flush();
  }

  /// After the last flush: the total, when more lines were cut than were named one by one.
  void report_cuts() const {
    if (cut_lines_ > kNamedCuts)
      std::cerr << "gyre: warning: " << input_name() << ": " << cut_lines_
                << " lines were cut in all (the first " << kNamedCuts << " are named above)\n";
  }

  void flush() {
    pool_.run([&](int w) {
      const auto i = static_cast<std::size_t>(w);
      outputs_[i].clear();
      errors_[i] = nullptr;
      if (batches_[i].empty()) return;
      cuts_[i].clear();
      try {
        workers_[i]->run(batches_[i], outputs_[i], cuts_[i]);
      } catch (...) {
        errors_[i] = std::current_exception();
      }
    });
    for (std::size_t i = 0; i < batches_.size(); ++i) {
      if (errors_[i]) std::rethrow_exception(errors_[i]);  // earlier batches are written
      if (batches_[i].empty()) continue;
      std::fwrite(outputs_[i].data(), 1, outputs_[i].size(), stdout);
      std::fflush(stdout);
      batches_[i].clear();
      for (const auto& [line, why] : cuts_[i]) warn_cut(line, why);
    }
    filled_ = 0;
  }

 private:
  static constexpr std::size_t kNamedCuts = 10;

  std::string input_name() const { return o_.input == "-" ? "<stdin>" : o_.input; }

  void warn_cut(std::size_t line, Cut why) {
    if (++cut_lines_ > kNamedCuts) return;
    std::cerr << "gyre: warning: " << input_name() << ":" << line << ": ";
    if (why == Cut::kTokens)
      std::cerr << "text cut to its first " << o_.effective_max_tokens << " tokens";
    else
      std::cerr << "line longer than " << line_limit() << " bytes (" << kLineBytesPerToken
                << " per allowed token); predicted from its first " << line_limit() << " bytes";
    std::cerr << " (--max-tokens N sets the limit, 0 = none)\n";
  }

  const PredictOptions& o_;
  train::WorkerPool pool_;
  std::vector<std::unique_ptr<BatchWorker>> workers_;
  std::vector<std::vector<InputLine>> batches_;
  std::vector<std::string> outputs_;
  std::vector<std::exception_ptr> errors_;
  std::vector<std::vector<std::pair<std::size_t, Cut>>> cuts_;
  std::size_t filled_ = 0;
  std::size_t cut_lines_ = 0;
};

ExitCode run_predict(PredictOptions& o) {
  if (o.why && o.format != "jsonl")
    throw ConfigError("why", "adds a field to JSON Lines records: use it with --format jsonl");
  Predictor predictor(o);  // loads the model (once per thread) before reading any input
  std::ifstream file;
  std::istream* in = &std::cin;
  if (o.input != "-") {
    file.open(o.input, std::ios::binary);
    if (!file) throw IoError("cannot open " + o.input);
    in = &file;
  }
  const std::string name = o.input == "-" ? "<stdin>" : o.input;
  InputLine line;
  if (o.input_format == "csv") {
    // RFC 4180 with a header row; the text column is chosen by name. One record per CSV record.
    data::CsvReader csv(*in, name);
    std::vector<std::string> fields;
    if (!csv.next(fields)) throw ParseError(name, 0, "the input is empty (a CSV header row was expected)");
    const std::size_t columns = fields.size(), header_line = csv.line();
    const std::size_t at = data::csv_column(fields, o.text_column, "--text-column", name, header_line);
    const std::size_t limit = predictor.line_limit();
    while (csv.next(fields)) {
      line = InputLine{};
      line.number = csv.line();
      if (fields.size() != columns) {
        line.error = std::to_string(fields.size()) + " fields but the header (line " +
                     std::to_string(header_line) + ") has " + std::to_string(columns);
      } else {
        line.text = std::move(fields[at]);
        if (limit != 0 && line.text.size() > limit) {
          line.text.resize(limit);
          line.bytes_cut = true;
        }
      }
      predictor.add(line);
    }
  } else {
    LineSource source(*in, predictor.line_limit());
    InputLine sentence;
    std::size_t sentence_tokens = 0;
    const std::size_t max_tokens = o.effective_max_tokens;
    while (source.next(line)) {
      if (o.input_format == "tsv" && line.number == 1 && line.text == "label\ttext") continue;  // header
      if (o.input_format != "columns") {
        predictor.add(line);
        continue;
      }
      // Columns: one record per sentence (lines up to a blank line), tokens beyond the cap dropped.
      if (line.text.find_first_not_of(" \t") == std::string::npos) {
        if (sentence_tokens > 0) predictor.add(sentence);
        sentence = InputLine{};
        sentence_tokens = 0;
        continue;
      }
      if (sentence_tokens == 0) sentence.number = line.number;
      if (max_tokens != 0 && sentence_tokens >= max_tokens) {
        sentence.bytes_cut = true;
        continue;
      }
      if (sentence_tokens > 0) sentence.text += '\n';
      sentence.text += line.text;
      ++sentence_tokens;
    }
    if (sentence_tokens > 0) predictor.add(sentence);
  }
  predictor.flush();
  predictor.report_cuts();
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "predict", "Label new text from a file or stdin (TSV or JSON Lines out)", 40,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<PredictOptions>();
      sub.footer(
          "Examples:\n"
          "  echo 'my kettle stopped heating, can someone come friday?' | gyre predict runs/intents-lstm\n"
          "  gyre predict runs/slots-crf --input messages.txt --format jsonl\n"
          "  gyre predict runs/intents-lstm --input corpora/demo/intents.test.tsv --input-format tsv\n"
          "  gyre predict runs/slots-crf --input corpora/demo/slots.test.tsv --input-format columns\n"
          "One output line per input record (a line; a sentence of columns input; a CSV record; the\n"
          "header line label<TAB>text of tsv input gives none): classifiers print label<TAB>probability "
          "(top-k pairs),\n"
          "taggers token/TAG ... <TAB> type=span text; ... <TAB> byte ranges start-end of the spans in the\n"
          "text (a span's text is the input's own bytes, before normalization; columns and tagged-jsonl\n"
          "input: the given tokens joined by spaces, no byte ranges); lines that cannot be read give\n"
          "'!error<TAB>why' "
          "(JSON Lines: {\"line\": n, \"error\": ...}) unless --on-error fail.");
      sub.add_option("model", o->model, "run directory, checkpoint or exported model")->required();
      sub.add_option("--input", o->input, "input file (see --input-format); - = stdin")->default_str("-");
      sub.add_option("--format", o->format, "output: tsv | jsonl")
          ->check(one_of({"tsv", "jsonl"}))
          ->default_str("tsv");
      sub.add_option("--input-format", o->input_format,
                     "text (one text per line) | tsv (label<TAB>text, the text used) | csv (header row, "
                     "--text-column) | jsonl ({\"text\": ...} per line) | columns (token<TAB>... per line, "
                     "blank line between sentences) | tagged-jsonl ({\"tokens\": [...]} per line); "
                     "columns and tagged-jsonl keep your tokens")
          ->check(one_of({"text", "tsv", "csv", "jsonl", "columns", "tagged-jsonl"}))
          ->default_str("text");
      add_train_setting_options(sub, o->given, {}, {"text_column", "multi_label_threshold"});
      sub.add_option("--top-k", o->top_k, "classifiers: how many labels to print")
          ->check(CLI::PositiveNumber)
          ->default_str("1");
      sub.add_flag("--why", o->why,
                   "classifiers, --format jsonl: add \"why\", each token's share of the top label's "
                   "probability (integrated gradients for a checkpoint, occlusion for an exported file)");
      sub.add_option("--batch-size", o->batch_size, "lines per batch (output is flushed per batch)")
          ->check(CLI::PositiveNumber)
          ->default_str("64");
      sub.add_option("--threads", o->threads,
                     "worker threads: N batches run at once, one per thread (output identical to 1 thread)")
          ->check(CLI::Range(1, 256))
          ->default_str("1");
      sub.add_option("--max-tokens", o->max_tokens,
                     "cut each text at N tokens, with a warning naming the line (0 = no limit; "
                     "default: the model's max_tokens, or " +
                         std::to_string(text::kDefaultMaxTokens) + ")")
          ->check(CLI::NonNegativeNumber);
      sub.add_option("--on-error", o->on_error,
                     "record: print an error record for a bad line; fail: stop with exit code 2")
          ->check(one_of({"record", "fail"}))
          ->default_str("record");
      return [o] {
        o->text_column = o->given->given.value("text_column", o->text_column);
        return run_predict(*o);
      };
    }};

}  // namespace
}  // namespace gyre::cli
