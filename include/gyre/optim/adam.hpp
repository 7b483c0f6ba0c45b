#pragma once
// Adam (Kingma & Ba 2015, "Adam: a method for stochastic optimization", Algorithm 1) and AdamW
// (Loshchilov & Hutter 2019, "Decoupled weight decay regularization", Algorithm 2).
//
// At step t (1-based), with lr the learning rate passed to step():
//   Adam:  g = grad + weight_decay * w            (L2 penalty folded into the gradient)
//   AdamW: g = grad                               (decay decoupled from the moments)
//   m <- beta1 * m + (1 - beta1) * g              (Algorithm 1, line "m_t <- ...")
//   v <- beta2 * v + (1 - beta2) * g^2            (line "v_t <- ...")
//   m_hat = m / (1 - beta1^t),  v_hat = v / (1 - beta2^t)   (bias correction)
//   Adam:  w <- w - lr * m_hat / (sqrt(v_hat) + epsilon)
//   AdamW: w <- w - lr * (m_hat / (sqrt(v_hat) + epsilon) + weight_decay * w)
// The AdamW line is Algorithm 2, line 12, with eta_t * alpha = lr and the paper's lambda =
// lr * weight_decay, i.e. the decay follows the learning-rate schedule (weight_decay is relative
// to the learning rate), the usual convention when only one rate is passed.
// epsilon is added to sqrt(v_hat) exactly as in Algorithm 1 (not the "epsilon hat" variant of
// the paper's section 2).
// Sparse-row parameters: lazy update (only touched rows, their moments only), with the global
// step count t in the bias correction; see optimizer.hpp.

#include "gyre/optim/optimizer.hpp"

namespace gyre::optim {

class Adam final : public Optimizer {
 public:
  /// Uses config.beta1, beta2, epsilon, weight_decay. decoupled_weight_decay = true gives AdamW.
  /// Throws gyre::ConfigError for betas outside [0, 1), epsilon <= 0, or negative weight decay.
  Adam(const OptimizerConfig& config, bool decoupled_weight_decay);
  std::string_view name() const noexcept override { return decoupled_ ? "adamw" : "adam"; }

 protected:
  std::vector<std::string> slot_names() const override;
  void begin_step(std::int64_t step, float learning_rate) override;
  void update_block(float* value, const float* grad, float* const* slots, std::int64_t count) override;
  void update_block_checked(float* value, float* grad, float* const* slots, std::int64_t count,
                            bool zero_grad, NonFinite& seen) override;
  void update_block_fused(float* value, float* grad, const float* add, float* zero_also, float* copy_to,
                          float* const* slots, std::int64_t count, bool zero_grad, NonFinite& seen) override;

 private:
  float beta1_;
  float beta2_;
  float epsilon_;
  float weight_decay_;
  bool decoupled_;
  float learning_rate_ = 0.0F;
  float inv_bias1_ = 1.0F;  // 1 / (1 - beta1^t)
  float inv_bias2_ = 1.0F;  // 1 / (1 - beta2^t)
};

}  // namespace gyre::optim
