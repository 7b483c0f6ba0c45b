#pragma once
// Affine layer y = x W^T + b with "<name>.w" [out x in], "<name>.b" [1 x out].

#include <string>

#include "gyre/core/rng.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

class Linear {
 public:
  Linear(ParameterStore& store, int input_size, int output_size, const std::string& name = "readout");
  /// Glorot uniform weight, zero bias (DEVELOPERS.md).
  void init_parameters(Rng& rng);
  int input_size() const noexcept { return static_cast<int>(weight_.value.cols()); }
  int output_size() const noexcept { return static_cast<int>(weight_.value.rows()); }

  /// x: [N x in] (not copied: keep it alive until backward), y: [N x out].
  void forward(const Matrix& x, Matrix& y);
  /// d_y: [N x out]. Adds into weight/bias grads; d_x (optional) [N x in] overwritten.
  void backward(const Matrix& d_y, Matrix* d_x);

 private:
  Parameter& weight_;
  Parameter& bias_;
  const Matrix* x_ = nullptr;
};

}  // namespace gyre::nn
