#pragma once
// Stochastic gradient descent with optional momentum and Nesterov momentum.
//
// With g = grad + weight_decay * w (L2 penalty weight_decay/2 * |w|^2 folded into the gradient):
//   momentum == 0:  w <- w - lr * g
//   momentum mu:    v <- mu * v + g
//                   w <- w - lr * v                  (classical momentum)
//                   w <- w - lr * (g + mu * v)       (Nesterov)
// This is the velocity-accumulates-gradients form. With a constant rate it is the classical
// momentum of Sutskever et al. 2013 (eq. 1-2) with v scaled by -lr, and the Nesterov line is the
// reformulation of their eq. 3-4 given by Bengio et al. 2013 ("Advances in optimizing recurrent
// networks", eq. 7), in which the parameters are stored at the look-ahead point.
// Sparse-row parameters: lazy update, see optimizer.hpp.

#include "gyre/optim/optimizer.hpp"

namespace gyre::optim {

class Sgd final : public Optimizer {
 public:
  /// Uses config.momentum, config.nesterov, config.weight_decay. Throws gyre::ConfigError for
  /// momentum outside [0, 1), negative or non-finite weight decay, or Nesterov without momentum.
  explicit Sgd(const OptimizerConfig& config);
  std::string_view name() const noexcept override { return "sgd"; }

 protected:
  std::vector<std::string> slot_names() const override;
  void begin_step(std::int64_t step, float learning_rate) override;
  void update_block(float* value, const float* grad, float* const* slots, std::int64_t count) override;

 private:
  float momentum_;
  bool nesterov_;
  float weight_decay_;
  float learning_rate_ = 0.0F;
};

}  // namespace gyre::optim
