#include "gyre/train/evaluate.hpp"

#include <algorithm>
#include <cmath>
#include <numeric>

#include "gyre/core/error.hpp"

namespace gyre::train {

using nlohmann::json;

std::vector<ExamplePrediction> predict_all(model::SequenceModel& model,
                                           std::span<const data::EncodedExample> examples, int batch_size,
                                           bool with_features) {
  const auto& spec = model.spec();
  std::vector<ExamplePrediction> out(examples.size());
  // Sort by length so batches carry little padding; results do not depend on batching.
  std::vector<std::size_t> order(examples.size());
  std::iota(order.begin(), order.end(), std::size_t{0});
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return examples[a].ids.size() < examples[b].ids.size();
  });
  data::Batch batch;
  model::Prediction pred;
  const auto C = static_cast<std::size_t>(spec.num_labels());
  for (std::size_t begin = 0; begin < order.size(); begin += static_cast<std::size_t>(batch_size)) {
    const std::size_t end = std::min(order.size(), begin + static_cast<std::size_t>(batch_size));
    data::fill_batch(examples, std::span<const std::size_t>(order).subspan(begin, end - begin), batch);
    model.predict(batch, pred);
    const auto B = static_cast<std::size_t>(batch.batch);
    for (std::size_t b = 0; b < B; ++b) {
      ExamplePrediction& p = out[batch.examples[b]];
      if (spec.task == data::Task::kClassify) {
        p.probs.assign(pred.probs.row(static_cast<Eigen::Index>(b)).data(),
                       pred.probs.row(static_cast<Eigen::Index>(b)).data() + C);
        const auto top =
            static_cast<std::int32_t>(std::max_element(p.probs.begin(), p.probs.end()) - p.probs.begin());
        p.confidence = p.probs[static_cast<std::size_t>(top)];
        if (with_features)
          p.features.assign(&pred.features(static_cast<Eigen::Index>(b), 0),
                            &pred.features(static_cast<Eigen::Index>(b), 0) + pred.features.cols());
        p.labels.clear();
        if (spec.output == model::OutputKind::kSigmoid) {
          for (std::size_t c = 0; c < C; ++c)
            if (p.probs[c] >= spec.threshold_of(c)) p.labels.push_back(static_cast<std::int32_t>(c));
        } else {
          p.labels.push_back(top);
        }
      } else {
        const int len = batch.lengths[b];
        p.tags.resize(static_cast<std::size_t>(len));
        p.tag_confidence.resize(static_cast<std::size_t>(len));
        double sum = 0;
        for (int t = 0; t < len; ++t) {
          const auto row = static_cast<std::size_t>(t) * B + b;
          const std::int32_t tag = pred.tags[row];
          p.tags[static_cast<std::size_t>(t)] = tag;
          p.tag_confidence[static_cast<std::size_t>(t)] = pred.probs(static_cast<Eigen::Index>(row), tag);
          sum += p.tag_confidence[static_cast<std::size_t>(t)];
        }
        p.confidence = len > 0 ? static_cast<float>(sum / len) : 0.0f;
      }
    }
  }
  return out;
}

std::vector<ExamplePrediction> predict_all(const runtime::Model& model,
                                           std::span<const data::EncodedExample> examples, bool calibrated,
                                           bool with_features,
                                           std::span<const std::vector<std::string>> words) {
  const runtime::Architecture& a = model.architecture();
  const bool have_words = words.size() == examples.size() ||
                          (words.empty() && std::all_of(examples.begin(), examples.end(), [](const auto& e) {
                             return !e.words.empty() || e.ids.empty();
                           }));
  if (a.has_ngram_part() && !have_words)
    throw Error(
        "this model has an n-gram part, which reads the words of each text: " + std::to_string(words.size()) +
        " word lists given for " + std::to_string(examples.size()) + " examples");
  const std::size_t C = model.labels().size();
  runtime::Context ctx(model);
  ctx.set_calibrated(calibrated);
  std::vector<std::uint32_t> ids;
  std::vector<ExamplePrediction> out(examples.size());
  for (std::size_t i = 0; i < examples.size(); ++i) {
    ids.assign(examples[i].ids.begin(), examples[i].ids.end());  // ids < vocabulary size (the encoder's)
    const auto& chars = examples[i].char_ids;
    const auto& offsets = examples[i].char_offsets;
    const bool with_chars = a.has_char_encoder();
    ExamplePrediction& p = out[i];
    if (a.task == runtime::Task::kClassify) {
      // The words an n-gram part reads: given, or kept by an encoder that has the part.
      const auto& w = words.empty() ? examples[i].words : words[i];
      const runtime::ClassifyResult& r = a.has_ngram_part() ? ctx.classify_ids(ids, chars, offsets, w)
                                         : with_chars       ? ctx.classify_ids(ids, chars, offsets)
                                                            : ctx.classify_ids(ids);
      p.probs.assign(r.probabilities.begin(), r.probabilities.end());
      p.confidence = p.probs[r.best];
      if (with_features) p.features.assign(r.features.begin(), r.features.end());
      for (const std::uint32_t l : r.chosen) p.labels.push_back(static_cast<std::int32_t>(l));
    } else {
      const runtime::TagResult& r = with_chars ? ctx.tag_ids(ids, chars, offsets) : ctx.tag_ids(ids);
      double sum = 0;
      for (std::size_t t = 0; t < r.tags.size(); ++t) {
        p.tags.push_back(static_cast<std::int32_t>(r.tags[t]));
        p.tag_confidence.push_back(r.probabilities[t * C + r.tags[t]]);
        sum += p.tag_confidence.back();
      }
      p.confidence = r.tags.size() > 0 ? static_cast<float>(sum / static_cast<double>(r.tags.size())) : 0.0f;
    }
  }
  return out;
}

