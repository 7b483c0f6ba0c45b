// gyre predict: label new text, streaming line by line. Output has exactly one record per input
// line (errors included), flushed after every batch.

#include <algorithm>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <memory>
#include <numeric>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/eval/tag_scheme.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/model/encoder.hpp"
#include "gyre/runtime/error.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/train/evaluate.hpp"

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
};

struct Pending {
  std::size_t line = 0;
  std::string text;
  std::vector<std::string> tokens;
  std::string error;  // non-empty: this line gets an error record
  std::size_t encoded = 0;  // index into the batch's encoded examples
};

std::string tsv_field(std::string s) {
  for (char& c : s)
    if (c == '\t' || c == '\n' || c == '\r') c = ' ';
  return s;
}

class Predictor {
 public:
  Predictor(io::TrainedModel& trained, const PredictOptions& o)
      : trained_(trained), o_(o), encoder_(trained.vocab, data::Task::kClassify), spec_(trained.spec) {}

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
    if (pending_.size() >= static_cast<std::size_t>(o_.batch_size)) flush();
  }

  void flush() {
    if (pending_.empty()) return;
    std::vector<train::ExamplePrediction> preds;
    if (!encoded_.empty()) preds = train::predict_all(*trained_.model, encoded_, o_.batch_size);
    for (const auto& p : pending_) {
      if (!p.error.empty()) {
        write_error(p);
      } else if (spec_.task == data::Task::kClassify) {
        write_classification(p, preds[p.encoded]);
      } else {
        write_tags(p, preds[p.encoded]);
      }
    }
    std::fflush(stdout);
    pending_.clear();
    encoded_.clear();
  }

 private:
  void write_error(const Pending& p) {
    if (o_.format == "jsonl") {
      std::printf("%s\n", json{{"line", p.line}, {"error", p.error}}.dump().c_str());
    } else {
      std::printf("!error\t%s\n", tsv_field(p.error).c_str());
    }
  }

  void write_classification(const Pending& p, const train::ExamplePrediction& pred) {
    std::vector<std::size_t> order(pred.probs.size());
    std::iota(order.begin(), order.end(), std::size_t{0});
    std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) { return pred.probs[a] > pred.probs[b]; });
    const std::size_t k = std::min(order.size(), static_cast<std::size_t>(o_.top_k));
    if (o_.format == "jsonl") {
      json top = json::array();
      for (std::size_t i = 0; i < k; ++i) top.push_back({{"label", spec_.labels[order[i]]}, {"probability", pred.probs[order[i]]}});
      json chosen = json::array();
      for (const auto l : pred.labels) chosen.push_back(spec_.labels[static_cast<std::size_t>(l)]);
      std::printf("%s\n", json{{"line", p.line}, {"labels", chosen}, {"top", top}}.dump().c_str());
    } else {
      std::string row;
      if (spec_.output == model::OutputKind::kSigmoid) {
        std::string chosen;
        for (const auto l : pred.labels) chosen += (chosen.empty() ? "" : ",") + spec_.labels[static_cast<std::size_t>(l)];
        row = (chosen.empty() ? "-" : chosen);
        for (std::size_t i = 0; i < k; ++i) {
          char buf[64];
          std::snprintf(buf, sizeof buf, "\t%s\t%.4f", spec_.labels[order[i]].c_str(), static_cast<double>(pred.probs[order[i]]));
          row += buf;
        }
      } else {
        for (std::size_t i = 0; i < k; ++i) {
          char buf[64];
          std::snprintf(buf, sizeof buf, "%.4f", static_cast<double>(pred.probs[order[i]]));
          row += (i ? "\t" : "") + spec_.labels[order[i]] + "\t" + buf;
        }
      }
      std::printf("%s\n", row.c_str());
    }
  }

  void write_tags(const Pending& p, const train::ExamplePrediction& pred) {
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
      std::printf("%s\n", json{{"line", p.line}, {"tokens", p.tokens}, {"tags", tags}, {"spans", js}}.dump().c_str());
    } else {
      std::string row;
      for (std::size_t i = 0; i < tags.size(); ++i) row += (i ? " " : "") + tsv_field(p.tokens[i]) + "/" + tags[i];
      row += "\t";
      for (std::size_t i = 0; i < spans.size(); ++i) {
        std::string words;
        for (std::size_t t = spans[i].begin; t < spans[i].end; ++t) words += (t > spans[i].begin ? " " : "") + p.tokens[t];
        row += (i ? "; " : "") + spans[i].type + "=" + tsv_field(words);
      }
      std::printf("%s\n", row.c_str());
    }
  }

  io::TrainedModel& trained_;
  const PredictOptions& o_;
  model::Encoder encoder_;
  const model::ModelSpec& spec_;
  std::vector<Pending> pending_;
  std::vector<data::EncodedExample> encoded_;
};

ExitCode run_predict(const PredictOptions& o) {
  io::TrainedModel trained = io::load_trained_model(o.model);
  std::ifstream file;
  std::istream* in = &std::cin;
  if (o.input != "-") {
    file.open(o.input, std::ios::binary);
    if (!file) throw IoError("cannot open " + o.input);
    in = &file;
  }
  Predictor predictor(trained, o);
  std::string line;
  std::size_t line_no = 0;
  while (std::getline(*in, line)) predictor.add(++line_no, std::move(line));
  if (in->bad()) throw IoError("cannot read " + o.input);
  predictor.flush();
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "predict", "Label new text from a file or stdin (TSV or JSON Lines out)", 40, [](CLI::App& sub) -> Runner {
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
      sub.add_option("--format", o->format, "output: tsv | jsonl")->check(CLI::IsMember({"tsv", "jsonl"}))->default_str("tsv");
      sub.add_option("--input-format", o->input_format, "text (one text per line) | jsonl ({\"text\": ...} per line)")
          ->check(CLI::IsMember({"text", "jsonl"}))
          ->default_str("text");
      sub.add_option("--top-k", o->top_k, "classifiers: how many labels to print")->check(CLI::PositiveNumber)->default_str("1");
      sub.add_option("--batch-size", o->batch_size, "lines per batch (output is flushed per batch)")
          ->check(CLI::PositiveNumber)
          ->default_str("64");
      sub.add_option("--on-error", o->on_error, "record: print an error record for a bad line; fail: stop with exit code 2")
          ->check(CLI::IsMember({"record", "fail"}))
          ->default_str("record");
      return [o] { return run_predict(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
