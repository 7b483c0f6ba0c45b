#include "gyre/eval/span_metrics.hpp"

#include <algorithm>
#include <nlohmann/json.hpp>
#include <string>

#include "eval/detail/table.hpp"
#include "gyre/core/error.hpp"
#include "gyre/data/tag_scheme.hpp"

namespace gyre::eval {
namespace {

double safe_div(double num, double den) {
  return den > 0.0 ? num / den : 0.0;
}

void finish(std::int64_t correct, std::int64_t predicted, std::int64_t gold, double& p, double& r,
            double& f) {
  p = safe_div(static_cast<double>(correct), static_cast<double>(predicted));
  r = safe_div(static_cast<double>(correct), static_cast<double>(gold));
  f = safe_div(2.0 * p * r, p + r);
}

}  // namespace

TaggingScorer::Counts& TaggingScorer::counts_for(const std::string& type) {
  auto it = std::lower_bound(counts_.begin(), counts_.end(), type,
                             [](const auto& entry, const std::string& key) { return entry.first < key; });
  if (it == counts_.end() || it->first != type) it = counts_.insert(it, {type, Counts{}});
  return it->second;
}

void TaggingScorer::add(std::span<const std::string> gold, std::span<const std::string> predicted) {
  GYRE_CHECK(gold.size() == predicted.size(),
             "sentence " + std::to_string(sentences_) + ": gold has " + std::to_string(gold.size()) +
                 " tags but predictions have " + std::to_string(predicted.size()));
  std::vector<data::TypedSpan> gold_spans, pred_spans;
  try {
    gold_spans = data::extract_spans(gold);
  } catch (const Error& e) {
    throw Error("sentence " + std::to_string(sentences_) + ", gold " + e.what());
  }
  try {
    pred_spans = data::extract_spans(predicted);
  } catch (const Error& e) {
    throw Error("sentence " + std::to_string(sentences_) + ", predicted " + e.what());
  }
  for (std::size_t i = 0; i < gold.size(); ++i) correct_tokens_ += gold[i] == predicted[i] ? 1 : 0;
  tokens_ += static_cast<std::int64_t>(gold.size());
  sentences_ += 1;
  for (const auto& s : gold_spans) counts_for(s.type).gold += 1;
  for (const auto& s : pred_spans) counts_for(s.type).predicted += 1;
  // Both lists are sorted by position and non-overlapping: merge to find exact matches.
  std::size_t g = 0;
  for (const auto& p : pred_spans) {
    while (g < gold_spans.size() && gold_spans[g].begin < p.begin) ++g;
    if (g < gold_spans.size() && gold_spans[g] == p) counts_for(p.type).correct += 1;
  }
}

TaggingMetrics TaggingScorer::metrics() const {
  TaggingMetrics m;
  m.sentences = sentences_;
  m.tokens = tokens_;
  m.correct_tokens = correct_tokens_;
  m.token_accuracy = safe_div(static_cast<double>(correct_tokens_), static_cast<double>(tokens_));
  for (const auto& [type, c] : counts_) {
    SpanTypeScores s;
    s.type = type;
    s.gold = c.gold;
    s.predicted = c.predicted;
    s.correct = c.correct;
    finish(c.correct, c.predicted, c.gold, s.precision, s.recall, s.f1);
    m.gold_spans += c.gold;
    m.predicted_spans += c.predicted;
    m.correct_spans += c.correct;
    m.macro.precision += s.precision;
    m.macro.recall += s.recall;
    m.macro.f1 += s.f1;
    m.types.push_back(std::move(s));
  }
  const auto n = static_cast<double>(m.types.size());
  m.macro.precision = safe_div(m.macro.precision, n);
  m.macro.recall = safe_div(m.macro.recall, n);
  m.macro.f1 = safe_div(m.macro.f1, n);
  finish(m.correct_spans, m.predicted_spans, m.gold_spans, m.micro.precision, m.micro.recall, m.micro.f1);
  return m;
}

TaggingMetrics tagging_metrics(std::span<const std::vector<std::string>> gold,
                               std::span<const std::vector<std::string>> predicted) {
  GYRE_CHECK(gold.size() == predicted.size(), "gold has " + std::to_string(gold.size()) +
                                                  " sentences but predictions have " +
                                                  std::to_string(predicted.size()));
  TaggingScorer scorer;
  for (std::size_t i = 0; i < gold.size(); ++i) scorer.add(gold[i], predicted[i]);
  return scorer.metrics();
}

nlohmann::json TaggingMetrics::to_json() const {
  nlohmann::json j;
  j["task"] = "tagging";
  j["sentences"] = sentences;
  j["tokens"] = tokens;
  j["correct_tokens"] = correct_tokens;
  j["token_accuracy"] = token_accuracy;
  j["spans"] = {{"gold", gold_spans}, {"predicted", predicted_spans}, {"correct", correct_spans}};
  j["micro"] = {{"precision", micro.precision}, {"recall", micro.recall}, {"f1", micro.f1}};
  j["macro"] = {{"precision", macro.precision}, {"recall", macro.recall}, {"f1", macro.f1}};
  j["types"] = nlohmann::json::array();
  for (const auto& t : types)
    j["types"].push_back({{"type", t.type},
                          {"precision", t.precision},
                          {"recall", t.recall},
                          {"f1", t.f1},
                          {"gold", t.gold},
                          {"predicted", t.predicted},
                          {"correct", t.correct}});
  return j;
}

std::string TaggingMetrics::to_table(int decimals) const {
  using detail::fixed;
  detail::TextTable table({"span type", "precision", "recall", "F1", "gold", "predicted", "exact"});
  for (const auto& t : types)
    table.add_row({t.type, fixed(t.precision, decimals), fixed(t.recall, decimals), fixed(t.f1, decimals),
                   std::to_string(t.gold), std::to_string(t.predicted), std::to_string(t.correct)});
  table.add_rule();
  table.add_row({"all spans pooled", fixed(micro.precision, decimals), fixed(micro.recall, decimals),
                 fixed(micro.f1, decimals), std::to_string(gold_spans), std::to_string(predicted_spans),
                 std::to_string(correct_spans)});
  table.add_row({"mean over types", fixed(macro.precision, decimals), fixed(macro.recall, decimals),
                 fixed(macro.f1, decimals), "", "", ""});
  std::string out = table.render();
  out += "token accuracy " + fixed(token_accuracy, decimals) + " (" + std::to_string(correct_tokens) +
         " of " + std::to_string(tokens) + " tokens, " + std::to_string(sentences) + " sentences)\n";
  out += "a span counts as correct only with the same type and the same first and last token\n";
  return out;
}

}  // namespace gyre::eval
