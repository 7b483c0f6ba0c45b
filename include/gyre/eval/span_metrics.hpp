#pragma once
// Tagging metrics: token accuracy and span precision/recall/F1 per type and averaged. A predicted
// span is correct only if a gold span has the same type and both the same first and last token
// (the exact-match convention of the CoNLL-2000 shared task, Tjong Kim Sang & Buchholz 2000).
// Spans are read with extract_spans() (gyre/data/tag_scheme.hpp). Zero division gives 0, as the
// CoNLL evaluation script prints.

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "gyre/eval/classification.hpp"

namespace gyre::eval {

struct SpanTypeScores {
  std::string type;
  std::int64_t gold = 0;       // gold spans of this type
  std::int64_t predicted = 0;  // predicted spans of this type
  std::int64_t correct = 0;    // exact matches
  double precision = 0.0;
  double recall = 0.0;
  double f1 = 0.0;
};

struct TaggingMetrics {
  std::int64_t sentences = 0;
  std::int64_t tokens = 0;
  std::int64_t correct_tokens = 0;
  double token_accuracy = 0.0;        // over all tokens, O included
  std::vector<SpanTypeScores> types;  // sorted by type name; every type seen in gold or predictions
  std::int64_t gold_spans = 0;
  std::int64_t predicted_spans = 0;
  std::int64_t correct_spans = 0;
  AverageScores micro;  // pooled over all spans: the headline span F1
  AverageScores macro;  // unweighted mean over types

  /// {"task":"tagging","sentences","tokens","token_accuracy","spans":{"gold","predicted",
  ///  "correct"},"micro":{..},"macro":{..},"types":[{type,precision,recall,f1,gold,predicted,correct}]}
  nlohmann::json to_json() const;
  std::string to_table(int decimals = 4) const;
};

/// Accumulates sentences, then reports. Not thread-safe.
class TaggingScorer {
 public:
  /// Adds one sentence. Throws gyre::Error if the sequences differ in length or hold a
  /// malformed tag (message names the position).
  void add(std::span<const std::string> gold, std::span<const std::string> predicted);
  TaggingMetrics metrics() const;

 private:
  struct Counts {
    std::int64_t gold = 0, predicted = 0, correct = 0;
  };
  std::vector<std::pair<std::string, Counts>> counts_;  // kept sorted by type
  Counts& counts_for(const std::string& type);
  std::int64_t sentences_ = 0;
  std::int64_t tokens_ = 0;
  std::int64_t correct_tokens_ = 0;
};

/// Convenience: scores whole corpora (gold[i] and predicted[i] are sentence i).
TaggingMetrics tagging_metrics(std::span<const std::vector<std::string>> gold,
                               std::span<const std::vector<std::string>> predicted);

}  // namespace gyre::eval
