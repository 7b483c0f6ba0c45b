#pragma once
// Classification metrics: accuracy, per-class precision/recall/F1/support, macro/micro/weighted
// averages, confusion matrix, log loss and expected calibration error; multi-label per-label and
// averaged scores at a decision threshold. Pure functions over ids and probabilities: no model,
// no Eigen. Results render as JSON (same numbers as the table) and as an aligned text table.
//
// Conventions (each checked against Debian's python3-sklearn 1.2.1 by
// tools/make_metric_fixtures.py -> tests/fixtures/metrics/):
// - Zero division: a class never predicted gets precision 0; a class absent from gold gets
//   recall 0; F1 is 0 when precision + recall is 0. This is what sklearn returns with its default
//   zero_division="warn" (it warns and uses 0).
// - Single-label averages run over the classes that occur in gold OR predictions ("present"),
//   as sklearn does when no explicit label list is given; a class of the model that occurs in
//   neither is listed with zeros but does not pull the macro average down.
// - Multi-label averages run over all labels (sklearn does the same for indicator matrices).
// - Micro P/R/F1 pool true positives, predictions and gold over the averaged classes; for
//   single-label data they all equal accuracy when every class is present.
// - Weighted averages weight each class by its gold support.
//
// Many classes: memory is O(C + distinct (gold, predicted) pairs), never O(C^2) or O(N x C).
// The confusion matrix is kept sparse; ClassificationAccumulator / MultiLabelAccumulator score
// one example at a time, so a caller never has to hold an [N x C] probability matrix. Beyond
// kDenseConfusionLimit classes, JSON and text show the kTopConfusions largest off-diagonal cells
// instead of the full matrix.

#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <unordered_map>
#include <vector>

#include <nlohmann/json_fwd.hpp>

namespace gyre::eval {

/// Log loss clips every probability to [eps, 1 - eps] and then renormalises each row to sum 1,
/// as sklearn 1.2 log_loss does. eps = 2^-23, float32 machine epsilon: what sklearn 1.2's
/// eps="auto" picks for float32 probabilities (ours are float32).
inline constexpr double kLogLossEpsilon = 1.1920928955078125e-07;

/// Expected calibration error (Guo et al. 2017, "On Calibration of Modern Neural Networks",
/// eq. 3) uses M = 15 equal-width confidence bins ((m-1)/M, m/M] — the bin count of that paper and
/// the common choice since.
inline constexpr int kCalibrationBins = 15;

/// Up to this many classes, to_json() and confusion_table() give the whole C x C matrix (50 x 50
/// is still readable as a table; our choice, no source).
inline constexpr std::size_t kDenseConfusionLimit = 50;
/// Beyond kDenseConfusionLimit classes: how many of the largest off-diagonal cells are shown.
inline constexpr std::size_t kTopConfusions = 100;

/// A non-zero cell of the confusion matrix.
struct ConfusionCell {
  std::int32_t gold = 0;
  std::int32_t predicted = 0;
  std::int64_t count = 0;
};

/// Scores of one class (or one label in multi-label data).
struct ClassScores {
  std::string name;
  double precision = 0.0;
  double recall = 0.0;
  double f1 = 0.0;
  std::int64_t support = 0;    // gold occurrences
  std::int64_t predicted = 0;  // predicted occurrences
  std::int64_t correct = 0;    // true positives
  bool present = false;        // occurs in gold or predictions: takes part in the averages
};

struct AverageScores {
  double precision = 0.0;
  double recall = 0.0;
  double f1 = 0.0;
};

/// One confidence bin of the reliability diagram behind the ECE.
struct CalibrationBin {
  double lower = 0.0;  // bin is (lower, upper]
  double upper = 0.0;
  std::int64_t count = 0;
  double mean_confidence = 0.0;  // 0 when count == 0
  double accuracy = 0.0;         // 0 when count == 0
};

struct ClassificationMetrics {
  std::vector<ClassScores> classes;  // one per class id, in id order
  std::int64_t examples = 0;
  std::int64_t correct = 0;
  double accuracy = 0.0;
  AverageScores macro;
  AverageScores micro;
  AverageScores weighted;
  /// The non-zero cells of the C x C confusion matrix (row = gold id, column = predicted id),
  /// sorted by (gold, predicted).
  std::vector<ConfusionCell> confusion;
  /// Present only when probabilities were given.
  std::optional<double> log_loss;
  std::optional<double> calibration_error;
  std::vector<CalibrationBin> calibration_bins;  // empty without probabilities

