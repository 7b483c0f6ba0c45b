#pragma once
// Turning encoded examples into padded, masked, time-major batches.
//
// Batches are drawn per epoch from a seeded shuffle, then bucketed by length (examples are sorted
// by length inside chunks of `bucket_batches` batches, so each batch holds similar lengths and
// little padding), then the batch order is shuffled again. The same seed and epoch give the same
// batches on every platform.
//
// Truncated BPTT: a batch longer than the window K is cut into windows aligned at each
// sequence's END, so the last window of every sequence holds its last min(K, length) tokens. A
// classifier's loss therefore always reaches the final window of every sequence, and a tagger's
// tokens each belong to exactly one window. Earlier windows may be shorter or empty for short
// sequences (length 0 = sequence absent from that window).

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "gyre/core/rng.hpp"

namespace gyre::data {

/// One example after tokenization and vocabulary lookup.
struct EncodedExample {
  std::vector<std::int32_t> ids;  // token ids, length >= 1
  /// classify: one label id (multi-label: all label ids); tag: one tag id per token.
  std::vector<std::int32_t> targets;
  std::size_t source_line = 0;  // line in the input file (for messages)
  bool cut = false;             // the text had more than max_tokens tokens; the rest was dropped
  /// Models with a character encoder: character ids of token i are
  /// char_ids[char_offsets[i] .. char_offsets[i+1]) (gyre/runtime/char_tokens.hpp); both empty
  /// otherwise. char_offsets has ids.size() + 1 entries.
  std::vector<std::int32_t> char_ids;
  std::vector<std::int32_t> char_offsets;
  /// Classifiers with an n-gram part (gyre/runtime/ngram_part.hpp): what the part adds to each
  /// logit, mix * (W x + b), one per class (Encoder::set_ngram_part); empty otherwise.
  std::vector<float> ngram_scores;
  /// The same models: the tokens as the vocabulary sees them (what the embedded runtime's part
  /// reads, runtime::Context::classify_ids with words); empty otherwise.
  std::vector<std::string> words;
};

/// A padded batch in time-major layout: element (t, b) is at t * batch + b.
struct Batch {
  int batch = 0;                      // sequences in the batch
  int max_len = 0;                    // T
  std::vector<std::int32_t> ids;      // [T * B], padding = 0
  std::vector<int> lengths;           // [B]
  std::vector<std::size_t> examples;  // [B] indices into the example list
  /// Examples with characters: those of cell (t, b) are char_ids[char_offsets[t*B + b] ..
  /// char_offsets[t*B + b + 1]) (none for padding cells); char_offsets has T*B + 1 entries.
  /// Both empty when the examples have no characters.
  std::vector<std::int32_t> char_ids;
  std::vector<std::int32_t> char_offsets;
  /// [B x C] row-major: the examples' ngram_scores (empty when they have none).
  std::vector<float> ngram_scores;
  std::size_t tokens() const;  // valid (non-padding) positions
  std::size_t padded() const { return static_cast<std::size_t>(batch) * static_cast<std::size_t>(max_len); }
};

/// One truncated-BPTT window of a batch: steps [start_b, end_b) of sequence b.
struct Window {
  int max_len = 0;           // longest window among the batch's sequences
  std::vector<int> start;    // [B] first step of the window in sequence b
  std::vector<int> lengths;  // [B] steps in the window (0 = sequence absent)
  bool last = false;         // the final window: every sequence's last step is in it
};

struct BatchPlanOptions {
  int batch_size = 32;
  int bucket_batches = 32;  // batches per length-sorted chunk (1 = no bucketing)
  bool shuffle = true;
};

/// An epoch's plan in storage kept from epoch to epoch (the reusing plan_batches over an
/// EncodedCorpus): once the first epoch's plan has been made, the next ones of the same corpus and
/// batch size allocate nothing for it.
struct BatchPlan {
  std::vector<std::vector<std::size_t>> batches;  // as plan_batches returns them
  std::vector<std::size_t> order;                 // scratch: the examples shuffled and bucket-sorted
};

/// Indices of the examples in each batch for one epoch. Deterministic in (seed, epoch).
std::vector<std::vector<std::size_t>> plan_batches(std::span<const EncodedExample> examples,
                                                   const BatchPlanOptions& options, std::uint64_t seed,
                                                   std::uint64_t epoch);

/// Fills batch (reusing its buffers) with the given examples; max_length > 0 truncates each
/// sequence to its first max_length tokens.
void fill_batch(std::span<const EncodedExample> examples, std::span<const std::size_t> indices, Batch& batch,
                int max_length = 0);

/// Cuts a batch into end-aligned windows of at most `window` steps (window <= 0: one window).
std::vector<Window> make_windows(const Batch& batch, int window);
/// Same into the first entries of `windows`, reusing its storage (and that of its windows'
/// vectors), and returns how many windows the batch has. The vector never shrinks: entries past
/// the count are left over from earlier batches, so that batches with fewer windows followed by
/// ones with more allocate nothing once the largest batch size and window count have been seen.
std::size_t make_windows(const Batch& batch, int window, std::vector<Window>& windows);

/// Gathers window w of batch into a compact time-major id buffer [window.max_len * B].
void window_ids(const Batch& batch, const Window& window, std::vector<std::int32_t>& ids);

}  // namespace gyre::data
