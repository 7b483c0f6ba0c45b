#include "gyre/optim/adam.hpp"

#include <cmath>

#include "gyre/core/cpu_features.hpp"
#include "gyre/core/error.hpp"
#include "optim/detail/adam_kernel.hpp"

namespace gyre::optim {

Adam::Adam(const OptimizerConfig& config, bool decoupled_weight_decay)
    : beta1_(config.beta1),
      beta2_(config.beta2),
      epsilon_(config.epsilon),
      weight_decay_(config.weight_decay),
      decoupled_(decoupled_weight_decay) {
  if (!(beta1_ >= 0.0F && beta1_ < 1.0F))
    throw ConfigError("beta1", "must be in [0, 1), got " + std::to_string(beta1_));
  if (!(beta2_ >= 0.0F && beta2_ < 1.0F))
    throw ConfigError("beta2", "must be in [0, 1), got " + std::to_string(beta2_));
  if (!(epsilon_ > 0.0F && std::isfinite(epsilon_)))
    throw ConfigError("epsilon", "must be finite and > 0, got " + std::to_string(epsilon_));
  if (!(weight_decay_ >= 0.0F && std::isfinite(weight_decay_)))
    throw ConfigError("weight_decay", "must be finite and >= 0, got " + std::to_string(weight_decay_));
}

std::vector<std::string> Adam::slot_names() const {
  return {"m", "v"};
}

void Adam::begin_step(std::int64_t step, float learning_rate) {
  learning_rate_ = learning_rate;
  // Bias corrections 1 - beta^t in double: for beta2 = 0.999 and small t the float power would
  // lose digits (1 - 0.999^1 = 0.001).
  const double t = static_cast<double>(step);
  inv_bias1_ = static_cast<float>(1.0 / (1.0 - std::pow(static_cast<double>(beta1_), t)));
  inv_bias2_ = static_cast<float>(1.0 / (1.0 - std::pow(static_cast<double>(beta2_), t)));
}

void Adam::update_block_checked(float* value, float* grad, float* const* slots, std::int64_t count,
                                bool zero_grad, NonFinite& seen) {
  if (training_kernels() == TrainingKernels::kPortable) {
    Optimizer::update_block_checked(value, grad, slots, count, zero_grad, seen);
    return;
  }
  // The vector kernel with no other replica's arrays.
  update_block_fused(value, grad, nullptr, nullptr, nullptr, slots, count, zero_grad, seen);
}

void Adam::update_block_fused(float* value, float* grad, const float* add, float* zero_also, float* copy_to,
                              float* const* slots, std::int64_t count, bool zero_grad, NonFinite& seen) {
  if (training_kernels() == TrainingKernels::kPortable) {
    Optimizer::update_block_fused(value, grad, add, zero_also, copy_to, slots, count, zero_grad, seen);
    return;
  }
  const float l2 = decoupled_ ? 0.0F : weight_decay_, decay = decoupled_ ? weight_decay_ : 0.0F;
  const unsigned bad =
      detail::adam_update({beta1_, beta2_, learning_rate_, epsilon_, l2, decay, inv_bias1_, inv_bias2_},
                          value, grad, slots[0], slots[1], count, zero_grad, {add, zero_also, copy_to});
  seen.nan |= bad & 1u;
  seen.inf |= (bad >> 1) & 1u;
}

void Adam::update_block(float* value, const float* grad, float* const* slots, std::int64_t count) {
  float* m = slots[0];
  float* v = slots[1];
  const float b1 = beta1_;
  const float b2 = beta2_;
  const float lr = learning_rate_;
  const float eps = epsilon_;
  const float l2 = decoupled_ ? 0.0F : weight_decay_;     // Adam: folded into the gradient
  const float decay = decoupled_ ? weight_decay_ : 0.0F;  // AdamW: decoupled
  const float c1 = inv_bias1_;
  const float c2 = inv_bias2_;
  if (training_kernels() != TrainingKernels::kPortable) {
    detail::adam_update({b1, b2, lr, eps, l2, decay, c1, c2}, value, const_cast<float*>(grad), m, v, count,
                        false);
    return;
  }
  // A plain loop with std::sqrt (correctly rounded) rather than Eigen's vectorised square root,
  // which uses an approximate reciprocal square root when EIGEN_FAST_MATH is on: the update then
  // does not depend on the SIMD width the library was built for.
  for (std::int64_t i = 0; i < count; ++i) {
    const float w = value[i];
    const float g = grad[i] + l2 * w;
    m[i] = b1 * m[i] + (1.0F - b1) * g;
    v[i] = b2 * v[i] + (1.0F - b2) * (g * g);
    const float m_hat = m[i] * c1;
    const float v_hat = v[i] * c2;
    value[i] = w - lr * (m_hat / (std::sqrt(v_hat) + eps) + decay * w);
  }
}

}  // namespace gyre::optim
