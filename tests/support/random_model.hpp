#pragma once
// A small untrained model with random weights, for tests of the model file, export and the
// runtime: a fixed 21-token vocabulary, the spec's labels, weights from a seeded Rng (and a fixed
// character list when the spec has a character encoder: set its sizes, char_vocab_size is filled).

#include <algorithm>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/ngram_part.hpp"

namespace gyre::test {

inline text::VocabFile small_vocab(const std::vector<std::string>& labels) {
  text::VocabFile v;
  v.vocab =
      text::Vocab({"the", "kettle", "oven", "washer", "fridge", "dryer", "at",     "can", "you", "come", ".",
                   "?",   "!",      ",",    "please", "thanks", "on",    "monday", "3pm", "is",  "fine"},
                  std::vector<std::uint64_t>(21, 5));
  text::LabelCounts counts;
  for (const auto& l : labels) counts[l] = 1;
  v.labels = text::LabelSet(counts);
  return v;
}

/// Weights are 2.5x the initialisation (CRF scores uniform in [-1, 1]) so that outputs are far
/// from uniform and gates saturate in places: a stronger check than near-zero activations.
inline io::TrainedModel random_model(const model::ModelSpec& spec_in, std::uint64_t seed) {
  io::TrainedModel t;
  t.spec = spec_in;
  t.vocab = small_vocab(spec_in.labels);
  t.spec.labels = t.vocab.labels.names();
  t.spec.vocab_size = static_cast<int>(t.vocab.vocab.size());
  if (t.spec.has_char_encoder()) {
    // Lower- and upper-case letters, digits and a few signs; other clusters ("ë", emoji) are
    // unknown (id 1).
    t.vocab.characters = {"<pad>", "<unk>"};
    for (char c = 'a'; c <= 'z'; ++c) t.vocab.characters.emplace_back(1, c);
    for (char c = 'A'; c <= 'Z'; ++c) t.vocab.characters.emplace_back(1, c);
    for (char c = '0'; c <= '9'; ++c) t.vocab.characters.emplace_back(1, c);
    for (const char* s : {".", ",", "?", "!", "-"}) t.vocab.characters.emplace_back(s);
    t.spec.char_vocab_size = static_cast<int>(t.vocab.characters.size());
  }
  t.model = std::make_unique<model::SequenceModel>(t.spec);
  Rng rng(seed);
  t.model->init_parameters(rng);
  for (auto& p : t.model->params()) {
    p.value *= 2.5f;
    if (p.name.rfind("crf.", 0) == 0)
      for (Eigen::Index i = 0; i < p.value.size(); ++i) p.value.data()[i] = rng.uniform(-1.0f, 1.0f);
  }
  return t;
}

/// An n-gram part over the keys (orders 1..order) of `texts` (token lists as the vocabulary sees
/// them) plus `extra` keys, with weights uniform in [-2, 2] and biases in [-0.5, 0.5] from a seeded
/// Rng: built by hand, as training would fit it (gyre/runtime/ngram_part.hpp).
inline runtime::NgramPart random_ngram_part(const std::vector<std::vector<std::string>>& texts, int order,
                                            std::size_t classes, std::uint64_t seed, float mix,
                                            const std::vector<std::string>& extra = {}) {
  std::vector<std::string> keys = extra;
  for (const auto& t : texts) runtime::ngram_keys(t, order, keys);
  std::sort(keys.begin(), keys.end());
  keys.erase(std::unique(keys.begin(), keys.end()), keys.end());
  Rng rng(seed);
  std::vector<float> weights(keys.size() * classes), bias(classes);
  for (float& w : weights) w = rng.uniform(-2.0f, 2.0f);
  for (float& b : bias) b = rng.uniform(-0.5f, 0.5f);
  return runtime::NgramPart(order, std::move(keys), std::move(weights), std::move(bias), mix);
}

}  // namespace gyre::test
