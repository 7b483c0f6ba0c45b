#pragma once
// Dense float32 buffers used throughout the training library. Row-major so that a sequence
// buffer [T*B x F] is T contiguous [B x F] blocks, one per time step (row t*B + b is sequence b at
// time t), and a weight [rows x cols] is laid out as the model file stores it.

#include <Eigen/Core>

namespace gyre::nn {

using Matrix = Eigen::Matrix<float, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
using Vector = Eigen::Matrix<float, 1, Eigen::Dynamic, Eigen::RowMajor>;  // a row
using MatrixMap = Eigen::Map<Matrix>;
using ConstMatrixMap = Eigen::Map<const Matrix>;
using MatrixD = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

}  // namespace gyre::nn
