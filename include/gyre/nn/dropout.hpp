#pragma once
// Inverted dropout (Srivastava et al. 2014, with the 1/(1-p) scaling at training time so that
// inference is the identity). Used on embeddings; RnnStack has its own between layers.

#include "gyre/core/rng.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

class Dropout {
 public:
  explicit Dropout(float rate = 0.0f);  // rate in [0, 1); throws gyre::ConfigError otherwise
  float rate() const noexcept { return rate_; }

  /// In place. When !training or rate == 0 this is the identity (and backward too).
  void forward(Eigen::Ref<Matrix> x, bool training, Rng* rng);
  /// In place: d *= mask of the last forward.
  void backward(Eigen::Ref<Matrix> d) const;

 private:
  float rate_;
  bool active_ = false;
  MatrixBuffer mask_;  // 0 or 1/(1-p), grown to the largest batch
};

}  // namespace gyre::nn
