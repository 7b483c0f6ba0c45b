#include "gyre/train/calibrate.hpp"

#include <algorithm>
#include <numeric>

#include "gyre/core/error.hpp"
#include "gyre/runtime/calibration.hpp"

namespace gyre::train {

CalibrationFit fit_calibration(model::SequenceModel& model, std::span<const data::EncodedExample> examples,
                               int batch_size) {
  GYRE_CHECK(!examples.empty(), "temperature scaling needs at least one dev example");
  const model::ModelSpec& spec = model.spec();
  const auto C = static_cast<std::size_t>(spec.num_labels());
  const bool was_calibrated = model.calibrated();
  model.set_calibrated(false);
  // Scores row by row: one row per example (classify) or per token (tag), with its gold id.
  std::vector<float> scores;
  std::vector<std::int32_t> gold;
  std::vector<std::uint8_t> multi_hot;
  std::vector<std::size_t> order(examples.size());
  std::iota(order.begin(), order.end(), std::size_t{0});
  data::Batch batch;
  model::Prediction pred;
  for (std::size_t begin = 0; begin < order.size(); begin += static_cast<std::size_t>(batch_size)) {
    const std::size_t end = std::min(order.size(), begin + static_cast<std::size_t>(batch_size));
    data::fill_batch(examples, std::span<const std::size_t>(order).subspan(begin, end - begin), batch);
    model.predict(batch, pred);
    const auto B = static_cast<std::size_t>(batch.batch);
    for (std::size_t b = 0; b < B; ++b) {
      const data::EncodedExample& ex = examples[batch.examples[b]];
      if (spec.task == data::Task::kClassify) {
        const float* row = &pred.scores(static_cast<Eigen::Index>(b), 0);
        scores.insert(scores.end(), row, row + C);
        if (spec.output == model::OutputKind::kSigmoid) {
          const std::size_t at = multi_hot.size();
          multi_hot.resize(at + C, 0);
          for (const auto l : ex.targets) multi_hot[at + static_cast<std::size_t>(l)] = 1;
        } else {
          gold.push_back(ex.targets.at(0));
        }
      } else {
        for (int t = 0; t < batch.lengths[b]; ++t) {
          const float* row = &pred.scores(static_cast<Eigen::Index>(static_cast<std::size_t>(t) * B + b), 0);
          scores.insert(scores.end(), row, row + C);
          gold.push_back(ex.targets.at(static_cast<std::size_t>(t)));
        }
      }
    }
  }
  model.set_calibrated(was_calibrated);
  CalibrationFit out;
  if (spec.output == model::OutputKind::kSigmoid) {
    const std::size_t n = multi_hot.size() / C;
    std::vector<float> column(n);
    std::vector<std::uint8_t> column_gold(n);
    for (std::size_t c = 0; c < C; ++c) {
      for (std::size_t i = 0; i < n; ++i) {
        column[i] = scores[i * C + c];
        column_gold[i] = multi_hot[i * C + c];
      }
      out.fits.push_back(eval::fit_sigmoid_temperature(column, column_gold));
    }
  } else {
    out.fits.push_back(eval::fit_softmax_temperature(scores, gold, C));
  }
  for (const auto& f : out.fits)
    out.temperature.push_back(
        std::clamp(static_cast<float>(f.temperature), runtime::kMinTemperature, runtime::kMaxTemperature));
  return out;
}

eval::Reliability reliability_of(const model::ModelSpec& spec, std::span<const data::EncodedExample> examples,
                                 std::span<const ExamplePrediction> predictions) {
  GYRE_CHECK(examples.size() == predictions.size(), "reliability: one prediction per example");
  std::vector<float> confidence;
  std::vector<std::uint8_t> correct;
  const auto C = static_cast<std::size_t>(spec.num_labels());
  for (std::size_t i = 0; i < examples.size(); ++i) {
    const ExamplePrediction& p = predictions[i];
    if (spec.task == data::Task::kTag) {
      for (std::size_t t = 0; t < p.tags.size() && t < examples[i].targets.size(); ++t) {
        confidence.push_back(p.tag_confidence[t]);
        correct.push_back(p.tags[t] == examples[i].targets[t] ? 1 : 0);
      }
    } else if (spec.output == model::OutputKind::kSigmoid) {
      for (std::size_t c = 0; c < C; ++c) {
        const bool gold = std::find(examples[i].targets.begin(), examples[i].targets.end(),
                                    static_cast<std::int32_t>(c)) != examples[i].targets.end();
        const bool chosen = p.probs[c] >= spec.threshold_of(c);
        confidence.push_back(chosen ? p.probs[c] : 1.0f - p.probs[c]);
        correct.push_back(chosen == gold ? 1 : 0);
      }
    } else {
      confidence.push_back(p.confidence);
      correct.push_back(p.labels.at(0) == examples[i].targets.at(0) ? 1 : 0);
    }
  }
  return eval::reliability(confidence, correct);
}

nlohmann::json calibration_json(const CalibrationFit& fit, const eval::Reliability& before,
                                const eval::Reliability& after) {
  nlohmann::json fits = nlohmann::json::array();
  for (std::size_t i = 0; i < fit.fits.size(); ++i)
    fits.push_back({{"temperature", fit.temperature[i]},
                    {"nll_before", fit.fits[i].nll_before},
                    {"nll_after", fit.fits[i].nll_after},
                    {"rows", fit.fits[i].examples}});
  return {{"method", "temperature scaling (Guo et al. 2017), fitted on dev"},
          {"temperature", fit.temperature},
          {"fits", std::move(fits)},
          {"before", before.to_json()},
          {"after", after.to_json()}};
}

}  // namespace gyre::train
