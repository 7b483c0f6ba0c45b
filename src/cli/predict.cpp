// gyre predict: label new text, streaming line by line. Output has exactly one record per input
// line (errors included), flushed after every batch.
//
// --threads N runs N batches at once, one per worker, each worker with its own model replica
// (loaded from the same file) and tokenizer; the batches are exactly the ones one thread would
// form, so every number is computed with the same operations and the output is byte-identical
// to one thread. Output is written in input order after each group of N batches.

#include <algorithm>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <memory>
#include <numeric>
#include <string>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/eval/tag_scheme.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/model/encoder.hpp"
#include "gyre/runtime/error.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/worker_pool.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct PredictOptions {
  std::string model;
  std::string input = "-";
  std::string format = "tsv";
  std::string input_format = "text";
  std::string on_error = "record";
  int top_k = 1;
  int batch_size = 64;
  int threads = 1;
};

struct Pending {
  std::size_t line = 0;
  std::string text;
  std::vector<std::string> tokens;
  std::string error;        // non-empty: this line gets an error record
  std::size_t encoded = 0;  // index into the batch's encoded examples
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
 public:
  BatchWorker(io::TrainedModel trained, const PredictOptions& o)
      : trained_(std::move(trained)),
        o_(o),
        encoder_(trained_.vocab, data::Task::kClassify),
        spec_(trained_.spec) {}

