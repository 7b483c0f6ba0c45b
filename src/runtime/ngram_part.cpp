#include "gyre/runtime/ngram_part.hpp"

#include <algorithm>
#include <cmath>
#include <string>
#include <utility>

#include "gyre/runtime/error.hpp"

namespace gyre::runtime {

namespace {

void check_order(int order) {
  if (order < 1 || order > kMaxNgramOrder) {
    throw Error("n-gram order " + std::to_string(order) + " is outside 1.." + std::to_string(kMaxNgramOrder));
  }
}

// A token's bytes in a key (see the header): 0x01..0x04 become 0x04 then 'A'..'D', so the join and
// the markers never occur inside a token's part and keys stay unambiguous.
constexpr bool is_reserved(char ch) noexcept {
  return ch >= '\x01' && ch <= kNgramEscape;
}
bool needs_escape(std::string_view token) noexcept {
  return std::any_of(token.begin(), token.end(), is_reserved);
}
void append_item(std::string& key, std::string_view token) {
  for (const char ch : token) {
    if (is_reserved(ch)) {
      key += kNgramEscape;
      key += static_cast<char>('A' + (ch - '\x01'));
    } else {
      key += ch;
    }
  }
}

// Calls f(key, first, last) for every key of tokens[0..n) for orders 1..order (see the header), in
// order of appearance, with repeats, building each key in `key` (reused: no allocation once it has
// held the longest key); tokens first..last (inclusive, markers not counted) are those the key
// covers. Keys that contain token `skip` are left out.
template <class F>
void for_each_key(const std::string* tokens, std::size_t n, int order, std::size_t skip, std::string& key,
                  F&& f) {
  for (std::size_t i = 0; i < n; ++i) {
    if (i == skip) continue;
    if (!needs_escape(tokens[i])) {
      f(std::string_view(tokens[i]), i, i);
    } else {
      key.clear();
      append_item(key, tokens[i]);
      f(std::string_view(key), i, i);
    }
  }
  if (n == 0) return;
  // Items of the padded list: 0 = begin marker, n + 1 = end marker, i = token i - 1.
  const std::size_t padded = n + 2;
  auto add_item = [&](std::size_t i) {
    if (i == 0)
      key += kNgramBegin;
    else if (i == padded - 1)
      key += kNgramEnd;
    else
      append_item(key, tokens[i - 1]);
  };
  for (std::size_t len = 2; len <= static_cast<std::size_t>(order); ++len) {
    for (std::size_t start = 0; start + len <= padded; ++start) {
      // Padded items start .. start+len-1 hold token skip (item skip + 1)?
      if (skip < n && start <= skip + 1 && skip + 1 < start + len) continue;
      key.clear();
      add_item(start);
      for (std::size_t k = 1; k < len; ++k) {
        key += kNgramJoin;
        add_item(start + k);
      }
      // Padded items start..start+len-1 are tokens start-1..start+len-2, clipped to 0..n-1.
      const std::size_t first = start == 0 ? 0 : start - 1;
      const std::size_t last = std::min(start + len - 2, n - 1);
      f(std::string_view(key), first, last);
    }
  }
}

}  // namespace

const char* ngram_key_problem(std::string_view key) noexcept {
  // Items separated by the join: the begin marker only first, the end marker only last (and neither
  // alone), every other item a token's escaped bytes (no raw 0x02/0x03, 0x04 only before 'A'..'D').
  std::size_t items = 0;
  for (std::size_t pos = 0;; ++items) {
    const std::size_t end = std::min(key.find(kNgramJoin, pos), key.size());
    const std::string_view item = key.substr(pos, end - pos);
    const bool last = end == key.size();
    if (item == kNgramBegin) {
      if (items != 0 || last) return "has the begin marker out of place";
    } else if (item == kNgramEnd) {
      if (!last || items == 0) return "has the end marker out of place";
    } else {
      for (std::size_t k = 0; k < item.size(); ++k) {
        const char ch = item[k];
        if (ch == '\x02' || ch == '\x03')
          return "holds a raw control byte 0x02/0x03 inside a token (keys written before gyre escaped "
                 "bytes 0x01-0x04 in tokens were ambiguous; retrain the model)";
        if (ch == kNgramEscape) {
          if (k + 1 >= item.size() || item[k + 1] < 'A' || item[k + 1] > 'D')
            return "holds byte 0x04 that escapes nothing (keys written before gyre escaped bytes "
                   "0x01-0x04 in tokens were ambiguous; retrain the model)";
          ++k;
        }
      }
    }
    if (last) return nullptr;
    pos = end + 1;
  }
}

void ngram_keys(const std::vector<std::string>& tokens, int order, std::vector<std::string>& out) {
  check_order(order);
  std::string key;
  for_each_key(tokens.data(), tokens.size(), order, NgramPart::kKeepAll, key,
               [&](std::string_view k, std::size_t, std::size_t) { out.emplace_back(k); });
}

NgramPart::NgramPart(int order, std::vector<std::string> keys, std::vector<float> weights,
                     std::vector<float> bias, float mix)
    : NgramPart(order, std::move(keys), std::move(weights), std::move(bias), mix, {}, {}) {}

NgramPart::NgramPart(int order, std::vector<std::string> keys, std::vector<float> weights,
                     std::vector<float> bias, float mix, std::vector<std::int8_t> qweights,
                     std::vector<float> scales)
    : order_(order),
      mix_(mix),
      keys_(std::move(keys)),
      weights_(std::move(weights)),
      qweights_(std::move(qweights)),
      scales_(std::move(scales)),
      bias_(std::move(bias)) {
  const bool int8 = !qweights_.empty() || !scales_.empty();
  if (order_ < 1 || order_ > kMaxNgramOrder) {
    throw Error("n-gram part: order " + std::to_string(order_) + " is outside 1.." +
                std::to_string(kMaxNgramOrder));
  }
  if (bias_.empty()) throw Error("n-gram part: no classes");
  if (!(std::isfinite(mix_) && mix_ > 0.0F)) throw Error("n-gram part: mix must be a positive finite number");
  const std::size_t stored = int8 ? qweights_.size() : weights_.size();
  if (stored != keys_.size() * bias_.size() || (int8 && !weights_.empty())) {
    throw Error("n-gram part: " + std::to_string(stored) + " weights for " + std::to_string(keys_.size()) +
                " keys x " + std::to_string(bias_.size()) + " classes");
  }
  if (int8 && scales_.size() != bias_.size())
    throw Error("n-gram part: " + std::to_string(scales_.size()) + " int8 scales for " +
                std::to_string(bias_.size()) + " classes");
  for (float sc : scales_) {
    if (!std::isfinite(sc)) throw Error("n-gram part: an int8 scale is not finite");
  }
  if (int8 && keys_.empty()) throw Error("n-gram part: an int8 part needs keys");
  for (std::size_t i = 0; i < keys_.size(); ++i) {
    if (keys_[i].empty()) throw Error("n-gram part: key " + std::to_string(i) + " is empty");
    if (const char* why = ngram_key_problem(keys_[i]))
      throw Error("n-gram part: key " + std::to_string(i) + " " + why);
    if (i > 0 && !(keys_[i - 1] < keys_[i])) {
      throw Error("n-gram part: keys are not sorted and unique at key " + std::to_string(i));
    }
  }
  for (float w : weights_) {
    if (!std::isfinite(w)) throw Error("n-gram part: a weight is not finite");
  }
  for (float b : bias_) {
    if (!std::isfinite(b)) throw Error("n-gram part: a bias is not finite");
  }
  classes_ = static_cast<int>(bias_.size());
}

NgramPart::NgramPart(int order, std::vector<std::string> keys, std::vector<std::int8_t> qweights,
                     std::vector<float> scales, std::vector<float> bias, float mix)
    : NgramPart(order, std::move(keys), std::vector<float>(), std::move(bias), mix, std::move(qweights),
                std::move(scales)) {}

std::int32_t NgramPart::find(std::string_view key) const noexcept {
  auto it = std::lower_bound(keys_.begin(), keys_.end(), key, [](const std::string& a, std::string_view b) {
    return std::string_view(a) < b;
  });
  if (it == keys_.end() || std::string_view(*it) != key) return -1;
  return static_cast<std::int32_t>(it - keys_.begin());
}

void NgramPart::features(const std::vector<std::string>& tokens, std::vector<std::int32_t>& index,
                         std::vector<float>& value, NgramScratch& scratch) const {
  features(tokens.data(), tokens.size(), index, value, scratch);
}

void NgramPart::features(const std::string* tokens, std::size_t n, std::vector<std::int32_t>& index,
                         std::vector<float>& value, NgramScratch& scratch, std::size_t skip) const {
  index.clear();
  value.clear();
  if (empty()) return;
  scratch.ids.clear();
  for_each_key(tokens, n, order_, skip, scratch.key, [&](std::string_view key, std::size_t, std::size_t) {
    const std::int32_t id = find(key);
    if (id >= 0) scratch.ids.push_back(id);
  });
  std::sort(scratch.ids.begin(), scratch.ids.end());
  float norm2 = 0.0F;
  for (std::size_t i = 0; i < scratch.ids.size();) {
    std::size_t j = i;
    while (j < scratch.ids.size() && scratch.ids[j] == scratch.ids[i]) ++j;
    const float v = 1.0F + std::log(static_cast<float>(j - i));
    index.push_back(scratch.ids[i]);
    value.push_back(v);
    norm2 += v * v;
    i = j;
  }
  if (norm2 > 0.0F) {
    const float inv = 1.0F / std::sqrt(norm2);
    for (float& v : value) v *= inv;
  }
}

void NgramPart::add_scores(const std::vector<std::string>& tokens, float* logits,
                           NgramScratch& scratch) const {
  add_scores(tokens.data(), tokens.size(), logits, scratch);
}

void NgramPart::add_scores(const std::string* tokens, std::size_t n, float* logits, NgramScratch& scratch,
                           std::size_t skip) const {
  if (empty()) return;
  features(tokens, n, scratch.index, scratch.values, scratch, skip);
  const auto classes = static_cast<std::size_t>(classes_);
  for (std::size_t c = 0; c < classes; ++c) {
    float z = bias_[c];
    if (qweights_.empty()) {
      for (std::size_t i = 0; i < scratch.index.size(); ++i)
        z += scratch.values[i] * weights_[static_cast<std::size_t>(scratch.index[i]) * classes + c];
    } else {
      // The same floats as the f32 part read from this file: each weight dequantised as read_f32
      // does (float(q) * scale), then the same sum in the same order.
      const float scale = scales_[c];
      for (std::size_t i = 0; i < scratch.index.size(); ++i)
        z +=
            scratch.values[i] *
            (static_cast<float>(qweights_[static_cast<std::size_t>(scratch.index[i]) * classes + c]) * scale);
    }
    logits[c] += mix_ * z;
  }
}

float NgramPart::token_shares(const std::string* tokens, std::size_t n, int label, float* shares,
                              NgramScratch& scratch) const {
  if (!empty() && (label < 0 || label >= classes_))
    throw Error("n-gram part: label " + std::to_string(label) + " is outside 0.." +
                std::to_string(classes_ - 1));
  for (std::size_t i = 0; i < n; ++i) shares[i] = 0.0F;
  if (empty()) return 0.0F;
  features(tokens, n, scratch.index, scratch.values, scratch);  // x, and scratch.ids = known keys, sorted
  const auto c = static_cast<std::size_t>(label);
  // Every occurrence of key k takes 1/count of mix * W[c, k] * x_k and splits it equally among the
  // tokens it covers (begin/end markers take no share).
  for_each_key(tokens, n, order_, kKeepAll, scratch.key,
               [&](std::string_view key, std::size_t first, std::size_t last) {
                 const std::int32_t id = find(key);
                 if (id < 0) return;
                 const auto at = std::lower_bound(scratch.index.begin(), scratch.index.end(), id);
                 const auto occurrences = std::upper_bound(scratch.ids.begin(), scratch.ids.end(), id) -
                                          std::lower_bound(scratch.ids.begin(), scratch.ids.end(), id);
                 const float x = scratch.values[static_cast<std::size_t>(at - scratch.index.begin())];
                 const float part = mix_ * weight(static_cast<std::size_t>(id), c) * x /
                                    static_cast<float>(occurrences) / static_cast<float>(last - first + 1);
                 for (std::size_t t = first; t <= last; ++t) shares[t] += part;
               });
  return mix_ * bias_[c];
}

}  // namespace gyre::runtime
