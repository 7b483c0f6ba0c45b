#include "gyre/optim/sgd.hpp"

#include <cmath>

#include "gyre/core/error.hpp"

namespace gyre::optim {

namespace {
using ArrayMap = Eigen::Map<Eigen::ArrayXf>;
using ConstArrayMap = Eigen::Map<const Eigen::ArrayXf>;
}  // namespace

Sgd::Sgd(const OptimizerConfig& config)
    : momentum_(config.momentum), nesterov_(config.nesterov), weight_decay_(config.weight_decay) {
  if (!(momentum_ >= 0.0F && momentum_ < 1.0F))
    throw ConfigError("momentum", "must be in [0, 1), got " + std::to_string(momentum_));
  if (!(weight_decay_ >= 0.0F && std::isfinite(weight_decay_)))
    throw ConfigError("weight_decay", "must be finite and >= 0, got " + std::to_string(weight_decay_));
  if (nesterov_ && momentum_ == 0.0F) throw ConfigError("nesterov", "needs momentum > 0");
}

std::vector<std::string> Sgd::slot_names() const {
  if (momentum_ == 0.0F) return {};
  return {"velocity"};
}

void Sgd::begin_step(std::int64_t /*step*/, float learning_rate) {
  learning_rate_ = learning_rate;
}

void Sgd::update_block(float* value, const float* grad, float* const* slots, std::int64_t count) {
  ArrayMap w(value, count);
  const ConstArrayMap g(grad, count);
  const float lr = learning_rate_;
  const float wd = weight_decay_;
  const float mu = momentum_;
  // Each expression below is coefficient-wise, so `w` on the right is the value before the step.
  if (mu == 0.0F) {
    if (wd == 0.0F)
      w -= lr * g;
    else
      w -= lr * (g + wd * w);
    return;
  }
  ArrayMap v(slots[0], count);
  if (wd == 0.0F)
    v = mu * v + g;
  else
    v = mu * v + (g + wd * w);
  if (!nesterov_) {
    w -= lr * v;
  } else if (wd == 0.0F) {
    w -= lr * (g + mu * v);
  } else {
    w -= lr * ((g + wd * w) + mu * v);
  }
}

}  // namespace gyre::optim
