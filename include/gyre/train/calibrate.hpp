#pragma once
// Temperature scaling fitted at the end of training (Guo et al. 2017, section 4.2): one
// temperature for a softmax classifier, one per label for a multi-label (sigmoid) classifier, one
// on the token distributions of a tagger (softmax, or CRF posterior marginals), each minimising
// the dev NLL of the model's uncalibrated outputs (gyre/eval/calibration.hpp). The temperatures
// go into the model (ModelSpec::temperature -> header "architecture.temperature"), so the library
// and the embedded runtime both apply them.

#include <span>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/data/batcher.hpp"
#include "gyre/eval/calibration.hpp"
#include "gyre/model/sequence_model.hpp"
#include "gyre/train/evaluate.hpp"

namespace gyre::train {

struct CalibrationFit {
  std::vector<float> temperature;          // what ModelSpec::temperature takes
  std::vector<eval::TemperatureFit> fits;  // one per temperature
};

/// Fits on the model's outputs with calibration off (the model is left as it was). Throws
/// gyre::Error when examples is empty.
CalibrationFit fit_calibration(model::SequenceModel& model, std::span<const data::EncodedExample> examples,
                               int batch_size = 64);

/// The reliability diagram of predictions against gold: the top label of a softmax classifier,
/// every label decision of a multi-label one (confidence p or 1 - p, decided at the threshold),
/// every token of a tagger (probability of the chosen tag).
eval::Reliability reliability_of(const model::ModelSpec& spec, std::span<const data::EncodedExample> examples,
                                 std::span<const ExamplePrediction> predictions);

/// {"method", "temperature": [..], "fits": [{"temperature","nll_before","nll_after"}],
///  "before": reliability json, "after": reliability json} for a report or metrics.json.
nlohmann::json calibration_json(const CalibrationFit& fit, const eval::Reliability& before,
                                const eval::Reliability& after);

}  // namespace gyre::train
