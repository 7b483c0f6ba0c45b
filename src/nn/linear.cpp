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

void Linear::forward(const Matrix& x, Matrix& y) {
  GYRE_CHECK(x.cols() == weight_.value.cols(), "Linear::forward: input has " + std::to_string(x.cols()) +
                                                   " columns, expected " +
                                                   std::to_string(weight_.value.cols()));
  x_ = &x;
  if (y.rows() != x.rows() || y.cols() != weight_.value.rows()) y.resize(x.rows(), weight_.value.rows());
  y.noalias() = x * weight_.value.transpose();
  y.rowwise() += bias_.value.row(0);
}

void Linear::backward(const Matrix& d_y, Matrix* d_x) {
  GYRE_CHECK(x_ != nullptr, "Linear::backward called before forward");
  GYRE_CHECK(d_y.rows() == x_->rows() && d_y.cols() == weight_.value.rows(),
             "Linear::backward: d_y has the wrong shape");
  weight_.grad.noalias() += d_y.transpose() * (*x_);
  bias_.grad.row(0).noalias() += d_y.colwise().sum();
  if (d_x != nullptr) {
    if (d_x->rows() != d_y.rows() || d_x->cols() != weight_.value.cols())
      d_x->resize(d_y.rows(), weight_.value.cols());
    d_x->noalias() = d_y * weight_.value;
  }
}

}  // namespace gyre::nn