  std::size_t num_classes() const noexcept { return classes.size(); }
  /// Count of cell (gold, predicted); 0 for a cell never seen.
  std::int64_t confusion_at(std::size_t gold, std::size_t predicted) const;
  /// The `limit` largest off-diagonal cells, largest first (ties: by gold, then predicted id).
  std::vector<ConfusionCell> top_confusions(std::size_t limit) const;
  /// {"task":"classification","examples":..,"accuracy":..,"classes":[{name,precision,recall,
  ///  f1,support,predicted,correct,present}],"macro":{precision,recall,f1},"micro":..,
  ///  "weighted":..,"confusion":{..},"log_loss":..,"calibration":{"bins":15,"error":..,
  ///  "reliability":[..]}} (last two only with probabilities). "confusion" is
  ///  {"labels":[..],"counts":[[..]],"rows":"gold","columns":"predicted"} up to
  ///  kDenseConfusionLimit classes, else {"top":[{"gold":name,"predicted":name,"count":n}],
  ///  "off_diagonal_cells":n,"rows":"gold","columns":"predicted"} with the kTopConfusions
  ///  largest off-diagonal cells.
  nlohmann::json to_json() const;
  /// Aligned plain-text table, one row per class, then the averages and accuracy; ends in '\n'.
  std::string to_table(int decimals = 4) const;
  /// The confusion matrix as an aligned text table (gold down, predicted across); beyond
  /// kDenseConfusionLimit classes, a table of the kTopConfusions largest off-diagonal cells.
  std::string confusion_table() const;
};

/// Scores single-label predictions one example at a time (memory O(C + confusion cells)); gives
/// exactly the numbers of classification_metrics on the same examples.
class ClassificationAccumulator {
 public:
  /// with_probabilities: every add() passes the example's distribution (adds log loss and ECE).
  ClassificationAccumulator(std::span<const std::string> class_names, bool with_probabilities);
  /// Throws gyre::Error for an id outside [0, C), a probability row of the wrong size, or a
  /// non-finite or negative probability.
  void add(std::int32_t gold, std::int32_t predicted, std::span<const float> probabilities = {});
  std::int64_t examples() const noexcept { return examples_; }
  /// Throws gyre::Error when no example was added.
  ClassificationMetrics finish() const;

 private:
  std::vector<std::string> names_;
  bool with_probabilities_;
  std::int64_t examples_ = 0;
  std::vector<std::int64_t> support_, predicted_, correct_;
  std::unordered_map<std::uint64_t, std::int64_t> cells_;  // gold * C + predicted -> count
  double log_loss_sum_ = 0.0;
  std::vector<CalibrationBin> bins_;
  std::vector<double> bin_confidence_;
  std::vector<std::int64_t> bin_hits_;
};

/// Computes every metric. gold and predicted hold class ids in [0, class_names.size()), one per
/// example. probabilities, if not empty, is [N x C] row-major (row i = example i's distribution)
/// and adds log loss and ECE. Throws gyre::Error on size mismatch or an out-of-range id, and on
/// a non-finite or negative probability.
ClassificationMetrics classification_metrics(std::span<const std::int32_t> gold,
                                             std::span<const std::int32_t> predicted,
                                             std::span<const std::string> class_names,
                                             std::span<const float> probabilities = {});

/// Mean negative log-likelihood of the gold ids under the (clipped, renormalised) rows.
double log_loss(std::span<const std::int32_t> gold, std::span<const float> probabilities,
                std::size_t num_classes, double eps = kLogLossEpsilon);

/// ECE of Guo et al. 2017: confidence = max of the row, prediction = its argmax (lowest id on a
/// tie), ECE = sum_m |B_m|/N * |acc(B_m) - conf(B_m)|. bins_out (optional) receives the bins.
double expected_calibration_error(std::span<const std::int32_t> gold, std::span<const float> probabilities,
                                  std::size_t num_classes, int bins = kCalibrationBins,
                                  std::vector<CalibrationBin>* bins_out = nullptr);

/// A wrong prediction and the probability the model gave its (wrong) answer.
struct ConfidentError {
  std::size_t example = 0;
  std::int32_t gold = 0;
  std::int32_t predicted = 0;
  float probability = 0.0f;  // probabilities[example, predicted]
};

/// The `limit` mistakes (gold != predicted) with the highest probability on the predicted class,
/// most confident first; ties keep example order. probabilities is [N x C] as above.
std::vector<ConfidentError> most_confident_errors(std::span<const std::int32_t> gold,
                                                  std::span<const std::int32_t> predicted,
                                                  std::span<const float> probabilities,
                                                  std::size_t num_classes, std::size_t limit);

struct MultiLabelMetrics {
  std::vector<ClassScores> labels;  // one per label id; all take part in the averages
  std::int64_t examples = 0;
  double threshold = 0.5;  // label predicted when score >= threshold (NaN when decisions given)
  /// Per-label thresholds when the decisions used them (label order); empty otherwise.
  std::vector<double> label_thresholds;
  AverageScores macro;
  AverageScores micro;
  AverageScores weighted;
  /// Fraction of examples whose predicted label set equals the gold set exactly.
  double exact_match = 0.0;

