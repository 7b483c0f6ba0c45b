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

  /// x: [N x in] (not copied: keep it alive and unchanged until backward), y: [N x out].
  void forward(Eigen::Ref<const Matrix> x, Matrix& y);
  /// Same into a view the caller has shaped [N x out] (e.g. a MatrixBuffer's).
  void forward(Eigen::Ref<const Matrix> x, Eigen::Ref<Matrix> y);
  /// d_y: [N x out]. Adds into weight/bias grads; d_x (optional) [N x in] overwritten.
  void backward(Eigen::Ref<const Matrix> d_y, Matrix* d_x);
  /// Same with d_x a view the caller has shaped [N x in].
  void backward(Eigen::Ref<const Matrix> d_y, Eigen::Ref<Matrix> d_x);

 private:
  void backward_impl(const Eigen::Ref<const Matrix>& d_y, Eigen::Ref<Matrix>* d_x);
  Parameter& weight_;
  Parameter& bias_;
  // The input of the last forward (a view: the caller keeps it alive).
  const float* x_data_ = nullptr;
  Eigen::Index x_rows_ = 0, x_cols_ = 0, x_stride_ = 0;
};

}  // namespace gyre::nn
