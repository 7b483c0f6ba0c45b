#include "gyre/nn/dropout.hpp"

#include "gyre/core/error.hpp"

namespace gyre::nn {

Dropout::Dropout(float rate) : rate_(rate) {
  if (!(rate >= 0.0f && rate < 1.0f)) throw ConfigError("dropout", "must be in [0, 1)");
}

void Dropout::forward(Eigen::Ref<Matrix> x, bool training, Rng* rng) {
  active_ = training && rate_ > 0.0f;
  if (!active_) return;
  GYRE_CHECK(rng != nullptr, "Dropout::forward: training needs an Rng");
  MatrixMap mask = mask_.shape(x.rows(), x.cols());
  const float keep = 1.0f - rate_, scale = 1.0f / keep;
  for (Eigen::Index i = 0; i < mask.size(); ++i) mask.data()[i] = rng->uniform() < keep ? scale : 0.0f;
  x.array() *= mask.array();
}

void Dropout::backward(Eigen::Ref<Matrix> d) const {
  if (!active_) return;
  GYRE_CHECK(d.rows() == mask_.rows() && d.cols() == mask_.cols(),
             "Dropout::backward: shape differs from forward");
  d.array() *= mask_.view().array();
}

}  // namespace gyre::nn
