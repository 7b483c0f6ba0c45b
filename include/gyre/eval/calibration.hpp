#pragma once
// Temperature scaling (Guo et al. 2017, "On Calibration of Modern Neural Networks", section 4.2)
// fitted by minimising the mean negative log-likelihood on held-out data, and the reliability
// diagram (confidence bins, ECE) of any list of (confidence, correct) pairs. Pure functions; the
// tempered distributions themselves are gyre/runtime/calibration.hpp (shared with the runtime).
//
// The fit works on beta = 1 / T: the NLL of softmax(beta * z) is convex in beta (a log-sum-exp of
// functions linear in beta minus a linear term; its second derivative is the variance of z under
// the tempered distribution), so the zero of its derivative is found by safeguarded Newton steps
// inside a bracket. T is restricted to [runtime::kMinTemperature, runtime::kMaxTemperature].
// Checked against scipy.optimize.minimize_scalar on the same scores
// (tools/make_calibration_fixtures.py -> tests/fixtures/calibration/).

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "gyre/eval/classification.hpp"

namespace gyre::eval {

struct TemperatureFit {
  double temperature = 1.0;
  double nll_before = 0.0;  // mean NLL at T = 1
  double nll_after = 0.0;   // mean NLL at the fitted T
  int iterations = 0;
  std::size_t examples = 0;
};

/// Softmax outputs: scores [N x C] row-major (logits, or log-probabilities: the same up to a
/// per-row constant), gold ids [N]. Throws gyre::Error on sizes, ids or non-finite scores, and
/// for N = 0.
TemperatureFit fit_softmax_temperature(std::span<const float> scores, std::span<const std::int32_t> gold,
                                       std::size_t num_classes);

/// One label of a sigmoid output: logits [N], gold 0/1 [N].
TemperatureFit fit_sigmoid_temperature(std::span<const float> logits, std::span<const std::uint8_t> gold);

/// A reliability diagram: kCalibrationBins equal-width bins ((m-1)/M, m/M] of confidence, with
/// mean confidence and accuracy per bin, and ECE = sum_m |B_m|/N |acc(B_m) - conf(B_m)| (Guo et
/// al. 2017, eq. 3): the same rule as expected_calibration_error, for any list of predictions
/// (the top label of a classifier, each token of a tagger, each label decision of a multi-label
/// model).
struct Reliability {
  std::vector<CalibrationBin> bins;
  double error = 0.0;
  std::size_t predictions = 0;

  /// {"error":..,"predictions":..,"bins":[{"lower","upper","count","confidence","accuracy"}]}
  nlohmann::json to_json() const;
};

/// confidence[i] in [0, 1] of prediction i, correct[i] 0/1. Throws gyre::Error on a size
/// mismatch, an empty list or a confidence outside [0, 1].
Reliability reliability(std::span<const float> confidence, std::span<const std::uint8_t> correct,
                        int bins = kCalibrationBins);

/// Text table of two diagrams side by side: one row per non-empty bin, then the ECE line.
std::string reliability_table(const Reliability& before, const Reliability& after);

}  // namespace gyre::eval
