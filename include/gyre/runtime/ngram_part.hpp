#pragma once
// The n-gram part of a classifier (docs/model-format.md "N-gram part"), shared by training and the
// embedded runtime so both compute the same scores. C++17, standard library only.
//
// A single-label classifier may carry, beside its recurrent network, a multinomial logistic
// regression over a bag of token n-grams. Its scores are added to the network's logits before the
// softmax (and before temperature scaling):
//     logits = network_logits + mix * (W x + b)
// the joint linear + deep form of Cheng et al. 2016 ("Wide & Deep Learning for Recommender
// Systems"); gyre fits W, b on the training split first (L-BFGS, src/eval/linear_baseline.cpp)
// and chooses `mix` on the dev split, as stacking chooses its combiner on held-out data
// (Wolpert 1992). mix = 0 means no n-gram part (the model file then has none).
//
// Features x of a token list (tokens as the word vocabulary sees them, i.e. normalized/folded):
//  - keys: every token (order 1) and, for n = 2..order, every n consecutive items of the list
//    padded with one begin marker before the first token and one end marker after the last,
//    items joined by U+0001 (the markers are the strings "\x02" and "\x03"; padding with boundary
//    symbols is common practice, e.g. character n-grams within word boundaries); a token's bytes
//    0x01..0x04 are escaped as 0x04 followed by 'A'..'D' (so a token holding a join or marker
//    byte, which the whitespace or chars tokenizer can give, cannot make two n-grams one key; keys
//    of tokens without those bytes are unchanged);
//  - value of a key present in the part's key list: 1 + ln(count of the key in the text)
//    ("sublinear tf", Manning, Raghavan & Schuetze 2008, section 6.4.1); keys absent from the list
//    are dropped; the vector is then scaled to unit L2 norm (a text with no known key: x = 0).
// Evaluated in float, features summed in increasing key index (keys are sorted bytewise), so the
// training library and the runtime give identical scores.

#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

namespace gyre::runtime {

inline constexpr char kNgramJoin = '\x01';
inline constexpr std::string_view kNgramBegin = "\x02";
inline constexpr std::string_view kNgramEnd = "\x03";
inline constexpr char kNgramEscape = '\x04';
/// Highest n-gram order a model may use (our choice: character 1-4-grams are the longest in
/// common use for short-text classification; 6 leaves room).
inline constexpr int kMaxNgramOrder = 6;

/// Why `key` cannot be an n-gram key (a marker out of place, a raw 0x02/0x03 or an unescaping 0x04
/// inside a token's part, as keys written before tokens were escaped could hold), or nullptr when
/// it can. NgramPart refuses such keys, so a file with ambiguous keys is refused, not misread.
const char* ngram_key_problem(std::string_view key) noexcept;

/// Appends the keys of `tokens` for orders 1..order (see above), in order of appearance, with
/// repeats. Throws Error when order is outside [1, kMaxNgramOrder].
void ngram_keys(const std::vector<std::string>& tokens, int order, std::vector<std::string>& out);

/// Reusable buffers of NgramPart::features / add_scores (one per thread). Once they have seen the
/// longest text and key, the calls allocate nothing.
struct NgramScratch {
  std::string key;                  // the key being looked up
  std::vector<std::string> keys;    // unused by NgramPart (kept for callers' ngram_keys)
  std::vector<std::int32_t> ids;    // ids of the known keys, with repeats
  std::vector<std::int32_t> index;  // add_scores: x's indices
  std::vector<float> values;        // add_scores: x's values
};

class NgramPart {
 public:
  NgramPart() = default;
  /// keys: sorted bytewise, unique, non-empty strings; weights: keys.size() x classes,
  /// feature-major (row f = the weights of key f); bias: classes values; mix > 0 and finite.
  /// Throws Error naming what is wrong otherwise.
  NgramPart(int order, std::vector<std::string> keys, std::vector<float> weights, std::vector<float> bias,
            float mix);
  /// The same with int8 weights kept as stored in an int8 model file (one byte per weight instead
  /// of four): weight(k, c) = float(qweights[k * classes + c]) * scales[c], feature-major like
  /// `weights` above, one finite scale per class (the file's per-row scales of its class-major
  /// ngram.w). Scores are computed from the bytes with exactly that dequantisation, so they equal
  /// those of the f32 part read from the same file (read_f32) bit for bit.
  NgramPart(int order, std::vector<std::string> keys, std::vector<std::int8_t> qweights,
            std::vector<float> scales, std::vector<float> bias, float mix);

