#pragma once
// Scoring a model on an encoded, labelled data set: the dev evaluation of the trainer and the
// engine of `gyre eval`.

#include <cstdint>
#include <optional>
#include <span>
#include <string_view>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/data/batcher.hpp"
#include "gyre/eval/classification.hpp"
#include "gyre/eval/span_metrics.hpp"
#include "gyre/model/sequence_model.hpp"

namespace gyre::train {

/// A model's output for one example.
struct ExamplePrediction {
  std::vector<float> probs;           // classify: one probability per label
  std::vector<std::int32_t> labels;   // classify: chosen label ids (1 for single-label)
  std::vector<std::int32_t> tags;     // tag: one tag id per token
  std::vector<float> tag_confidence;  // tag: probability of each chosen tag
  float confidence = 0.0f;            // classify: top probability; tag: mean tag confidence
};

struct EvaluationResult {
  data::Task task = data::Task::kClassify;
  bool multi_label = false;
  std::size_t examples = 0;
  double loss = 0.0;  // mean negative log-likelihood per example (classify) or token (tag)
  std::optional<eval::ClassificationMetrics> classification;
  std::optional<eval::MultiLabelMetrics> multilabel;
  std::optional<eval::TaggingMetrics> tagging;
  std::vector<ExamplePrediction> predictions;  // filled when asked for, in input order

  /// "accuracy", "macro_f1", "loss", "span_f1", "token_accuracy"; throws ConfigError for a
  /// metric the task does not have.
  double metric(std::string_view name) const;
  /// The short numbers for logs: {"loss", "accuracy", "macro_f1"} or {"loss", "token_accuracy", "span_f1"}.
  nlohmann::json summary() const;
  /// Everything (the metrics' own JSON plus loss).
  nlohmann::json to_json() const;
};

/// Runs the model over the examples (in batches of similar length, no dropout) and scores it.
EvaluationResult evaluate(model::SequenceModel& model, std::span<const data::EncodedExample> examples,
                          bool keep_predictions = false, int batch_size = 64);

/// Runs the model and returns predictions only (no targets needed), in input order.
std::vector<ExamplePrediction> predict_all(model::SequenceModel& model,
                                           std::span<const data::EncodedExample> examples,
                                           int batch_size = 64);

/// True when `candidate` is better than `best` for this metric (loss: lower is better).
bool metric_improves(std::string_view metric, double candidate, double best);

}  // namespace gyre::train
