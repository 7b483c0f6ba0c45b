// gyre eval: score a model (run directory, checkpoint or exported file) on a labelled file.

#include <algorithm>
#include <cstdio>
#include <iostream>
#include <memory>
#include <numeric>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/model_data.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/eval/span_metrics.hpp"
#include "gyre/eval/tag_baseline.hpp"
#include "gyre/train/evaluate.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct EvalOptions {
  std::string model;
  std::string data;
  std::string json_out;
  std::string baseline_train;
  int errors = 0;
  bool skip_bad_lines = false;
};

std::string join(const std::vector<std::string>& items, const char* sep = " ") {
  std::string out;
  for (const auto& s : items) out += (out.empty() ? "" : sep) + s;
  return out;
}

// Most-frequent-tag-per-token baseline trained on the model's training file.
std::optional<eval::TaggingMetrics> tag_baseline(const std::string& train_path,
                                                 const io::TrainedModel& trained, const LabelledData& test,
                                                 json& report) {
  if (train_path.empty()) return std::nullopt;
  eval::MostFrequentTagBaseline baseline;
  data::read_corpus(train_path, {}, [&](data::Example&& ex) { baseline.add(ex.tokens, ex.tags); });
  baseline.finalize();
  std::vector<std::vector<std::string>> gold, predicted;
  for (const auto& ex : test.examples) {
    gold.push_back(ex.tags);
    predicted.push_back(baseline.predict(ex.tokens));
  }
  (void)trained;
  auto metrics = eval::tagging_metrics(gold, predicted);
  report["baseline"] = {
      {"name", "most frequent tag per token"}, {"train", train_path}, {"metrics", metrics.to_json()}};
  return metrics;
}

ExitCode run_eval(const EvalOptions& o) {
  const io::TrainedModel trained = io::load_trained_model(o.model);
  const LabelledData data = load_labelled(o.data, trained, o.skip_bad_lines);
  auto result = train::evaluate(*trained.model, data.encoded, o.errors > 0);
  json report = result.to_json();
  report["model"] = trained.path.string();
  report["data"] = o.data;
  const auto& spec = trained.spec;

  std::printf("model  %s\ndata   %s  (%zu examples)\n\n", trained.path.string().c_str(), o.data.c_str(),
              data.examples.size());
  if (result.classification) {
    const auto& m = *result.classification;
    std::printf("%s\n", m.to_table().c_str());
    std::printf("confusion matrix (rows: gold, columns: predicted)\n%s", m.confusion_table().c_str());
  } else if (result.multilabel) {
    std::printf("%s", result.multilabel->to_table().c_str());
  } else {
    std::printf("%s", result.tagging->to_table().c_str());
    std::string train_path = o.baseline_train;
    if (train_path.empty() && trained.header.contains("config"))
      train_path = trained.header["config"].value("train", "");
    std::error_code ec;
    if (!train_path.empty() && std::filesystem::exists(train_path, ec)) {
      const auto base = tag_baseline(train_path, trained, data, report);
      if (base)
        std::printf(
            "\nbaseline (most frequent tag per token, from %s):\n  span F1 %.4f   token accuracy %.4f\n",
            train_path.c_str(), base->micro.f1, base->token_accuracy);
    } else {
      std::printf("\n(baseline skipped: give --baseline-train FILE with the training corpus)\n");
    }
  }

  if (o.errors > 0) {
    // Most confident mistakes first.
    std::vector<std::size_t> wrong;
    for (std::size_t i = 0; i < data.encoded.size(); ++i) {
      const auto& p = result.predictions[i];
      const bool ok = spec.task == data::Task::kClassify ? p.labels == data.encoded[i].targets
                                                         : p.tags == data.encoded[i].targets;
      if (!ok) wrong.push_back(i);
    }
    std::stable_sort(wrong.begin(), wrong.end(), [&](std::size_t a, std::size_t b) {
      return result.predictions[a].confidence > result.predictions[b].confidence;
    });
    if (wrong.size() > static_cast<std::size_t>(o.errors)) wrong.resize(static_cast<std::size_t>(o.errors));
    std::printf("\n%zu most confident mistakes:\n", wrong.size());
    json errors = json::array();
    for (const auto i : wrong) {
      const auto& ex = data.examples[i];
      const auto& p = result.predictions[i];
      if (spec.task == data::Task::kClassify) {
        std::vector<std::string> predicted;
        for (const auto l : p.labels) predicted.push_back(spec.labels[static_cast<std::size_t>(l)]);
        std::printf("  line %zu  gold %s  predicted %s  p=%.3f\n    %s\n", ex.line,
                    join(ex.labels, ",").c_str(), join(predicted, ",").c_str(),
                    static_cast<double>(p.confidence), ex.text.c_str());
        errors.push_back({{"line", ex.line},
                          {"text", ex.text},
                          {"gold", ex.labels},
                          {"predicted", predicted},
                          {"probability", p.confidence}});
      } else {
        std::vector<std::string> predicted;
        std::string marked;
        for (std::size_t t = 0; t < p.tags.size(); ++t) {
          predicted.push_back(spec.labels[static_cast<std::size_t>(p.tags[t])]);
          marked += (t ? " " : "") + ex.tokens[t];
          if (predicted.back() != ex.tags[t]) marked += "[" + ex.tags[t] + "->" + predicted.back() + "]";
        }
        std::printf("  line %zu  confidence %.3f\n    %s\n", ex.line, static_cast<double>(p.confidence),
                    marked.c_str());
        errors.push_back({{"line", ex.line},
                          {"tokens", ex.tokens},
                          {"gold", ex.tags},
                          {"predicted", predicted},
                          {"confidence", p.confidence}});
      }
    }
    report["errors"] = errors;
  }
  if (!o.json_out.empty()) write_file_atomic(o.json_out, report.dump(2) + "\n");
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "eval", "Score a model on a labelled file: metrics table, JSON, worst mistakes", 30,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<EvalOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre eval runs/intents-lstm --data corpora/demo/intents.test.tsv\n"
          "  gyre eval model.gyre --data corpora/demo/slots.test.tsv --json metrics.json --errors 10\n"
          "MODEL is a run directory (its checkpoint-best.bin), a checkpoint, or an exported model file.");
      sub.add_option("model", o->model, "run directory, checkpoint or exported model")->required();
      sub.add_option("--data", o->data, "labelled file in the model's corpus format")->required();
      sub.add_option("--json", o->json_out, "also write every number as JSON to this file");
      sub.add_option("--errors", o->errors, "list the N most confident mistakes")
          ->check(CLI::NonNegativeNumber);
      sub.add_option(
          "--baseline-train", o->baseline_train,
          "taggers: training corpus for the most-frequent-tag baseline (default: the run's training file)");
      sub.add_flag("--skip-bad-lines", o->skip_bad_lines,
                   "skip malformed records (reported) instead of stopping");
      return [o] { return run_eval(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