void decide_labels(const model::ModelSpec& spec, std::span<ExamplePrediction> predictions) {
  if (spec.task != data::Task::kClassify || spec.output != model::OutputKind::kSigmoid) return;
  for (ExamplePrediction& p : predictions) {
    p.labels.clear();
    for (std::size_t c = 0; c < p.probs.size(); ++c)
      if (p.probs[c] >= spec.threshold_of(c)) p.labels.push_back(static_cast<std::int32_t>(c));
  }
}

EvaluationResult evaluate(model::SequenceModel& model, std::span<const data::EncodedExample> examples,
                          bool keep_predictions, int batch_size) {
  GYRE_CHECK(!examples.empty(), "evaluate: no examples");
  return score(model.spec(), examples, predict_all(model, examples, batch_size), keep_predictions);
}

EvaluationResult evaluate(const runtime::Model& model, std::span<const data::EncodedExample> examples,
                          bool keep_predictions, bool calibrated) {
  GYRE_CHECK(!examples.empty(), "evaluate: no examples");
  const model::ModelSpec spec = model::spec_from_architecture(
      model.architecture(), model.labels(), model.vocabulary_size(), model.character_count());
  return score(spec, examples, predict_all(model, examples, calibrated), keep_predictions);
}

EvaluationResult score(const model::ModelSpec& spec, std::span<const data::EncodedExample> examples,
                       std::vector<ExamplePrediction> preds, bool keep_predictions) {
  GYRE_CHECK(!examples.empty() && preds.size() == examples.size(), "score: one prediction per example");
  EvaluationResult r;
  r.task = spec.task;
  r.multi_label = spec.output == model::OutputKind::kSigmoid;
  r.examples = examples.size();
  const auto C = static_cast<std::size_t>(spec.num_labels());
  // Probabilities are clipped at 1e-12 for the loss so one confident mistake cannot make it
  // infinite (common practice, no source; the eval metrics' log loss uses sklearn's clipping).
  constexpr double kFloor = 1e-12;
  if (spec.task == data::Task::kClassify && r.multi_label) {
    std::vector<std::uint8_t> gold(examples.size() * C, 0);
    std::vector<float> scores;
    scores.reserve(examples.size() * C);
    double nll = 0;
    for (std::size_t i = 0; i < examples.size(); ++i) {
      for (auto label : examples[i].targets) gold[i * C + static_cast<std::size_t>(label)] = 1;
      for (std::size_t c = 0; c < C; ++c) {
        const double p = preds[i].probs[c];
        nll -= gold[i * C + c] ? std::log(std::max(p, kFloor)) : std::log(std::max(1.0 - p, kFloor));
      }
      scores.insert(scores.end(), preds[i].probs.begin(), preds[i].probs.end());
    }
    r.loss = nll / static_cast<double>(examples.size());
    r.multilabel = eval::multilabel_metrics(gold, scores, spec.labels, spec.threshold, spec.label_thresholds);
  } else if (spec.task == data::Task::kClassify) {
    std::vector<std::int32_t> gold, predicted;
    std::vector<float> probs;
    probs.reserve(examples.size() * C);
    double nll = 0;
    for (std::size_t i = 0; i < examples.size(); ++i) {
      gold.push_back(examples[i].targets.at(0));
      predicted.push_back(preds[i].labels.at(0));
      probs.insert(probs.end(), preds[i].probs.begin(), preds[i].probs.end());
      nll -= std::log(std::max<double>(preds[i].probs[static_cast<std::size_t>(gold.back())], kFloor));
    }
    r.loss = nll / static_cast<double>(examples.size());
    r.classification = eval::classification_metrics(gold, predicted, spec.labels, probs);
  } else {
    eval::TaggingScorer scorer;
    std::vector<std::string> gold_tags, pred_tags;
    double nll = 0;
    std::size_t tokens = 0;
    for (std::size_t i = 0; i < examples.size(); ++i) {
      gold_tags.clear();
      pred_tags.clear();
      for (std::size_t t = 0; t < examples[i].targets.size(); ++t) {
        gold_tags.push_back(spec.labels[static_cast<std::size_t>(examples[i].targets[t])]);
        pred_tags.push_back(spec.labels[static_cast<std::size_t>(preds[i].tags[t])]);
        // Probability given to the gold tag is only known when the prediction is right;
        // for a wrong tag, 1 - confidence bounds it from above.
        const double p = preds[i].tags[t] == examples[i].targets[t] ? preds[i].tag_confidence[t]
                                                                    : 1.0 - preds[i].tag_confidence[t];
        nll -= std::log(std::max(p, kFloor));
        ++tokens;
      }
      scorer.add(gold_tags, pred_tags);
    }
    r.loss = nll / static_cast<double>(std::max<std::size_t>(tokens, 1));
    r.tagging = scorer.metrics();
  }
  if (keep_predictions) r.predictions = std::move(preds);
  return r;
}

