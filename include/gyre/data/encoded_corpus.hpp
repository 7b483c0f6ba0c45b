#pragma once
// EncodedCorpus: the encoded examples of a split in a few contiguous arrays (issue 13, "Scale").
//
// A std::vector<EncodedExample> holds four heap vectors per example (about 100 bytes of vector
// headers and allocator overhead on top of the ids); this arena holds, per token, its id (and
// with a character encoder one offset and its character ids) and, per example, three offsets,
// its source line and a bit, so memory grows with the tokens of the corpus. Examples are
// appended once and read by index; plan_batches, fill_batch and SequenceModel::train_batch read
// it directly.

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

#include "gyre/data/batcher.hpp"

namespace gyre::data {

class EncodedCorpus {
 public:
  EncodedCorpus() = default;
  /// The same examples in the same order.
  explicit EncodedCorpus(std::span<const EncodedExample> examples);

  /// Appends one example. Throws gyre::Error for an example without tokens, or whose characters
  /// (char_offsets) do not match its tokens, or whose having characters differs from the
  /// examples already added.
  void add(const EncodedExample& example);
  /// Reserves room for `examples` more examples holding `tokens` token ids and `targets` targets
  /// in all (no character ids): adding exactly those leaves no slack, so shrink_to_fit() has
  /// nothing to copy and the arrays never hold twice their size while they fill.
  void reserve(std::size_t examples, std::size_t tokens, std::size_t targets);

  std::size_t size() const noexcept { return lines_.size(); }
  bool empty() const noexcept { return lines_.empty(); }
  /// Tokens of all examples.
  std::size_t token_count() const noexcept { return ids_.size(); }
  bool has_characters() const noexcept { return !char_start_.empty(); }

  /// Example i (i < size(), checked): its token ids, its targets (one label id, several for
  /// multi-label, one tag id per token for taggers), its line in the input and whether
  /// max_tokens cut it.
  std::span<const std::int32_t> ids(std::size_t i) const;
  std::size_t length(std::size_t i) const { return ids(i).size(); }
  std::span<const std::int32_t> targets(std::size_t i) const;
  std::size_t source_line(std::size_t i) const;
  bool cut(std::size_t i) const;
  /// Character ids of token t of example i (has_characters() only; t < length(i), checked).
  std::span<const std::int32_t> char_ids(std::size_t i, std::size_t t) const;

  /// The character ids of all tokens of example i, in token order (empty without characters).
  std::span<const std::int32_t> example_char_ids(std::size_t i) const;

  /// Example i as an EncodedExample (a copy, for code that takes those).
  EncodedExample example(std::size_t i) const;

  /// Bytes the arrays hold (capacity), and the same after shrink_to_fit() drops the slack of
  /// growth.
  std::size_t bytes() const noexcept;
  void shrink_to_fit();

 private:
  // Example i: ids_[id_start_[i] .. id_start_[i+1]), targets_[target_start_[i] .. target_start_[i+1]).
  std::vector<std::int32_t> ids_;
  std::vector<std::size_t> id_start_{0};
  std::vector<std::int32_t> targets_;
  std::vector<std::size_t> target_start_{0};
  std::vector<std::size_t> lines_;
  std::vector<bool> cut_;
  // With characters: token k (over all examples, k = id_start_[i] + t) has
  // char_ids_[char_start_[k] .. char_start_[k+1]); char_start_ has token_count() + 1 entries.
  std::vector<std::int32_t> char_ids_;
  std::vector<std::size_t> char_start_;
};

/// plan_batches and fill_batch over an arena: the same batches and the same contents as over the
/// equal vector of EncodedExample.
std::vector<std::vector<std::size_t>> plan_batches(const EncodedCorpus& examples,
                                                   const BatchPlanOptions& options, std::uint64_t seed,
                                                   std::uint64_t epoch);
/// The same plan into `plan`'s storage (plan.batches), reused from epoch to epoch.
void plan_batches(const EncodedCorpus& examples, const BatchPlanOptions& options, std::uint64_t seed,
                  std::uint64_t epoch, BatchPlan& plan);
void fill_batch(const EncodedCorpus& examples, std::span<const std::size_t> indices, Batch& batch,
                int max_length = 0);

}  // namespace gyre::data