  /// Processes the lines; with --on-error fail, stops at the first bad line and returns its
  /// ParseError (nothing of this batch is output then, as with one thread).
  void run(std::vector<std::pair<std::size_t, std::string>>& lines, std::string& out) {
    pending_.clear();
    encoded_.clear();
    for (auto& [line, raw] : lines) add(line, std::move(raw));
    std::vector<train::ExamplePrediction> preds;
    if (!encoded_.empty()) preds = train::predict_all(*trained_.model, encoded_, o_.batch_size);
    for (const auto& p : pending_) {
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
  void add(std::size_t line, std::string raw) {
    Pending p;
    p.line = line;
    if (!raw.empty() && raw.back() == '\r') raw.pop_back();
    if (o_.input_format == "jsonl") {
      const json j = json::parse(raw, nullptr, false);
      if (j.is_discarded() || !j.is_object() || !j.contains("text") || !j["text"].is_string()) {
        p.error = "expected a JSON object with a \"text\" string";
      } else {
        raw = j["text"].get<std::string>();
      }
    }
    p.text = std::move(raw);
    if (p.error.empty()) {
      if (!text::is_valid_utf8(p.text)) {
        p.error = "invalid UTF-8";
      } else {
        std::vector<std::int32_t> ids;
        try {
          encoder_.encode_text(p.text, p.tokens, ids);
        } catch (const runtime::Error& e) {
          p.error = e.what();
        }
        if (p.error.empty() && ids.empty()) p.error = "no tokens in the line (empty text)";
        if (p.error.empty()) {
          p.encoded = encoded_.size();
          data::EncodedExample ex;
          ex.ids = std::move(ids);
          ex.source_line = line;
          encoded_.push_back(std::move(ex));
        }
      }
    }
    if (!p.error.empty() && o_.on_error == "fail")
      throw ParseError(o_.input == "-" ? "<stdin>" : o_.input, line, p.error);
    pending_.push_back(std::move(p));
  }

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
      append(out, json{{"line", p.line}, {"labels", chosen}, {"top", top}}.dump());
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

  void write_tags(const Pending& p, const train::ExamplePrediction& pred, std::string& out) {
    std::vector<std::string> tags;
    for (const auto t : pred.tags) tags.push_back(spec_.labels[static_cast<std::size_t>(t)]);
    const auto spans = eval::extract_spans(tags);
    if (o_.format == "jsonl") {
      json js = json::array();
      for (const auto& s : spans) {
        std::string words;
        for (std::size_t i = s.begin; i < s.end; ++i) words += (i > s.begin ? " " : "") + p.tokens[i];
        js.push_back({{"type", s.type}, {"start", s.begin}, {"end", s.end}, {"text", words}});
      }
      append(out, json{{"line", p.line}, {"tokens", p.tokens}, {"tags", tags}, {"spans", js}}.dump());
    } else {
      std::string row;
      for (std::size_t i = 0; i < tags.size(); ++i)
        row += (i ? " " : "") + tsv_field(p.tokens[i]) + "/" + tags[i];
      row += "\t";
      for (std::size_t i = 0; i < spans.size(); ++i) {
        std::string words;
        for (std::size_t t = spans[i].begin; t < spans[i].end; ++t)
          words += (t > spans[i].begin ? " " : "") + p.tokens[t];
        row += (i ? "; " : "") + spans[i].type + "=" + tsv_field(words);
      }
      append(out, row);
    }
  }

  io::TrainedModel trained_;
  const PredictOptions& o_;
  model::Encoder encoder_;
  const model::ModelSpec& spec_;
  std::vector<Pending> pending_;
  std::vector<data::EncodedExample> encoded_;
};

// Reads lines into batches of --batch-size and runs them, --threads batches at a time.
class Predictor {
 public:
  explicit Predictor(const PredictOptions& o) : o_(o), pool_(o.threads) {
    for (int w = 0; w < o.threads; ++w)
      workers_.push_back(std::make_unique<BatchWorker>(io::load_trained_model(o.model), o));
    batches_.resize(static_cast<std::size_t>(o.threads));
    outputs_.resize(static_cast<std::size_t>(o.threads));
    errors_.resize(static_cast<std::size_t>(o.threads));
  }

  void add(std::size_t line, std::string raw) {
    auto& batch = batches_[filled_];
    batch.emplace_back(line, std::move(raw));
    if (batch.size() >= static_cast<std::size_t>(o_.batch_size) && ++filled_ == batches_.size()) flush();
  }

  void flush() {
    pool_.run([&](int w) {
      const auto i = static_cast<std::size_t>(w);
      outputs_[i].clear();
      errors_[i] = nullptr;
      if (batches_[i].empty()) return;
      try {
        workers_[i]->run(batches_[i], outputs_[i]);
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
    }
    filled_ = 0;
  }

 private:
  const PredictOptions& o_;
  train::WorkerPool pool_;
  std::vector<std::unique_ptr<BatchWorker>> workers_;
  std::vector<std::vector<std::pair<std::size_t, std::string>>> batches_;
  std::vector<std::string> outputs_;
  std::vector<std::exception_ptr> errors_;
  std::size_t filled_ = 0;
};

ExitCode run_predict(const PredictOptions& o) {
  Predictor predictor(o);  // loads the model (once per thread) before reading any input
  std::ifstream file;
  std::istream* in = &std::cin;
  if (o.input != "-") {
    file.open(o.input, std::ios::binary);
    if (!file) throw IoError("cannot open " + o.input);
    in = &file;
  }
  std::string line;
  std::size_t line_no = 0;
  while (std::getline(*in, line)) predictor.add(++line_no, std::move(line));
  if (in->bad()) throw IoError("cannot read " + o.input);
  predictor.flush();
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
          "One output line per input line: classifiers print label<TAB>probability (top-k pairs),\n"
          "taggers token/TAG ... <TAB> type=span text; lines that cannot be read give '!error<TAB>why'\n"
          "(JSON Lines: {\"line\": n, \"error\": ...}) unless --on-error fail.");
      sub.add_option("model", o->model, "run directory, checkpoint or exported model")->required();
      sub.add_option("--input", o->input, "file with one text per line; - = stdin")->default_str("-");
      sub.add_option("--format", o->format, "output: tsv | jsonl")
          ->check(CLI::IsMember({"tsv", "jsonl"}))
          ->default_str("tsv");
      sub.add_option("--input-format", o->input_format,
                     "text (one text per line) | jsonl ({\"text\": ...} per line)")
          ->check(CLI::IsMember({"text", "jsonl"}))
          ->default_str("text");
      sub.add_option("--top-k", o->top_k, "classifiers: how many labels to print")
          ->check(CLI::PositiveNumber)
          ->default_str("1");
      sub.add_option("--batch-size", o->batch_size, "lines per batch (output is flushed per batch)")
          ->check(CLI::PositiveNumber)
          ->default_str("64");
      sub.add_option("--threads", o->threads,
                     "worker threads: N batches run at once, one per thread (output identical to 1 thread)")
          ->check(CLI::Range(1, 256))
          ->default_str("1");
      sub.add_option("--on-error", o->on_error,
                     "record: print an error record for a bad line; fail: stop with exit code 2")
          ->check(CLI::IsMember({"record", "fail"}))
          ->default_str("record");
      return [o] { return run_predict(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
