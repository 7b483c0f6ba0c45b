// gyre eval: score a model (run directory, checkpoint or exported file) on a labelled file.

#include <algorithm>
#include <cstdio>
#include <iostream>
#include <memory>
#include <numeric>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/model_data.hpp"
#include "cli/train_settings.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/eval/calibration.hpp"
#include "gyre/eval/span_metrics.hpp"
#include "gyre/eval/tag_baseline.hpp"
#include "gyre/train/baseline.hpp"
#include "gyre/train/calibrate.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/explain.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct EvalOptions {
  std::string model;
  std::string test;
  std::string json_out;
  std::string baseline_train;
  int errors = 0;
  bool no_baseline = false;
  std::shared_ptr<TrainSettingValues> given = std::make_shared<TrainSettingValues>();
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

void print_baseline_scores(const json& scores) {
  for (const auto& [key, label] : {std::pair{"accuracy", "accuracy"},
                                   {"macro_f1", "macro F1"},
                                   {"span_f1", "span F1"},
                                   {"token_accuracy", "token accuracy"}})
    if (scores.contains(key)) std::printf("  %s %.4f", label, scores[key].get<double>());
  std::printf("\n");
}

// A model with an n-gram part carries the linear baseline's fit (README "N-gram part": the part is
// the baseline's L2 logistic regression, fitted on the run's training split with C chosen on dev):
// the baseline row is that part alone, W x + b as saved (mix > 0 scales it, which changes no
// arg-max), not a refit. For an f16/int8 file these are the stored (rounded) weights.
void ngram_part_baseline(const io::TrainedModel& trained, const LabelledData& data, json& report) {
  const runtime::NgramPart& part = trained.ngram_part;
  std::vector<std::int32_t> gold, predicted;
  for (const auto& ex : data.encoded) {
    GYRE_CHECK(ex.ngram_scores.size() == static_cast<std::size_t>(part.classes()),
               "an example has no n-gram part scores");
    gold.push_back(ex.targets.at(0));
    // First of equal scores, as the baseline's own predict does.
    predicted.push_back(static_cast<std::int32_t>(
        std::max_element(ex.ngram_scores.begin(), ex.ngram_scores.end()) - ex.ngram_scores.begin()));
  }
  const auto m = eval::classification_metrics(gold, predicted, trained.spec.labels);
  const json scores{{"accuracy", m.accuracy}, {"macro_f1", m.macro.f1}};
  std::string name = "bag of token 1-" + std::to_string(part.order()) + "-grams, L2 logistic regression";
  std::error_code ec;
  const auto metrics_path = trained.path.parent_path() / "metrics.json";
  if (!trained.exported() && std::filesystem::exists(metrics_path, ec)) {
    const json mj = json::parse(read_file(metrics_path), nullptr, false);
    if (!mj.is_discarded() && mj.contains("baseline") && mj["baseline"].contains("name"))
      name = mj["baseline"]["name"].get<std::string>();
  }
  report["linear_baseline"] = {{"name", name},
                               {"source", "ngram_part"},
                               {"keys", part.features()},
                               {"refitted", false},
                               {"metrics", scores}};
  std::printf(
      "\nlinear baseline (the model's n-gram part alone, W x + b as saved, not refitted; %s, %zu keys):\n",
      name.c_str(), part.features());
  print_baseline_scores(scores);
}

// The linear baseline (gyre/train/baseline.hpp) refitted on the run's training split (files from
// the model's saved config; C from the run's metrics.json when there, else chosen on dev again,
// which gives the same C: the fit is deterministic). Prints its scores beside the model's. A model
// with an n-gram part reports that part instead (ngram_part_baseline).
void linear_baseline(const io::TrainedModel& trained, const LabelledData& data, json& report,
                     const std::string& data_path) {
  if (!trained.ngram_part.empty()) {
    ngram_part_baseline(trained, data, report);
    return;
  }
  if (!trained.header.contains("config") || trained.spec.output == model::OutputKind::kSigmoid) return;
  const train::TrainConfig config = train::config_from_json(trained.header["config"]);
  std::error_code ec;
  if (config.train.empty() || !std::filesystem::exists(config.train, ec) ||
      (!config.dev.empty() && !std::filesystem::exists(config.dev, ec))) {
    std::printf("\n(linear baseline skipped: the run's training file %s is not readable here)\n",
                config.train.c_str());
    return;
  }
  double c = 0;
  const auto metrics_path = trained.path.parent_path() / "metrics.json";
  if (std::filesystem::exists(metrics_path, ec)) {
    const json m = json::parse(read_file(metrics_path), nullptr, false);
    if (!m.is_discarded() && m.contains("baseline")) c = m["baseline"].value("c", 0.0);
  }
  const auto run = train::read_run_examples(config);
  const auto baseline = train::LinearBaseline::fit(trained.vocab, run.task, run.train, config.train, run.dev,
                                                   run.dev_path, c, train::ngram_order_for(config),
                                                   config.threads, train::linear_fit_caps_for(config));
  const json scores = baseline.score(data.examples, data_path);
  report["linear_baseline"] = {
      {"name", baseline.description()}, {"train", config.train}, {"metrics", scores}};
  std::printf("\nlinear baseline (%s, fitted on %s):\n", baseline.description().c_str(),
              config.train.c_str());
  print_baseline_scores(scores);
}

