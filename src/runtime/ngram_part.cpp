#include "gyre/runtime/ngram_part.hpp"

#include <algorithm>
#include <cmath>
#include <string>
#include <utility>

#include "gyre/runtime/error.hpp"

namespace gyre::runtime {

void ngram_keys(const std::vector<std::string>& tokens, int order, std::vector<std::string>& out) {
  if (order < 1 || order > kMaxNgramOrder) {
    throw Error("n-gram order " + std::to_string(order) + " is outside 1.." + std::to_string(kMaxNgramOrder));
  }
  for (const auto& token : tokens) out.push_back(token);
  if (tokens.empty()) return;
  // Items of the padded list: -1 = begin marker, tokens.size() = end marker, else a token.
  const auto padded = static_cast<std::ptrdiff_t>(tokens.size()) + 2;
  auto item = [&](std::ptrdiff_t i) -> std::string_view {
    if (i == 0) return kNgramBegin;
    if (i == padded - 1) return kNgramEnd;
    return tokens[static_cast<std::size_t>(i - 1)];
  };
  for (int n = 2; n <= order; ++n) {
    for (std::ptrdiff_t start = 0; start + n <= padded; ++start) {
      std::string key(item(start));
      for (std::ptrdiff_t k = 1; k < n; ++k) {
        key += kNgramJoin;
        key += item(start + k);
      }
      out.push_back(std::move(key));
    }
  }
}

NgramPart::NgramPart(int order, std::vector<std::string> keys, std::vector<float> weights,
                     std::vector<float> bias, float mix)
    : order_(order), mix_(mix), keys_(std::move(keys)), weights_(std::move(weights)), bias_(std::move(bias)) {
  if (order_ < 1 || order_ > kMaxNgramOrder) {
    throw Error("n-gram part: order " + std::to_string(order_) + " is outside 1.." +
                std::to_string(kMaxNgramOrder));
  }
  if (bias_.empty()) throw Error("n-gram part: no classes");
  if (!(std::isfinite(mix_) && mix_ > 0.0F)) throw Error("n-gram part: mix must be a positive finite number");
  if (weights_.size() != keys_.size() * bias_.size()) {
    throw Error("n-gram part: " + std::to_string(weights_.size()) + " weights for " +
                std::to_string(keys_.size()) + " keys x " + std::to_string(bias_.size()) + " classes");
  }
  for (std::size_t i = 0; i < keys_.size(); ++i) {
    if (keys_[i].empty()) throw Error("n-gram part: key " + std::to_string(i) + " is empty");
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

std::int32_t NgramPart::find(std::string_view key) const noexcept {
  auto it = std::lower_bound(keys_.begin(), keys_.end(), key, [](const std::string& a, std::string_view b) {
    return std::string_view(a) < b;
  });
  if (it == keys_.end() || std::string_view(*it) != key) return -1;
  return static_cast<std::int32_t>(it - keys_.begin());
}

void NgramPart::features(const std::vector<std::string>& tokens, std::vector<std::int32_t>& index,
                         std::vector<float>& value, NgramScratch& scratch) const {
  index.clear();
  value.clear();
  if (empty()) return;
  scratch.keys.clear();
  ngram_keys(tokens, order_, scratch.keys);
  scratch.ids.clear();
  for (const auto& key : scratch.keys) {
    const std::int32_t id = find(key);
    if (id >= 0) scratch.ids.push_back(id);
  }
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
  if (empty()) return;
  features(tokens, scratch.index, scratch.values, scratch);
  const auto classes = static_cast<std::size_t>(classes_);
  for (std::size_t c = 0; c < classes; ++c) {
    float z = bias_[c];
    for (std::size_t i = 0; i < scratch.index.size(); ++i) {
      z += scratch.values[i] * weights_[static_cast<std::size_t>(scratch.index[i]) * classes + c];
    }
    logits[c] += mix_ * z;
  }
}

}  // namespace gyre::runtime