const char* to_string(Metric m) noexcept {
  switch (m) {
    case Metric::kAccuracy:
      return "accuracy";
    case Metric::kMacroF1:
      return "macro_f1";
    case Metric::kSpanF1:
      return "span_f1";
    case Metric::kTokenAccuracy:
      return "token_accuracy";
    case Metric::kLoss:
      return "loss";
  }
  return "?";
}

Metric metric_from_string(std::string_view name) {
  for (const auto m :
       {Metric::kAccuracy, Metric::kMacroF1, Metric::kSpanF1, Metric::kTokenAccuracy, Metric::kLoss})
    if (name == to_string(m)) return m;
  throw ConfigError("metric", "'" + std::string(name) +
                                  "' is not one of accuracy, macro_f1, span_f1, token_accuracy, loss");
}

Metric default_metric(data::Task task, bool multi_label) noexcept {
  if (task == data::Task::kTag) return Metric::kSpanF1;
  return multi_label ? Metric::kMacroF1 : Metric::kAccuracy;
}

bool metric_applies(Metric m, data::Task task) noexcept {
  if (task == data::Task::kTag) return m != Metric::kMacroF1;
  return m != Metric::kSpanF1 && m != Metric::kTokenAccuracy;
}

double EvaluationResult::metric(Metric m) const {
  if (m == Metric::kLoss) return loss;
  if (classification) {
    if (m == Metric::kAccuracy) return classification->accuracy;
    if (m == Metric::kMacroF1) return classification->macro.f1;
  }
  if (multilabel) {
    if (m == Metric::kAccuracy) return multilabel->exact_match;
    if (m == Metric::kMacroF1) return multilabel->macro.f1;
  }
  if (tagging) {
    if (m == Metric::kSpanF1) return tagging->micro.f1;
    if (m == Metric::kTokenAccuracy || m == Metric::kAccuracy) return tagging->token_accuracy;
  }
  throw ConfigError("metric", std::string("'") + to_string(m) + "' is not available for this task");
}

double EvaluationResult::metric(std::string_view name) const {
  return metric(metric_from_string(name));
}

json EvaluationResult::summary() const {
  if (tagging)
    return json{{"loss", loss}, {"token_accuracy", tagging->token_accuracy}, {"span_f1", tagging->micro.f1}};
  return json{{"loss", loss}, {"accuracy", metric("accuracy")}, {"macro_f1", metric("macro_f1")}};
}

json EvaluationResult::to_json() const {
  json j = classification ? classification->to_json()
           : multilabel   ? multilabel->to_json()
                          : tagging->to_json();
  j["loss"] = loss;
  return j;
}

bool metric_improves(Metric metric, double candidate, double best) {
  if (std::isnan(best)) return true;
  return metric == Metric::kLoss ? candidate < best : candidate > best;
}

bool metric_improves(std::string_view metric, double candidate, double best) {
  return metric_improves(metric_from_string(metric), candidate, best);
}

}  // namespace gyre::train