// Reliability before and after the model's temperature scaling (fitted on dev by `gyre train`):
// the raw outputs come from a second pass with calibration off, through the same engine.
void calibration_section(const io::TrainedModel& trained, const LabelledData& data,
                         const train::EvaluationResult& result, json& report) {
  const auto& spec = trained.spec;
  const eval::Reliability after = train::reliability_of(spec, data.encoded, result.predictions);
  if (spec.temperature.empty()) {
    std::printf(
        "\ncalibration: ECE %.4f over %zu predictions (this model has no temperature: it was trained "
        "before gyre fitted one)\n",
        after.error, after.predictions);
    report["calibration"] = {{"temperature", nullptr}, {"after", after.to_json()}};
    return;
  }
  std::vector<train::ExamplePrediction> raw;
  if (trained.runtime) {
    raw = train::predict_all(*trained.runtime, data.encoded, false, false, data.words);
  } else {
    trained.model->set_calibrated(false);
    raw = train::predict_all(*trained.model, data.encoded);
    trained.model->set_calibrated(true);
  }
  const eval::Reliability before = train::reliability_of(spec, data.encoded, raw);
  std::string temps;
  for (const float t : spec.temperature) {
    char buf[32];
    std::snprintf(buf, sizeof buf, "%s%.3f", temps.empty() ? "" : " ", static_cast<double>(t));
    temps += buf;
  }
  const char* unit = spec.task == data::Task::kTag                ? "tokens"
                     : spec.output == model::OutputKind::kSigmoid ? "label decisions"
                                                                  : "examples";
  std::printf("\ncalibration (temperature scaling fitted on dev, T = %s; reliability over %zu %s):\n%s",
              temps.c_str(), after.predictions, unit, eval::reliability_table(before, after).c_str());
  report["calibration"] = {
      {"temperature", spec.temperature}, {"before", before.to_json()}, {"after", after.to_json()}};
}

// Taggers: the most-frequent-tag baseline from the training corpus (--baseline-train, else the
// path the run's config names), when that file is there.
void tagging_baseline(const EvalOptions& o, const io::TrainedModel& trained, const LabelledData& data,
                      json& report) {
  std::string train_path = o.baseline_train;
  if (train_path.empty() && trained.header.contains("config"))
    train_path = trained.header["config"].value("train", "");
  std::error_code ec;
  if (train_path.empty() || !std::filesystem::exists(train_path, ec)) {
    std::printf("\n(baseline skipped: give --baseline-train FILE with the training corpus)\n");
    return;
  }
  const auto base = tag_baseline(train_path, trained, data, report);
  if (base)
    std::printf("\nbaseline (most frequent tag per token, from %s):\n  span F1 %.4f   token accuracy %.4f\n",
                train_path.c_str(), base->micro.f1, base->token_accuracy);
}

