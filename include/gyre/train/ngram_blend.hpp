#pragma once
// Choosing the weight ("mix") of a classifier's n-gram part (gyre/runtime/ngram_part.hpp) on dev:
// the blended logits are network_logits + mix * (W x + b) (Cheng et al. 2016, "Wide & Deep
// Learning for Recommender Systems"), and mix is picked on held-out data as stacking picks its
// combiner (Wolpert 1992, "Stacked Generalization"). The temperature is fitted afterwards on the
// blended logits (train/calibrate.hpp).

#include <cstdint>
#include <span>
#include <vector>

#include <nlohmann/json_fwd.hpp>

namespace gyre::train {

/// The mixes tried (0 = no part), on the network's raw logits. Chosen from measurements on names
/// and brown-genre, 3 seeds each (README "N-gram part"): on calibrated log-probabilities the picks
/// lay in [1.5, 4], i.e. up to about 4 x the network's temperature on raw logits, hence up to 16.
inline constexpr float kNgramMixGrid[] = {0.0F, 0.25F, 0.5F, 1.0F, 1.5F,  2.0F,
                                          3.0F, 4.0F,  6.0F, 8.0F, 12.0F, 16.0F};

struct MixChoice {
  float mix = 0.0F;                    // the chosen mix (0: no part)
  double network_accuracy = 0;         // dev accuracy of the network alone (mix 0)
  double part_accuracy = 0;            // dev accuracy of the n-gram part alone
  double blend_accuracy = 0;           // dev accuracy at the chosen mix
  double network_loss = 0;             // dev log-loss (mean negative log-likelihood, nats) at mix 0
  double blend_loss = 0;               // the same at the chosen mix
  std::vector<double> accuracy, loss;  // per grid entry
};

/// Picks the mix with the lowest dev log-loss of the blend network + mix * part at its best
/// temperature (the temperature is fitted after the mix, so the raw scale must not decide; on the
/// measurements this gave test accuracy at or above picking by dev accuracy); ties go to the
/// smaller mix. loss[k] is that tempered log-loss.
/// network: [N x C] logits (or log-probabilities: a constant per row changes nothing); part:
/// [N x C] W x + b; gold: N label ids. Throws gyre::Error on mismatched sizes, an empty set, a
/// label out of range or a grid value that is negative or not finite.
MixChoice choose_ngram_mix(std::span<const float> network, std::span<const float> part,
                           std::span<const std::int32_t> gold, int classes, std::span<const float> grid);

/// {"mix", "grid": [{"mix", "dev_accuracy", "dev_loss"}...], "dev": {"network", "ngram_part",
/// "blend"} accuracies} for metrics.json.
nlohmann::json to_json(const MixChoice& choice, std::span<const float> grid);

}  // namespace gyre::train
