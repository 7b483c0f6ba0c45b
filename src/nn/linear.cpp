#include "gyre/nn/linear.hpp"

#include <string>

#include "gyre/core/error.hpp"
#include "gyre/nn/init.hpp"

namespace gyre::nn {

Linear::Linear(ParameterStore& store, int input_size, int output_size, const std::string& name)
    : weight_(store.add(name + ".w", output_size, input_size)),
      bias_(store.add(name + ".b", 1, output_size)) {}

void Linear::init_parameters(Rng& rng) {
  glorot_uniform(weight_.value, rng);
  bias_.value.setZero();
}

void Linear::forward(Eigen::Ref<const Matrix> x, Matrix& y) {
  if (y.rows() != x.rows() || y.cols() != weight_.value.rows()) y.resize(x.rows(), weight_.value.rows());
  forward(x, Eigen::Ref<Matrix>(y));
}

void Linear::forward(Eigen::Ref<const Matrix> x, Eigen::Ref<Matrix> y) {
  GYRE_CHECK(x.cols() == weight_.value.cols(), "Linear::forward: input has " + std::to_string(x.cols()) +
                                                   " columns, expected " +
                                                   std::to_string(weight_.value.cols()));
  GYRE_CHECK(y.rows() == x.rows() && y.cols() == weight_.value.rows(),
             "Linear::forward: output must be [N x out]");
  x_data_ = x.data();
  x_rows_ = x.rows();
  x_cols_ = x.cols();
  x_stride_ = x.outerStride();
  y.noalias() = x * weight_.value.transpose();
  y.rowwise() += bias_.value.row(0);
}

void Linear::backward(Eigen::Ref<const Matrix> d_y, Matrix* d_x) {
  if (d_x == nullptr) {
    backward_impl(d_y, nullptr);
    return;
  }
  if (d_x->rows() != d_y.rows() || d_x->cols() != weight_.value.cols())
    d_x->resize(d_y.rows(), weight_.value.cols());
  Eigen::Ref<Matrix> view(*d_x);
  backward_impl(d_y, &view);
}

void Linear::backward(Eigen::Ref<const Matrix> d_y, Eigen::Ref<Matrix> d_x) {
  GYRE_CHECK(d_x.rows() == d_y.rows() && d_x.cols() == weight_.value.cols(),
             "Linear::backward: d_x must be [N x in]");
  backward_impl(d_y, &d_x);
}

void Linear::backward_impl(const Eigen::Ref<const Matrix>& d_y, Eigen::Ref<Matrix>* d_x) {
  GYRE_CHECK(x_data_ != nullptr, "Linear::backward called before forward");
  GYRE_CHECK(d_y.rows() == x_rows_ && d_y.cols() == weight_.value.rows(),
             "Linear::backward: d_y has the wrong shape");
  const Eigen::Map<const Matrix, 0, Eigen::OuterStride<>> x(x_data_, x_rows_, x_cols_,
                                                            Eigen::OuterStride<>(x_stride_));
  weight_.grad.noalias() += d_y.transpose() * x;
  bias_.grad.row(0).noalias() += d_y.colwise().sum();
  if (d_x != nullptr) d_x->noalias() = d_y * weight_.value;
}

}  // namespace gyre::nn