  nlohmann::json to_json() const;
  std::string to_table(int decimals = 4) const;
};

/// Scores multi-label examples one at a time (memory O(L)); same numbers as multilabel_metrics
/// (or multilabel_metrics_from_decisions) on the same rows.
class MultiLabelAccumulator {
 public:
  /// threshold: a label is predicted when its score >= threshold (add_scores); NaN when the
  /// caller gives decisions (add_decisions).
  MultiLabelAccumulator(std::span<const std::string> label_names, double threshold);
  /// Label l is predicted when its score >= label_thresholds[l] (one per label, else Error).
  MultiLabelAccumulator(std::span<const std::string> label_names, double threshold,
                        std::span<const float> label_thresholds);
  /// One example: gold 0/1 indicators [L] and scores [L]. Throws gyre::Error on a size
  /// mismatch, an indicator other than 0/1 or a non-finite score.
  void add_scores(std::span<const std::uint8_t> gold, std::span<const float> scores);
  /// One example: gold and predicted 0/1 indicators [L].
  void add_decisions(std::span<const std::uint8_t> gold, std::span<const std::uint8_t> predicted);
  /// Throws gyre::Error when no example was added.
  MultiLabelMetrics finish() const;

 private:
  std::vector<std::string> names_;
  double threshold_;
  std::vector<double> label_thresholds_;  // empty: threshold_ for every label
  std::int64_t examples_ = 0, exact_ = 0;
  std::vector<std::int64_t> support_, predicted_, correct_;
  std::vector<std::uint8_t> decisions_;  // scratch for add_scores
};

/// Multi-label scores. gold is a [N x L] row-major 0/1 indicator matrix; scores is [N x L] (e.g.
/// per-label sigmoid probabilities); a label is predicted when its score >= threshold.
MultiLabelMetrics multilabel_metrics(std::span<const std::uint8_t> gold, std::span<const float> scores,
                                     std::span<const std::string> label_names, double threshold = 0.5);
/// The same with a threshold per label (label_thresholds[l] for label l; empty = threshold for all).
MultiLabelMetrics multilabel_metrics(std::span<const std::uint8_t> gold, std::span<const float> scores,
                                     std::span<const std::string> label_names, double threshold,
                                     std::span<const float> label_thresholds);

/// Per-label decision thresholds tuned on labelled rows (gold [N x L] 0/1, scores [N x L]
/// probabilities): for each label, a threshold in (0, 1) whose decisions (score >= threshold)
/// give that label the highest F1 over the rows (F1 = 2TP / (2TP + FP + FN), the harmonic mean
/// of precision and recall, van Rijsbergen 1979; 0 when it has no true positive). Every distinct
/// set of decisions is tried once, represented by the midpoint of its interval of thresholds
/// (between two adjacent distinct scores). Ties: `global` is kept whenever its F1 is the best
/// (so a label never seen in the rows keeps it); otherwise the best interval nearest to `global`.
/// Exact integer comparisons, so the result does not depend on rounding. Throws gyre::Error on a
/// size mismatch, an indicator other than 0/1, a score outside [0, 1] or global outside (0, 1).
std::vector<float> tune_label_thresholds(std::span<const std::uint8_t> gold, std::span<const float> scores,
                                         std::size_t num_labels, float global);

/// Same from already-made 0/1 decisions [N x L].
MultiLabelMetrics multilabel_metrics_from_decisions(std::span<const std::uint8_t> gold,
                                                    std::span<const std::uint8_t> predicted,
                                                    std::span<const std::string> label_names);

}  // namespace gyre::eval
