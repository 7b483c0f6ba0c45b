#pragma once
// Temperature scaling (Guo et al. 2017, "On Calibration of Modern Neural Networks", section 4.2):
// the calibrated distribution is softmax(z / T) for the logits z of a softmax output, and
// sigmoid(z_l / T_l) per label of a multi-label (sigmoid) output. A tagger's token distribution
// p (softmax or CRF posterior marginals) becomes softmax(log p / T), which equals softmax(z / T)
// for a softmax tagger. T > 1 softens over-confident outputs; the arg-max never changes.
// C++17, standard library only: the training library and the embedded runtime share it.

#include <cstddef>

namespace gyre::runtime {

/// Temperatures a model header may hold (docs/model-format.md); a fit is clamped to this range
/// (our choice, no source: outside it the output is practically one-hot or uniform).
inline constexpr float kMinTemperature = 1e-2f;
inline constexpr float kMaxTemperature = 1e2f;

/// out[i] = softmax(z / temperature)_i over n scores (log-sum-exp in double); out may equal z.
void tempered_softmax(const float* z, std::size_t n, float temperature, float* out);

/// sigmoid(z / temperature).
float tempered_sigmoid(float z, float temperature);

/// p <- softmax(log p / temperature), in place, for a distribution given as probabilities (zeros
/// stay zero). Used on CRF marginals.
void temper_distribution(float* p, std::size_t n, float temperature);

}  // namespace gyre::runtime
