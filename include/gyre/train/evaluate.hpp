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
#include "gyre/runtime/model.hpp"

namespace gyre::train {

/// A dev score: what picks the best epoch, stops training early and ranks compare's runs.
enum class Metric { kAccuracy, kMacroF1, kSpanF1, kTokenAccuracy, kLoss };
/// "accuracy", "macro_f1", "span_f1", "token_accuracy", "loss".
const char* to_string(Metric m) noexcept;
/// Inverse of to_string(Metric); throws ConfigError("metric", ...) for another name.
Metric metric_from_string(std::string_view name);
/// The metric "auto" stands for: span F1 for taggers, macro F1 for multi-label classifiers,
/// accuracy for single-label classifiers.
Metric default_metric(data::Task task, bool multi_label) noexcept;
/// True for the metrics a task reports (taggers have no macro_f1; classifiers no span_f1).
bool metric_applies(Metric m, data::Task task) noexcept;

/// A model's output for one example.
struct ExamplePrediction {
  std::vector<float> probs;           // classify: one probability per label
  std::vector<std::int32_t> labels;   // classify: chosen label ids (1 for single-label)
  std::vector<std::int32_t> tags;     // tag: one tag id per token
  std::vector<float> tag_confidence;  // tag: probability of each chosen tag
  float confidence = 0.0f;            // classify: top probability; tag: mean tag confidence
  std::vector<float> features;        // classify, when asked for: the pooled representation
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

  /// The metric's value; throws ConfigError("metric", ...) for a metric the task does not have.
  double metric(Metric m) const;
  /// The same by name ("accuracy", "macro_f1", "loss", "span_f1", "token_accuracy").
  double metric(std::string_view name) const;
  /// The short numbers for logs: {"loss", "accuracy", "macro_f1"} or {"loss", "token_accuracy", "span_f1"}.
  nlohmann::json summary() const;
  /// Everything (the metrics' own JSON plus loss).
  nlohmann::json to_json() const;
};

/// Runs the model over the examples (in batches of similar length, no dropout) and scores it.
EvaluationResult evaluate(model::SequenceModel& model, std::span<const data::EncodedExample> examples,
                          bool keep_predictions = false, int batch_size = 64);
/// The same through the embedded runtime, for exported model files: the scores are those an
/// application linking gyre::runtime gets (int8/f16 arithmetic included).
/// calibrated = false: without the model's temperature (runtime::Context::set_calibrated).
EvaluationResult evaluate(const runtime::Model& model, std::span<const data::EncodedExample> examples,
                          bool keep_predictions = false, bool calibrated = true);
/// Scores given predictions (one per example, in order) of a model with this spec.
EvaluationResult score(const model::ModelSpec& spec, std::span<const data::EncodedExample> examples,
                       std::vector<ExamplePrediction> predictions, bool keep_predictions = false);

/// Runs the model and returns predictions only (no targets needed), in input order.
/// with_features: also fill ExamplePrediction::features (classifiers).
std::vector<ExamplePrediction> predict_all(model::SequenceModel& model,
                                           std::span<const data::EncodedExample> examples,
                                           int batch_size = 64, bool with_features = false);
/// The same through the embedded runtime (one example at a time, as an application calls it).
/// A model with an n-gram part also needs each example's words (words[i]: the tokens the encoder
/// made of text i, one per id; Encoder::encode_text); without them it throws Error.
std::vector<ExamplePrediction> predict_all(const runtime::Model& model,
                                           std::span<const data::EncodedExample> examples,
                                           bool calibrated = true, bool with_features = false,
                                           std::span<const std::vector<std::string>> words = {});

/// Multi-label (sigmoid) classifiers: sets each prediction's labels to those whose probability
/// reaches the spec's threshold for them (ModelSpec::threshold_of); other models are left alone.
/// What predict_all does; callers that change the thresholds after predicting use it.
void decide_labels(const model::ModelSpec& spec, std::span<ExamplePrediction> predictions);

/// True when `candidate` is better than `best` for this metric (loss: lower is better; a NaN
/// best means nothing was seen yet).
bool metric_improves(Metric metric, double candidate, double best);
bool metric_improves(std::string_view metric, double candidate, double best);

}  // namespace gyre::train