  bool empty() const noexcept { return classes_ == 0; }
  int order() const noexcept { return order_; }
  int classes() const noexcept { return classes_; }
  std::size_t features() const noexcept { return keys_.size(); }
  float mix() const noexcept { return mix_; }
  const std::vector<std::string>& keys() const noexcept { return keys_; }
  /// f32 weights, feature-major; empty for an int8 part (quantized()): use weight(k, c).
  const std::vector<float>& weights() const noexcept { return weights_; }
  /// int8 weights (feature-major) and per-class scales; empty for an f32 part.
  bool quantized() const noexcept { return !qweights_.empty(); }
  const std::vector<std::int8_t>& qweights() const noexcept { return qweights_; }
  const std::vector<float>& scales() const noexcept { return scales_; }
  /// Weight of key k for class c (dequantised for an int8 part). k < features(), c < classes().
  float weight(std::size_t k, std::size_t c) const noexcept {
    const std::size_t i = k * static_cast<std::size_t>(classes_) + c;
    return qweights_.empty() ? weights_[i] : static_cast<float>(qweights_[i]) * scales_[c];
  }
  /// Bytes the weights take in memory (4 per weight in f32, 1 per weight + 4 per class in int8).
  std::size_t weight_bytes() const noexcept {
    return weights_.size() * sizeof(float) + qweights_.size() + scales_.size() * sizeof(float);
  }
  const std::vector<float>& bias() const noexcept { return bias_; }

  /// Index of key in keys(), or -1.
  std::int32_t find(std::string_view key) const noexcept;
  /// x of `tokens` as (index, value) pairs, indices increasing (see above). Uses scratch.keys and
  /// scratch.ids only, so index/value may be scratch.index/scratch.values.
  void features(const std::vector<std::string>& tokens, std::vector<std::int32_t>& index,
                std::vector<float>& value, NgramScratch& scratch) const;
  /// logits[c] += mix * (W x + b)[c] for c < classes(). An empty part adds nothing.
  void add_scores(const std::vector<std::string>& tokens, float* logits, NgramScratch& scratch) const;

  /// Value meaning "leave no token out" for the overloads below.
  static constexpr std::size_t kKeepAll = static_cast<std::size_t>(-1);
  /// The same over tokens[0 .. n). With skip < n, every key that contains token `skip` is left
  /// out, as if that token carried no n-grams (occlusion of one token, runtime::Context).
  void features(const std::string* tokens, std::size_t n, std::vector<std::int32_t>& index,
                std::vector<float>& value, NgramScratch& scratch, std::size_t skip = kKeepAll) const;
  void add_scores(const std::string* tokens, std::size_t n, float* logits, NgramScratch& scratch,
                  std::size_t skip = kKeepAll) const;

  /// The part's exact share of label `label`'s logit, per token of tokens[0 .. n): the part adds
  /// mix * (b[label] + sum_k W[label, k] x_k) to that logit (before the temperature), and since it is
  /// linear each key's term mix * W[label, k] * x_k is its own. Rule: the term of a key seen m
  /// times in the text is split equally among its m occurrences, and an occurrence's share equally
  /// among the tokens it covers (the begin/end markers take none; order-1 keys cover one token).
  /// shares[0 .. n) get the sums (overwritten); returns mix * b[label], the share of no token, so
  /// the shares plus the return value add up to the part's addition to the logit (up to float
  /// rounding). An empty part gives zeros. Throws Error (before writing) for a label outside
  /// 0..classes()-1.
  float token_shares(const std::string* tokens, std::size_t n, int label, float* shares,
                     NgramScratch& scratch) const;

 private:
  NgramPart(int order, std::vector<std::string> keys, std::vector<float> weights, std::vector<float> bias,
            float mix, std::vector<std::int8_t> qweights, std::vector<float> scales);

  int order_ = 0;
  int classes_ = 0;
  float mix_ = 0.0F;
  std::vector<std::string> keys_;
  std::vector<float> weights_;         // f32 part
  std::vector<std::int8_t> qweights_;  // int8 part
  std::vector<float> scales_;          // int8 part: per class
  std::vector<float> bias_;
};

}  // namespace gyre::runtime
