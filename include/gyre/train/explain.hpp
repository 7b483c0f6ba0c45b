#pragma once
// Why this label: per-token attributions of a classifier's chosen label. A checkpoint (the
// training library) uses integrated gradients on the embeddings (Sundararajan et al. 2017; see
// model::SequenceModel::integrated_gradients) and reports the completeness check; an exported file
// (the embedded runtime, which has no backward pass) uses occlusion (runtime::Context::occlusion).
// Both measure a token against the same baseline: the zero embedding of the padding id.

#include <cstdint>
#include <span>
#include <string>

#include <nlohmann/json.hpp>

#include "gyre/data/batcher.hpp"
#include "gyre/io/model_io.hpp"

namespace gyre::train {

/// Trapezoid steps of integrated gradients: Sundararajan et al. 2017 (section 5) find 20 to 300
/// enough; at 64 the completeness gap on gyre's models is well under 1e-3 (tests/train/
/// test_attribution.cpp).
inline constexpr int kAttributionSteps = 64;

/// {"method": "integrated_gradients" | "occlusion", "label": name of `target`,
///  "tokens": [{"token": t, "score": s}, ...] (one per token, in order; a score is the change of
///  the label's probability the token accounts for), and for integrated gradients
///  "completeness": {"output", "baseline", "sum", "gap", "steps"}: sum of scores vs output -
///  baseline}. A model with an n-gram part adds the part's share beside the network's: each token's
///  "ngram_part" (its exact share of the label's logit, runtime::NgramPart::token_shares) and
///  "ngram_part": {"unit": "logit", "mix", "bias" (mix * b, no token's), "sum" (of the tokens'
///  shares), "logit" (bias + sum: the part's addition to the label's logit, before the
///  temperature)}; "score" stays the network's share (integrated gradients hold the part's scores
///  fixed; occlusion also drops the token's n-grams, see runtime::Context::occlusion).
///  tokens are the (normalised) tokens of the example's ids, one each (for a model with a part,
///  the words it reads); the example
///  carries the characters too for a model with a character encoder (data::Encoder::encode_text
///  fills them). Classifiers only: throws gyre::Error for a tagger.
nlohmann::json explain(const io::TrainedModel& trained, const data::EncodedExample& example,
                       std::span<const std::string> tokens, int target, int steps = kAttributionSteps);

/// "kettle(+0.41) broken(+0.12) not(-0.08)": the `count` tokens with the largest |field| ("score":
/// the network's share; "ngram_part": the n-gram part's, when there is one).
std::string explain_summary(const nlohmann::json& why, std::size_t count = 4,
                            const std::string& field = "score");

}  // namespace gyre::train
