#include "gyre/eval/classification.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <nlohmann/json.hpp>
#include <string>
#include <utility>

#include "eval/detail/table.hpp"
#include "gyre/core/error.hpp"

namespace gyre::eval {
namespace {

double safe_div(double num, double den) {
  return den > 0.0 ? num / den : 0.0;
}

// Per-class P/R/F1 from counts with the zero-division convention of the header (0).
void finish_scores(ClassScores& c) {
  c.precision = safe_div(static_cast<double>(c.correct), static_cast<double>(c.predicted));
  c.recall = safe_div(static_cast<double>(c.correct), static_cast<double>(c.support));
  c.f1 = safe_div(2.0 * c.precision * c.recall, c.precision + c.recall);
}

// Macro, micro and support-weighted averages over the classes flagged present.
void average(const std::vector<ClassScores>& classes, AverageScores& macro, AverageScores& micro,
             AverageScores& weighted) {
  double n = 0, tp = 0, pred = 0, gold = 0;
  macro = micro = weighted = AverageScores{};
  for (const auto& c : classes) {
    if (!c.present) continue;
    n += 1;
    macro.precision += c.precision;
    macro.recall += c.recall;
    macro.f1 += c.f1;
    const auto s = static_cast<double>(c.support);
    weighted.precision += s * c.precision;
    weighted.recall += s * c.recall;
    weighted.f1 += s * c.f1;
    tp += static_cast<double>(c.correct);
    pred += static_cast<double>(c.predicted);
    gold += s;
  }
  macro.precision = safe_div(macro.precision, n);
  macro.recall = safe_div(macro.recall, n);
  macro.f1 = safe_div(macro.f1, n);
  weighted.precision = safe_div(weighted.precision, gold);
  weighted.recall = safe_div(weighted.recall, gold);
  weighted.f1 = safe_div(weighted.f1, gold);
  micro.precision = safe_div(tp, pred);
  micro.recall = safe_div(tp, gold);
  micro.f1 = safe_div(2.0 * micro.precision * micro.recall, micro.precision + micro.recall);
}

void check_row(const float* row, std::size_t num_classes, std::size_t example) {
  for (std::size_t c = 0; c < num_classes; ++c) {
    const float p = row[c];
    if (!std::isfinite(p) || p < 0.0f)
      throw Error("probability of example " + std::to_string(example) + ", class " + std::to_string(c) +
                  " is " + std::to_string(p) + " (must be finite and >= 0)");
  }
}

void check_probabilities(std::span<const float> probabilities, std::size_t rows, std::size_t num_classes) {
  GYRE_CHECK(num_classes > 0, "need at least one class");
  GYRE_CHECK(probabilities.size() == rows * num_classes,
             "probabilities hold " + std::to_string(probabilities.size()) + " values, expected " +
                 std::to_string(rows) + " examples x " + std::to_string(num_classes) + " classes");
  for (std::size_t i = 0; i < rows; ++i) check_row(probabilities.data() + i * num_classes, num_classes, i);
}

void check_id(std::int32_t id, std::size_t num_classes, const char* what, std::size_t example) {
  if (id < 0 || static_cast<std::size_t>(id) >= num_classes)
    throw Error(std::string(what) + " id " + std::to_string(id) + " of example " + std::to_string(example) +
                " is outside [0, " + std::to_string(num_classes) + ")");
}

// -log of the gold class's probability after clipping to [eps, 1 - eps] and renormalising the
// row (sklearn 1.2 log_loss).
double log_loss_term(const float* row, std::size_t num_classes, std::int32_t gold, double eps) {
  double row_sum = 0.0;
  for (std::size_t c = 0; c < num_classes; ++c)
    row_sum += std::clamp(static_cast<double>(row[c]), eps, 1.0 - eps);
  const double p = std::clamp(static_cast<double>(row[static_cast<std::size_t>(gold)]), eps, 1.0 - eps);
  return -std::log(p / row_sum);
}

// The bins of Guo et al. 2017, filled one row at a time: bins[m] counts, conf[m] sums the
// confidences and hits[m] the correct argmaxes of bin m.
void calibration_init(std::vector<CalibrationBin>& bins, std::vector<double>& conf,
                      std::vector<std::int64_t>& hits, int count) {
  const auto m_bins = static_cast<std::size_t>(count);
  bins.assign(m_bins, CalibrationBin{});
  conf.assign(m_bins, 0.0);
  hits.assign(m_bins, 0);
  for (std::size_t m = 0; m < m_bins; ++m) {
    bins[m].lower = static_cast<double>(m) / count;
    bins[m].upper = static_cast<double>(m + 1) / count;
  }
}

void calibration_add(std::vector<CalibrationBin>& bins, std::vector<double>& conf,
                     std::vector<std::int64_t>& hits, const float* row, std::size_t num_classes,
                     std::int32_t gold) {
  std::size_t arg = 0;
  for (std::size_t c = 1; c < num_classes; ++c)
    if (row[c] > row[arg]) arg = c;  // strict: lowest id wins a tie
  const double confidence = row[arg];
  // Bin m (1-based) holds confidences in ((m-1)/M, m/M]: m = ceil(conf * M), 0 goes to bin 1.
  const auto count = static_cast<long>(bins.size());
  auto m = static_cast<long>(std::ceil(confidence * static_cast<double>(count)));
  m = std::clamp(m, 1L, count);
  const auto k = static_cast<std::size_t>(m - 1);
  bins[k].count += 1;
  conf[k] += confidence;
  if (static_cast<std::int32_t>(arg) == gold) hits[k] += 1;
}

double calibration_finish(std::vector<CalibrationBin> bins, const std::vector<double>& conf,
                          const std::vector<std::int64_t>& hits, std::int64_t examples,
                          std::vector<CalibrationBin>* bins_out) {
  double ece = 0.0;
  const auto n = static_cast<double>(examples);
  for (std::size_t k = 0; k < bins.size(); ++k) {
    if (bins[k].count == 0) continue;
    const auto cnt = static_cast<double>(bins[k].count);
    bins[k].mean_confidence = conf[k] / cnt;
    bins[k].accuracy = static_cast<double>(hits[k]) / cnt;
    ece += cnt / n * std::abs(bins[k].accuracy - bins[k].mean_confidence);
  }
  if (bins_out != nullptr) *bins_out = std::move(bins);
  return ece;
}

void check_ids(std::span<const std::int32_t> ids, std::size_t num_classes, const char* what) {
  for (std::size_t i = 0; i < ids.size(); ++i) check_id(ids[i], num_classes, what, i);
}

nlohmann::json scores_json(const ClassScores& c) {
  return {{"name", c.name},       {"precision", c.precision}, {"recall", c.recall},   {"f1", c.f1},
          {"support", c.support}, {"predicted", c.predicted}, {"correct", c.correct}, {"present", c.present}};
}

nlohmann::json average_json(const AverageScores& a) {
  return {{"precision", a.precision}, {"recall", a.recall}, {"f1", a.f1}};
}

// Shared table body: per-class rows, then the three averages.
void add_score_rows(detail::TextTable& table, const std::vector<ClassScores>& classes,
                    const AverageScores& macro, const AverageScores& micro, const AverageScores& weighted,
                    int decimals, bool& any_absent) {
  for (const auto& c : classes) {
    const std::string name = c.present ? c.name : c.name + " *";
    any_absent = any_absent || !c.present;
    table.add_row({name, detail::fixed(c.precision, decimals), detail::fixed(c.recall, decimals),
                   detail::fixed(c.f1, decimals), std::to_string(c.support), std::to_string(c.predicted)});
  }
  table.add_rule();
  table.add_row({"mean over labels", detail::fixed(macro.precision, decimals),
                 detail::fixed(macro.recall, decimals), detail::fixed(macro.f1, decimals), "", ""});
  table.add_row({"pooled counts", detail::fixed(micro.precision, decimals),
                 detail::fixed(micro.recall, decimals), detail::fixed(micro.f1, decimals), "", ""});
  table.add_row({"gold-weighted mean", detail::fixed(weighted.precision, decimals),
                 detail::fixed(weighted.recall, decimals), detail::fixed(weighted.f1, decimals), "", ""});
}

}  // namespace

double log_loss(std::span<const std::int32_t> gold, std::span<const float> probabilities,
                std::size_t num_classes, double eps) {
  GYRE_CHECK(!gold.empty(), "log loss of zero examples");
  GYRE_CHECK(eps > 0.0 && eps < 0.5, "log loss eps must be in (0, 0.5)");
  check_probabilities(probabilities, gold.size(), num_classes);
  check_ids(gold, num_classes, "gold");
  double total = 0.0;
  for (std::size_t i = 0; i < gold.size(); ++i)
    total += log_loss_term(probabilities.data() + i * num_classes, num_classes, gold[i], eps);
  return total / static_cast<double>(gold.size());
}

double expected_calibration_error(std::span<const std::int32_t> gold, std::span<const float> probabilities,
                                  std::size_t num_classes, int bins, std::vector<CalibrationBin>* bins_out) {
  GYRE_CHECK(!gold.empty(), "calibration error of zero examples");
  GYRE_CHECK(bins >= 1, "calibration needs at least one bin");
  check_probabilities(probabilities, gold.size(), num_classes);
  check_ids(gold, num_classes, "gold");
  std::vector<CalibrationBin> b;
  std::vector<double> conf;
  std::vector<std::int64_t> hits;
  calibration_init(b, conf, hits, bins);
  for (std::size_t i = 0; i < gold.size(); ++i)
    calibration_add(b, conf, hits, probabilities.data() + i * num_classes, num_classes, gold[i]);
  return calibration_finish(std::move(b), conf, hits, static_cast<std::int64_t>(gold.size()), bins_out);
}

ClassificationMetrics classification_metrics(std::span<const std::int32_t> gold,
                                             std::span<const std::int32_t> predicted,
                                             std::span<const std::string> class_names,
                                             std::span<const float> probabilities) {
  const std::size_t num_classes = class_names.size();
  GYRE_CHECK(num_classes > 0, "classification metrics need at least one class name");
  GYRE_CHECK(!gold.empty(), "classification metrics of zero examples");
  GYRE_CHECK(gold.size() == predicted.size(), "gold has " + std::to_string(gold.size()) +
                                                  " examples but predictions have " +
                                                  std::to_string(predicted.size()));
  check_ids(gold, num_classes, "gold");
  check_ids(predicted, num_classes, "predicted");
  if (!probabilities.empty()) check_probabilities(probabilities, gold.size(), num_classes);
  ClassificationAccumulator acc(class_names, !probabilities.empty());
  for (std::size_t i = 0; i < gold.size(); ++i)
    acc.add(gold[i], predicted[i],
            probabilities.empty() ? std::span<const float>()
                                  : probabilities.subspan(i * num_classes, num_classes));
  return acc.finish();
}

ClassificationAccumulator::ClassificationAccumulator(std::span<const std::string> class_names,
                                                     bool with_probabilities)
    : names_(class_names.begin(), class_names.end()),
      with_probabilities_(with_probabilities),
      support_(names_.size(), 0),
      predicted_(names_.size(), 0),
      correct_(names_.size(), 0) {
  GYRE_CHECK(!names_.empty(), "classification metrics need at least one class name");
  if (with_probabilities_) calibration_init(bins_, bin_confidence_, bin_hits_, kCalibrationBins);
}

void ClassificationAccumulator::add(std::int32_t gold, std::int32_t predicted,
                                    std::span<const float> probabilities) {
  const std::size_t n = names_.size();
  const auto example = static_cast<std::size_t>(examples_);
  check_id(gold, n, "gold", example);
  check_id(predicted, n, "predicted", example);
  if (with_probabilities_) {
    GYRE_CHECK(probabilities.size() == n, "example " + std::to_string(example) + " has " +
                                              std::to_string(probabilities.size()) + " probabilities for " +
                                              std::to_string(n) + " classes");
    check_row(probabilities.data(), n, example);
  }
  const auto g = static_cast<std::size_t>(gold);
  const auto p = static_cast<std::size_t>(predicted);
  ++cells_[static_cast<std::uint64_t>(g) * n + p];
  support_[g] += 1;
  predicted_[p] += 1;
  if (g == p) correct_[g] += 1;
  if (with_probabilities_) {
    log_loss_sum_ += log_loss_term(probabilities.data(), n, gold, kLogLossEpsilon);
    calibration_add(bins_, bin_confidence_, bin_hits_, probabilities.data(), n, gold);
  }
  ++examples_;
}

ClassificationMetrics ClassificationAccumulator::finish() const {
  GYRE_CHECK(examples_ > 0, "classification metrics of zero examples");
  const std::size_t n = names_.size();
  ClassificationMetrics r;
  r.examples = examples_;
  r.classes.resize(n);
  for (std::size_t c = 0; c < n; ++c) {
    ClassScores& cs = r.classes[c];
    cs.name = names_[c];
    cs.support = support_[c];
    cs.predicted = predicted_[c];
    cs.correct = correct_[c];
    r.correct += cs.correct;
    cs.present = cs.support > 0 || cs.predicted > 0;
    finish_scores(cs);
  }
  r.confusion.reserve(cells_.size());
  for (const auto& [key, count] : cells_)
    r.confusion.push_back({static_cast<std::int32_t>(key / n), static_cast<std::int32_t>(key % n), count});
  std::sort(r.confusion.begin(), r.confusion.end(), [](const ConfusionCell& a, const ConfusionCell& b) {
    return a.gold != b.gold ? a.gold < b.gold : a.predicted < b.predicted;
  });
  r.accuracy = static_cast<double>(r.correct) / static_cast<double>(r.examples);
  average(r.classes, r.macro, r.micro, r.weighted);
  if (with_probabilities_) {
    r.log_loss = log_loss_sum_ / static_cast<double>(examples_);
    r.calibration_error =
        calibration_finish(bins_, bin_confidence_, bin_hits_, examples_, &r.calibration_bins);
  }
  return r;
}

std::int64_t ClassificationMetrics::confusion_at(std::size_t gold, std::size_t predicted) const {
  GYRE_CHECK(gold < classes.size() && predicted < classes.size(), "confusion index out of range");
  const ConfusionCell key{static_cast<std::int32_t>(gold), static_cast<std::int32_t>(predicted), 0};
  const auto it = std::lower_bound(confusion.begin(), confusion.end(), key,
                                   [](const ConfusionCell& a, const ConfusionCell& b) {
                                     return a.gold != b.gold ? a.gold < b.gold : a.predicted < b.predicted;
                                   });
  return it != confusion.end() && it->gold == key.gold && it->predicted == key.predicted ? it->count : 0;
}

std::vector<ConfusionCell> ClassificationMetrics::top_confusions(std::size_t limit) const {
  std::vector<ConfusionCell> off;
  for (const auto& c : confusion)
    if (c.gold != c.predicted) off.push_back(c);
  const auto order = [](const ConfusionCell& a, const ConfusionCell& b) {
    if (a.count != b.count) return a.count > b.count;
    return a.gold != b.gold ? a.gold < b.gold : a.predicted < b.predicted;
  };
  const std::size_t k = std::min(limit, off.size());
  std::partial_sort(off.begin(), off.begin() + static_cast<std::ptrdiff_t>(k), off.end(), order);
  off.resize(k);
  return off;
}

namespace {
std::size_t off_diagonal_cells(const std::vector<ConfusionCell>& cells) {
  std::size_t n = 0;
  for (const auto& c : cells) n += c.gold != c.predicted ? 1 : 0;
  return n;
}
}  // namespace

nlohmann::json ClassificationMetrics::to_json() const {
  nlohmann::json j;
  j["task"] = "classification";
  j["examples"] = examples;
  j["correct"] = correct;
  j["accuracy"] = accuracy;
  j["classes"] = nlohmann::json::array();
  for (const auto& c : classes) j["classes"].push_back(scores_json(c));
  j["macro"] = average_json(macro);
  j["micro"] = average_json(micro);
  j["weighted"] = average_json(weighted);
  const std::size_t n = classes.size();
  if (n <= kDenseConfusionLimit) {
    nlohmann::json labels = nlohmann::json::array();
    std::vector<std::vector<std::int64_t>> dense(n, std::vector<std::int64_t>(n, 0));
    for (const auto& c : confusion)
      dense[static_cast<std::size_t>(c.gold)][static_cast<std::size_t>(c.predicted)] = c.count;
    for (std::size_t g = 0; g < n; ++g) labels.push_back(classes[g].name);
    j["confusion"] = {
        {"labels", std::move(labels)}, {"counts", dense}, {"rows", "gold"}, {"columns", "predicted"}};
  } else {
    nlohmann::json top = nlohmann::json::array();
    for (const auto& c : top_confusions(kTopConfusions))
      top.push_back({{"gold", classes[static_cast<std::size_t>(c.gold)].name},
                     {"predicted", classes[static_cast<std::size_t>(c.predicted)].name},
                     {"count", c.count}});
    j["confusion"] = {{"top", std::move(top)},
                      {"off_diagonal_cells", off_diagonal_cells(confusion)},
                      {"rows", "gold"},
                      {"columns", "predicted"}};
  }
  if (log_loss) j["log_loss"] = *log_loss;
  if (calibration_error) {
    nlohmann::json rel = nlohmann::json::array();
    for (const auto& b : calibration_bins)
      rel.push_back({{"lower", b.lower},
                     {"upper", b.upper},
                     {"count", b.count},
                     {"mean_confidence", b.mean_confidence},
                     {"accuracy", b.accuracy}});
    j["calibration"] = {
        {"bins", calibration_bins.size()}, {"error", *calibration_error}, {"reliability", rel}};
  }
  return j;
}

std::string ClassificationMetrics::to_table(int decimals) const {
  detail::TextTable table({"label", "precision", "recall", "F1", "gold", "predicted"});
  bool any_absent = false;
  add_score_rows(table, classes, macro, micro, weighted, decimals, any_absent);
  std::string out = table.render();
  out += "accuracy " + detail::fixed(accuracy, decimals) + " (" + std::to_string(correct) + " of " +
         std::to_string(examples) + " examples)\n";
  if (log_loss) out += "log loss " + detail::fixed(*log_loss, decimals) + "\n";
  if (calibration_error)
    out += "expected calibration error " + detail::fixed(*calibration_error, decimals) + " (" +
           std::to_string(calibration_bins.size()) + " equal-width confidence bins)\n";
  if (any_absent) out += "* label absent from gold and predictions; left out of the means\n";
  return out;
}

std::string ClassificationMetrics::confusion_table() const {
  const std::size_t n = classes.size();
  if (n > kDenseConfusionLimit) {
    const auto top = top_confusions(kTopConfusions);
    detail::TextTable table({"gold", "predicted", "count"});
    for (const auto& c : top)
      table.add_row({classes[static_cast<std::size_t>(c.gold)].name,
                     classes[static_cast<std::size_t>(c.predicted)].name, std::to_string(c.count)});
    return "(" + std::to_string(n) + " labels: the " + std::to_string(top.size()) + " most frequent of " +
           std::to_string(off_diagonal_cells(confusion)) + " confusions instead of the full matrix)\n" +
           table.render();
  }
  std::vector<std::vector<std::int64_t>> dense(n, std::vector<std::int64_t>(n, 0));
  for (const auto& c : confusion)
    dense[static_cast<std::size_t>(c.gold)][static_cast<std::size_t>(c.predicted)] = c.count;
  std::vector<std::string> header{"gold \\ predicted"};
  for (const auto& c : classes) header.push_back(c.name);
  detail::TextTable table(std::move(header));
  for (std::size_t g = 0; g < n; ++g) {
    std::vector<std::string> row{classes[g].name};
    for (std::size_t p = 0; p < n; ++p) row.push_back(std::to_string(dense[g][p]));
    table.add_row(std::move(row));
  }
  return table.render();
}

std::vector<ConfidentError> most_confident_errors(std::span<const std::int32_t> gold,
                                                  std::span<const std::int32_t> predicted,
                                                  std::span<const float> probabilities,
                                                  std::size_t num_classes, std::size_t limit) {
  GYRE_CHECK(gold.size() == predicted.size(), "gold has " + std::to_string(gold.size()) +
                                                  " examples but predictions have " +
                                                  std::to_string(predicted.size()));
  check_probabilities(probabilities, gold.size(), num_classes);
  check_ids(gold, num_classes, "gold");
  check_ids(predicted, num_classes, "predicted");
  std::vector<ConfidentError> errors;
  for (std::size_t i = 0; i < gold.size(); ++i)
    if (gold[i] != predicted[i])
      errors.push_back({i, gold[i], predicted[i],
                        probabilities[i * num_classes + static_cast<std::size_t>(predicted[i])]});
  std::stable_sort(errors.begin(), errors.end(), [](const ConfidentError& a, const ConfidentError& b) {
    return a.probability > b.probability;
  });
  if (errors.size() > limit) errors.resize(limit);
  return errors;
}

// ---- multi-label ----------------------------------------------------------------------------

MultiLabelAccumulator::MultiLabelAccumulator(std::span<const std::string> label_names, double threshold)
    : names_(label_names.begin(), label_names.end()),
      threshold_(threshold),
      support_(names_.size(), 0),
      predicted_(names_.size(), 0),
      correct_(names_.size(), 0) {
  GYRE_CHECK(!names_.empty(), "multi-label metrics need at least one label name");
}

MultiLabelAccumulator::MultiLabelAccumulator(std::span<const std::string> label_names, double threshold,
                                             std::span<const float> label_thresholds)
    : MultiLabelAccumulator(label_names, threshold) {
  if (label_thresholds.empty()) return;
  GYRE_CHECK(label_thresholds.size() == names_.size(), std::to_string(label_thresholds.size()) +
                                                           " thresholds for " +
                                                           std::to_string(names_.size()) + " labels");
  label_thresholds_.assign(label_thresholds.begin(), label_thresholds.end());
}

void MultiLabelAccumulator::add_scores(std::span<const std::uint8_t> gold, std::span<const float> scores) {
  GYRE_CHECK(scores.size() == names_.size(), "example " + std::to_string(examples_) + " has " +
                                                 std::to_string(scores.size()) + " scores for " +
                                                 std::to_string(names_.size()) + " labels");
  decisions_.resize(scores.size());
  for (std::size_t l = 0; l < scores.size(); ++l) {
    if (!std::isfinite(scores[l]))
      throw Error("score " + std::to_string(static_cast<std::size_t>(examples_) * names_.size() + l) +
                  " is not finite");
    const double t = label_thresholds_.empty() ? threshold_ : label_thresholds_[l];
    decisions_[l] = static_cast<double>(scores[l]) >= t ? 1 : 0;
  }
  add_decisions(gold, decisions_);
}

void MultiLabelAccumulator::add_decisions(std::span<const std::uint8_t> gold,
                                          std::span<const std::uint8_t> predicted) {
  const std::size_t num_labels = names_.size();
  GYRE_CHECK(gold.size() == num_labels && predicted.size() == num_labels,
             "example " + std::to_string(examples_) + " has " + std::to_string(gold.size()) + " gold and " +
                 std::to_string(predicted.size()) + " predicted indicators for " +
                 std::to_string(num_labels) + " labels");
  bool same = true;
  for (std::size_t l = 0; l < num_labels; ++l) {
    const std::uint8_t g = gold[l];
    const std::uint8_t p = predicted[l];
    if (g > 1 || p > 1)
      throw Error("indicator of example " + std::to_string(examples_) + ", label " + std::to_string(l) +
                  " is not 0 or 1");
    support_[l] += g;
    predicted_[l] += p;
    correct_[l] += (g & p);
    same = same && g == p;
  }
  exact_ += same ? 1 : 0;
  ++examples_;
}

MultiLabelMetrics MultiLabelAccumulator::finish() const {
  GYRE_CHECK(examples_ > 0, "multi-label metrics of zero examples");
  MultiLabelMetrics r;
  r.examples = examples_;
  r.threshold = threshold_;
  r.label_thresholds = label_thresholds_;
  r.labels.resize(names_.size());
  for (std::size_t l = 0; l < names_.size(); ++l) {
    ClassScores& c = r.labels[l];
    c.name = names_[l];
    c.support = support_[l];
    c.predicted = predicted_[l];
    c.correct = correct_[l];
    c.present = true;  // indicator matrices: every column is averaged (as sklearn does)
    finish_scores(c);
  }
  average(r.labels, r.macro, r.micro, r.weighted);
  r.exact_match = static_cast<double>(exact_) / static_cast<double>(examples_);
  return r;
}

MultiLabelMetrics multilabel_metrics_from_decisions(std::span<const std::uint8_t> gold,
                                                    std::span<const std::uint8_t> predicted,
                                                    std::span<const std::string> label_names) {
  const std::size_t num_labels = label_names.size();
  GYRE_CHECK(num_labels > 0, "multi-label metrics need at least one label name");
  GYRE_CHECK(!gold.empty() && gold.size() % num_labels == 0,
             "gold indicator matrix has " + std::to_string(gold.size()) +
                 " values, not a positive multiple of " + std::to_string(num_labels) + " labels");
  GYRE_CHECK(predicted.size() == gold.size(), "predicted indicator matrix has " +
                                                  std::to_string(predicted.size()) + " values, gold has " +
                                                  std::to_string(gold.size()));
  MultiLabelAccumulator acc(label_names, std::numeric_limits<double>::quiet_NaN());
  for (std::size_t i = 0; i < gold.size(); i += num_labels)
    acc.add_decisions(gold.subspan(i, num_labels), predicted.subspan(i, num_labels));
  return acc.finish();
}

MultiLabelMetrics multilabel_metrics(std::span<const std::uint8_t> gold, std::span<const float> scores,
                                     std::span<const std::string> label_names, double threshold) {
  return multilabel_metrics(gold, scores, label_names, threshold, {});
}

MultiLabelMetrics multilabel_metrics(std::span<const std::uint8_t> gold, std::span<const float> scores,
                                     std::span<const std::string> label_names, double threshold,
                                     std::span<const float> label_thresholds) {
  GYRE_CHECK(scores.size() == gold.size(), "scores hold " + std::to_string(scores.size()) +
                                               " values, gold indicator matrix " +
                                               std::to_string(gold.size()));
  const std::size_t num_labels = label_names.size();
  GYRE_CHECK(num_labels > 0, "multi-label metrics need at least one label name");
  GYRE_CHECK(!gold.empty() && gold.size() % num_labels == 0,
             "gold indicator matrix has " + std::to_string(gold.size()) +
                 " values, not a positive multiple of " + std::to_string(num_labels) + " labels");
  MultiLabelAccumulator acc(label_names, threshold, label_thresholds);
  for (std::size_t i = 0; i < gold.size(); i += num_labels)
    acc.add_scores(gold.subspan(i, num_labels), scores.subspan(i, num_labels));
  return acc.finish();
}

namespace {

// F1 = 2TP / (2TP + FP + FN) as an exact fraction (0/0 counts as 0), compared by cross
// multiplication: counts are below 2^31 rows, so the products fit in 64 bits.
struct F1Fraction {
  std::int64_t num = 0, den = 0;
  static F1Fraction of(std::int64_t tp, std::int64_t fp, std::int64_t positives) {
    return {2 * tp, 2 * tp + fp + (positives - tp)};
  }
  // Value order with 0/0 == 0.
  int compare(const F1Fraction& o) const {
    const std::int64_t a = den == 0 ? 0 : num * (o.den == 0 ? 1 : o.den);
    const std::int64_t b = o.den == 0 ? 0 : o.num * (den == 0 ? 1 : den);
    return a < b ? -1 : a > b ? 1 : 0;
  }
};

}  // namespace

std::vector<float> tune_label_thresholds(std::span<const std::uint8_t> gold, std::span<const float> scores,
                                         std::size_t num_labels, float global) {
  GYRE_CHECK(num_labels > 0, "threshold tuning needs at least one label");
  GYRE_CHECK(scores.size() == gold.size() && gold.size() % num_labels == 0,
             "threshold tuning: " + std::to_string(gold.size()) + " gold indicators and " +
                 std::to_string(scores.size()) + " scores for " + std::to_string(num_labels) + " labels");
  GYRE_CHECK(global > 0.0f && global < 1.0f, "threshold tuning: the global threshold must be in (0, 1)");
  GYRE_CHECK(gold.size() / num_labels < (std::size_t{1} << 30), "threshold tuning: too many rows");
  const std::size_t n = gold.size() / num_labels;
  std::vector<float> out(num_labels, global);
  std::vector<std::pair<float, std::uint8_t>> column(n);
  for (std::size_t l = 0; l < num_labels; ++l) {
    std::int64_t positives = 0, tp_global = 0, fp_global = 0;
    for (std::size_t i = 0; i < n; ++i) {
      const float s = scores[i * num_labels + l];
      const std::uint8_t g = gold[i * num_labels + l];
      if (g > 1) throw Error("threshold tuning: indicator of row " + std::to_string(i) + " is not 0 or 1");
      if (!(s >= 0.0f && s <= 1.0f))
        throw Error("threshold tuning: score of row " + std::to_string(i) + " is not a probability");
      column[i] = {s, g};
      positives += g;
      if (s >= global) (g ? tp_global : fp_global) += 1;
    }
    const F1Fraction at_global = F1Fraction::of(tp_global, fp_global, positives);
    // Distinct scores, highest first; choosing the first k groups = a threshold in
    // (next score, k-th score]. k = 0 chooses nothing: a threshold in (highest score, 1).
    std::sort(column.begin(), column.end(), [](const auto& a, const auto& b) { return a.first > b.first; });
    F1Fraction best = at_global;
    bool improved = false;
    float chosen = global;
    double chosen_distance = 0;
    std::int64_t tp = 0, fp = 0;
    for (std::size_t i = 0;;) {
      // Candidate: rows [0, i) chosen, by any threshold in (lo, hi] (below 1, above 0).
      const double hi = i == 0 ? 1.0 : static_cast<double>(column[i - 1].first);
      const double lo = i == n ? 0.0 : static_cast<double>(column[i].first);
      float t = static_cast<float>((lo + hi) / 2);
      if (!(t > lo && t <= hi)) t = static_cast<float>(hi);  // adjacent floats: hi itself
      if (t > lo && t <= hi && t > 0.0f && t < 1.0f) {
        const int c = F1Fraction::of(tp, fp, positives).compare(best);
        const double distance = std::min(std::fabs(global - lo), std::fabs(global - hi));
        if (c > 0 || (c == 0 && improved && distance < chosen_distance)) {
          best = F1Fraction::of(tp, fp, positives);
          improved = true;
          chosen = t;
          chosen_distance = distance;
        }
      }
      if (i == n) break;
      const float group = column[i].first;
      while (i < n && column[i].first == group) (column[i++].second ? tp : fp) += 1;
    }
    out[l] = chosen;
  }
  return out;
}

nlohmann::json MultiLabelMetrics::to_json() const {
  nlohmann::json j;
  j["task"] = "multilabel";
  j["examples"] = examples;
  if (std::isfinite(threshold)) j["threshold"] = threshold;
  if (!label_thresholds.empty()) j["label_thresholds"] = label_thresholds;
  j["exact_match"] = exact_match;
  j["labels"] = nlohmann::json::array();
  for (const auto& c : labels) j["labels"].push_back(scores_json(c));
  j["macro"] = average_json(macro);
  j["micro"] = average_json(micro);
  j["weighted"] = average_json(weighted);
  return j;
}

std::string MultiLabelMetrics::to_table(int decimals) const {
  detail::TextTable table({"label", "precision", "recall", "F1", "gold", "predicted"});
  bool any_absent = false;
  add_score_rows(table, labels, macro, micro, weighted, decimals, any_absent);
  std::string out = table.render();
  out += "exact label-set match " + detail::fixed(exact_match, decimals) + " over " +
         std::to_string(examples) + " examples";
  if (!label_thresholds.empty()) {
    out += ", decision thresholds per label:";
    for (std::size_t l = 0; l < labels.size() && l < label_thresholds.size(); ++l)
      out += (l ? ", " : " ") + labels[l].name + " " + detail::fixed(label_thresholds[l], 2);
  } else if (std::isfinite(threshold)) {
    out += ", decision threshold " + detail::fixed(threshold, 2);
  }
  out += "\n";
  return out;
}

}  // namespace gyre::eval