// The --errors N most confident mistakes (classifiers with why: each token's share of the top
// label's probability, train/explain.hpp), printed and returned for the JSON report.
json confident_mistakes(const EvalOptions& o, const io::TrainedModel& trained, const LabelledData& data,
                        const train::EvaluationResult& result) {
  const auto& spec = trained.spec;
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
    std::vector<std::string> predicted;
    if (spec.task == data::Task::kClassify) {
      for (const auto l : p.labels) predicted.push_back(spec.labels[static_cast<std::size_t>(l)]);
      std::printf("  line %zu  gold %s  predicted %s  p=%.3f\n    %s\n", ex.line,
                  join(ex.labels, ",").c_str(), join(predicted, ",").c_str(),
                  static_cast<double>(p.confidence), ex.text.c_str());
      const auto top = static_cast<int>(std::max_element(p.probs.begin(), p.probs.end()) - p.probs.begin());
      std::vector<std::string> tokens;
      data::EncodedExample encoded;
      data::Encoder encoder(trained.vocab, data::Task::kClassify);
      encoder.set_ngram_part(&trained.ngram_part);
      encoder.encode_text(ex.text, tokens, encoded);
      const json why = train::explain(trained, encoded, tokens, top);
      std::printf("    why %s: %s\n", spec.labels[static_cast<std::size_t>(top)].c_str(),
                  train::explain_summary(why).c_str());
      if (why.contains("ngram_part"))  // the part's exact share of the label's logit
        std::printf("    n-gram part (logit %+.3f, bias %+.3f): %s\n",
                    why["ngram_part"]["logit"].get<double>(), why["ngram_part"]["bias"].get<double>(),
                    train::explain_summary(why, 4, "ngram_part").c_str());
      errors.push_back({{"line", ex.line},
                        {"text", ex.text},
                        {"gold", ex.labels},
                        {"predicted", predicted},
                        {"probability", p.confidence},
                        {"why", why}});
    } else {
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
  return errors;
}

ExitCode run_eval(const EvalOptions& o) {
  // An exported file is scored by the embedded runtime: what an application gets, int8 included.
  io::TrainedModel trained = io::load_trained_model(o.model, io::Engine::kRuntimeForExported);
  if (o.given->given.contains("multi_label_threshold"))
    io::set_multi_label_threshold(trained, o.given->given["multi_label_threshold"].get<float>());
  const LabelledData data = load_labelled(o.test, trained, model_read_options(trained, o.given->given));
  auto predictions = trained.runtime
                         ? train::predict_all(*trained.runtime, data.encoded, true, false, data.words)
                         : train::predict_all(*trained.model, data.encoded);
  train::decide_labels(trained.spec, predictions);  // the thresholds in use (--multi-label-threshold)
  auto result = train::score(trained.spec, data.encoded, std::move(predictions), true);
  json report = result.to_json();
  report["model"] = trained.path.string();
  report["data"] = o.test;
  report["engine"] = trained.runtime ? "runtime" : "library";

  std::printf("model  %s  (%s)\ndata   %s  (%zu examples)\n\n", trained.path.string().c_str(),
              trained.runtime ? "exported; scored by the embedded runtime"
                              : "checkpoint; scored by the training library",
              o.test.c_str(), data.examples.size());
  if (result.classification) {
    const auto& m = *result.classification;
    std::printf("%s\n", m.to_table().c_str());
    std::printf("confusion matrix (rows: gold, columns: predicted)\n%s", m.confusion_table().c_str());
  } else if (result.multilabel) {
    std::printf("%s", result.multilabel->to_table().c_str());
  } else {
    std::printf("%s", result.tagging->to_table().c_str());
    if (!o.no_baseline) tagging_baseline(o, trained, data, report);
  }
  if (!result.multilabel && !o.no_baseline) linear_baseline(trained, data, report, o.test);
  calibration_section(trained, data, result, report);
  if (o.errors > 0) report["errors"] = confident_mistakes(o, trained, data, result);
  if (!o.json_out.empty()) write_file_atomic(o.json_out, report.dump(2) + "\n");
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "eval", "Score a model on a labelled file: metrics table, JSON, worst mistakes", 30,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<EvalOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre eval runs/intents-lstm --test corpora/demo/intents.test.tsv\n"
          "  gyre eval model.gyre --test corpora/demo/slots.test.tsv --json metrics.json --errors 10\n"
          "MODEL is a run directory (its selected.bin), a checkpoint, or an exported model file.\n"
          "CSV columns / JSON Lines keys default to those the model was trained with.");
      sub.add_option("model", o->model, "run directory, checkpoint or exported model")->required();
      sub.add_option("--test", o->test, "labelled file to score, in the model's corpus format")->required();
      sub.add_option("--json", o->json_out, "also write every number as JSON to this file");
      sub.add_option("--errors", o->errors, "list the N most confident mistakes")
          ->check(CLI::NonNegativeNumber);
      sub.add_option(
          "--baseline-train", o->baseline_train,
          "taggers: training corpus for the most-frequent-tag baseline (default: the run's training file)");
      sub.add_flag(
          "--no-baseline", o->no_baseline,
          "skip the baselines (the linear one: the model's n-gram part alone, or refitted on the run's "
          "training split for a model without one; for taggers also the most-frequent-tag one)");
      add_train_setting_options(sub, o->given, {},
                                {"text_column", "label_column", "skip_bad_lines", "multi_label_threshold"});
      return [o] { return run_eval(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
