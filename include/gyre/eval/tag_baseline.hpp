#pragma once
// Most-frequent-tag-per-token baseline for taggers: each token gets the tag it carried most often
// in training data; a token never seen gets the most frequent tag overall. Ties go to the tag
// that sorts first (byte order), so the baseline is deterministic. Tokens are compared exactly
// as given (normalise them before, as the model's tokenizer does, if wanted). Its output may
// break the tag scheme (e.g. "O I-x"); scoring reads it with the CoNLL-2000 convention.

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <unordered_map>
#include <vector>

namespace gyre::eval {

class MostFrequentTagBaseline {
 public:
  /// Counts one training sentence; throws gyre::Error if tokens and tags differ in length.
  void add(std::span<const std::string> tokens, std::span<const std::string> tags);
  /// Fixes the per-token choices; call after the last add() and before predict().
  /// Throws gyre::Error if nothing was added.
  void finalize();
  /// One tag per token. Throws gyre::Error if finalize() was not called.
  std::vector<std::string> predict(std::span<const std::string> tokens) const;

  std::size_t known_tokens() const noexcept { return best_.size(); }
  const std::string& default_tag() const noexcept { return default_tag_; }

 private:
  std::vector<std::string> tag_names_;
  std::unordered_map<std::string, std::int32_t> tag_ids_;
  std::unordered_map<std::string, std::vector<std::int64_t>> counts_;  // token -> per-tag counts
  std::unordered_map<std::string, std::int32_t> best_;
  std::vector<std::int64_t> totals_;
  std::string default_tag_;
  bool finalized_ = false;
};

}  // namespace gyre::eval
