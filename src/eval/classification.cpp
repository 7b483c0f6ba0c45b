#include "gyre/eval/classification.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <nlohmann/json.hpp>
#include <string>

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

void check_probabilities(std::span<const float> probabilities, std::size_t rows, std::size_t num_classes) {
  GYRE_CHECK(num_classes > 0, "need at least one class");
  GYRE_CHECK(probabilities.size() == rows * num_classes,
             "probabilities hold " + std::to_string(probabilities.size()) + " values, expected " +
                 std::to_string(rows) + " examples x " + std::to_string(num_classes) + " classes");
  for (std::size_t i = 0; i < probabilities.size(); ++i) {
    const float p = probabilities[i];
    if (!std::isfinite(p) || p < 0.0f)
      throw Error("probability of example " + std::to_string(i / num_classes) + ", class " +
                  std::to_string(i % num_classes) + " is " + std::to_string(p) +
                  " (must be finite and >= 0)");
  }
}

void check_ids(std::span<const std::int32_t> ids, std::size_t num_classes, const char* what) {
  for (std::size_t i = 0; i < ids.size(); ++i) {
    if (ids[i] < 0 || static_cast<std::size_t>(ids[i]) >= num_classes)
      throw Error(std::string(what) + " id " + std::to_string(ids[i]) + " of example " + std::to_string(i) +
                  " is outside [0, " + std::to_string(num_classes) + ")");
  }
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
  for (std::size_t i = 0; i < gold.size(); ++i) {
    const float* row = probabilities.data() + i * num_classes;
    double row_sum = 0.0;
    for (std::size_t c = 0; c < num_classes; ++c)
      row_sum += std::clamp(static_cast<double>(row[c]), eps, 1.0 - eps);
    const double p = std::clamp(static_cast<double>(row[static_cast<std::size_t>(gold[i])]), eps, 1.0 - eps);
    total -= std::log(p / row_sum);
  }
  return total / static_cast<double>(gold.size());
}

double expected_calibration_error(std::span<const std::int32_t> gold, std::span<const float> probabilities,
                                  std::size_t num_classes, int bins, std::vector<CalibrationBin>* bins_out) {
  GYRE_CHECK(!gold.empty(), "calibration error of zero examples");
  GYRE_CHECK(bins >= 1, "calibration needs at least one bin");
  check_probabilities(probabilities, gold.size(), num_classes);
  check_ids(gold, num_classes, "gold");
  const auto m_bins = static_cast<std::size_t>(bins);
  std::vector<CalibrationBin> b(m_bins);
  std::vector<double> conf_sum(m_bins, 0.0);
  std::vector<std::int64_t> hits(m_bins, 0);
  for (std::size_t m = 0; m < m_bins; ++m) {
    b[m].lower = static_cast<double>(m) / bins;
    b[m].upper = static_cast<double>(m + 1) / bins;
  }
  for (std::size_t i = 0; i < gold.size(); ++i) {
    const float* row = probabilities.data() + i * num_classes;
    std::size_t arg = 0;
    for (std::size_t c = 1; c < num_classes; ++c)
      if (row[c] > row[arg]) arg = c;  // strict: lowest id wins a tie
    const double conf = row[arg];
    // Bin m (1-based) holds confidences in ((m-1)/M, m/M]: m = ceil(conf * M), 0 goes to bin 1.
    auto m = static_cast<long>(std::ceil(conf * bins));
    m = std::clamp(m, 1L, static_cast<long>(bins));
    const auto k = static_cast<std::size_t>(m - 1);
    b[k].count += 1;
    conf_sum[k] += conf;
    if (static_cast<std::int32_t>(arg) == gold[i]) hits[k] += 1;
  }
  double ece = 0.0;
  const auto n = static_cast<double>(gold.size());
  for (std::size_t k = 0; k < m_bins; ++k) {
    if (b[k].count == 0) continue;
    const auto cnt = static_cast<double>(b[k].count);
    b[k].mean_confidence = conf_sum[k] / cnt;
    b[k].accuracy = static_cast<double>(hits[k]) / cnt;
    ece += cnt / n * std::abs(b[k].accuracy - b[k].mean_confidence);
  }
  if (bins_out != nullptr) *bins_out = std::move(b);
  return ece;
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

  ClassificationMetrics r;
  r.examples = static_cast<std::int64_t>(gold.size());
  r.classes.resize(num_classes);
  r.confusion.assign(num_classes * num_classes, 0);
  for (std::size_t c = 0; c < num_classes; ++c) r.classes[c].name = class_names[c];
  for (std::size_t i = 0; i < gold.size(); ++i) {
    const auto g = static_cast<std::size_t>(gold[i]);
    const auto p = static_cast<std::size_t>(predicted[i]);
    r.confusion[g * num_classes + p] += 1;
    r.classes[g].support += 1;
    r.classes[p].predicted += 1;
    if (g == p) {
      r.classes[g].correct += 1;
      r.correct += 1;
    }
  }
  for (auto& c : r.classes) {
    c.present = c.support > 0 || c.predicted > 0;
    finish_scores(c);
  }
  r.accuracy = static_cast<double>(r.correct) / static_cast<double>(r.examples);
  average(r.classes, r.macro, r.micro, r.weighted);

  if (!probabilities.empty()) {
    r.log_loss = log_loss(gold, probabilities, num_classes);
    r.calibration_error =
        expected_calibration_error(gold, probabilities, num_classes, kCalibrationBins, &r.calibration_bins);
  }
  return r;
}

