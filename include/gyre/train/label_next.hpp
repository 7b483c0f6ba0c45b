#pragma once
// Which texts to label next (active learning, one batch at a time). Each unlabelled text gets an
// uncertainty from the model's output; the batch is then chosen by one of three rules:
//   kRandom     a seeded uniform sample (the baseline every rule must beat)
//   kUncertain  the most uncertain texts first ("uncertainty sampling", Lewis & Gale 1994)
//   kDiverse    uncertainty + diversity: the kShortlistFactor x count most uncertain texts form
//               the candidate set (the low-margin candidate pool of Cluster-Margin, Citovsky et
//               al. 2021, "Batch Active Learning at Scale"), and the batch is picked from it by the
//               greedy k-center core-set rule (Sener & Savarese 2018, "Active Learning for
//               Convolutional Neural Networks: A Core-Set Approach", Algorithm 1): repeatedly the
//               candidate farthest from everything labelled or already picked, in the model's
//               pooled representation (L2-normalised, Euclidean distance).
// Near-exact duplicates are collapsed first: texts with the same token ids (after the model's
// normalisation: NFKC, case folding, tokenization) are one candidate, and within the shortlist a
// text whose token set has Jaccard similarity >= kDuplicateJaccard with a kept one joins it.

#include <cstdint>
#include <span>
#include <vector>

#include "gyre/data/batcher.hpp"
#include "gyre/train/evaluate.hpp"

namespace gyre::train {

enum class PickRule { kDiverse, kUncertain, kRandom };
enum class Uncertainty { kMargin, kEntropy };

/// "diverse" | "uncertain" | "random"; "margin" | "entropy". Parsers throw ConfigError(setting).
const char* to_string(PickRule r) noexcept;
const char* to_string(Uncertainty u) noexcept;
PickRule pick_rule_from_string(std::string_view name);
Uncertainty uncertainty_from_string(std::string_view name);

/// Shortlist size of kDiverse as a multiple of the batch (Citovsky et al. 2021 use a candidate
/// pool several times the batch; 10 is our choice, no source).
inline constexpr std::size_t kShortlistFactor = 10;
/// Token-set Jaccard similarity at which two texts count as near-exact duplicates (our choice).
inline constexpr double kDuplicateJaccard = 0.8;

/// Uncertainty of one prediction in [0, 1] (1 = least sure). Softmax: margin = 1 - (p1 - p2),
/// entropy = H(p) / log C. Sigmoid (multi-label): margin = 1 - 2 min_l |p_l - 1/2|, entropy = the
/// mean binary entropy of the labels in bits.
double uncertainty(std::span<const float> probs, bool multi_label, Uncertainty measure);

struct PickOptions {
  std::size_t count = 50;
  PickRule rule = PickRule::kDiverse;
  Uncertainty measure = Uncertainty::kMargin;
  std::uint64_t seed = 1;
  bool multi_label = false;
};

struct Pick {
  std::size_t index = 0;            // into the pool
  double uncertainty = 0.0;         // see uncertainty()
  double distance = 0.0;            // kDiverse: distance to the nearest labelled/picked text when chosen
  std::vector<std::size_t> copies;  // other pool indices collapsed into this one (duplicates)
};

/// Chooses up to options.count texts of the pool. predictions[i] belongs to pool[i] (features
/// needed for kDiverse: predict_all(..., with_features = true)); labelled_features (rows of the
/// same width, may be empty) are the representations of texts already labelled. Deterministic
/// for a given seed. Throws gyre::Error on mismatched sizes.
std::vector<Pick> pick_to_label(std::span<const data::EncodedExample> pool,
                                std::span<const ExamplePrediction> predictions,
                                std::span<const std::vector<float>> labelled_features,
                                const PickOptions& options);

}  // namespace gyre::train