std::int64_t ClassificationMetrics::confusion_at(std::size_t gold, std::size_t predicted) const {
  GYRE_CHECK(gold < classes.size() && predicted < classes.size(), "confusion index out of range");
  return confusion[gold * classes.size() + predicted];
}

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
  nlohmann::json labels = nlohmann::json::array();
  nlohmann::json counts = nlohmann::json::array();
  const std::size_t n = classes.size();
  for (std::size_t g = 0; g < n; ++g) {
    labels.push_back(classes[g].name);
    nlohmann::json row = nlohmann::json::array();
    for (std::size_t p = 0; p < n; ++p) row.push_back(confusion[g * n + p]);
    counts.push_back(std::move(row));
  }
  j["confusion"] = {{"labels", std::move(labels)},
                    {"counts", std::move(counts)},
                    {"rows", "gold"},
                    {"columns", "predicted"}};
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
  std::vector<std::string> header{"gold \\ predicted"};
  for (const auto& c : classes) header.push_back(c.name);
  detail::TextTable table(std::move(header));
  for (std::size_t g = 0; g < n; ++g) {
    std::vector<std::string> row{classes[g].name};
    for (std::size_t p = 0; p < n; ++p) row.push_back(std::to_string(confusion[g * n + p]));
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
  const std::size_t rows = gold.size() / num_labels;
  MultiLabelMetrics r;
  r.examples = static_cast<std::int64_t>(rows);
  r.threshold = std::numeric_limits<double>::quiet_NaN();
  r.labels.resize(num_labels);
  std::int64_t exact = 0;
  for (std::size_t l = 0; l < num_labels; ++l) r.labels[l].name = label_names[l];
  for (std::size_t i = 0; i < rows; ++i) {
    bool same = true;
    for (std::size_t l = 0; l < num_labels; ++l) {
      const std::uint8_t g = gold[i * num_labels + l];
      const std::uint8_t p = predicted[i * num_labels + l];
      if (g > 1 || p > 1)
        throw Error("indicator of example " + std::to_string(i) + ", label " + std::to_string(l) +
                    " is not 0 or 1");
      r.labels[l].support += g;
      r.labels[l].predicted += p;
      r.labels[l].correct += (g & p);
      same = same && g == p;
    }
    exact += same ? 1 : 0;
  }
  for (auto& c : r.labels) {
    c.present = true;  // indicator matrices: every column is averaged (as sklearn does)
    finish_scores(c);
  }
  average(r.labels, r.macro, r.micro, r.weighted);
  r.exact_match = static_cast<double>(exact) / static_cast<double>(rows);
  return r;
}

MultiLabelMetrics multilabel_metrics(std::span<const std::uint8_t> gold, std::span<const float> scores,
                                     std::span<const std::string> label_names, double threshold) {
  GYRE_CHECK(scores.size() == gold.size(), "scores hold " + std::to_string(scores.size()) +
                                               " values, gold indicator matrix " +
                                               std::to_string(gold.size()));
  std::vector<std::uint8_t> decisions(scores.size());
  for (std::size_t i = 0; i < scores.size(); ++i) {
    if (!std::isfinite(scores[i])) throw Error("score " + std::to_string(i) + " is not finite");
    decisions[i] = static_cast<double>(scores[i]) >= threshold ? 1 : 0;
  }
  MultiLabelMetrics r = multilabel_metrics_from_decisions(gold, decisions, label_names);
  r.threshold = threshold;
  return r;
}

nlohmann::json MultiLabelMetrics::to_json() const {
  nlohmann::json j;
  j["task"] = "multilabel";
  j["examples"] = examples;
  if (std::isfinite(threshold)) j["threshold"] = threshold;
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
  if (std::isfinite(threshold)) out += ", decision threshold " + detail::fixed(threshold, 2);
  out += "\n";
  return out;
}

}  // namespace gyre::eval
