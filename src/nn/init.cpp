#include "gyre/nn/init.hpp"

#include <Eigen/QR>
#include <cmath>

#include "gyre/core/error.hpp"

namespace gyre::nn {

void glorot_uniform(Matrix& w, Rng& rng, int fan_in, int fan_out, float gain) {
  GYRE_CHECK(fan_in > 0 && fan_out > 0, "glorot_uniform: fans must be positive");
  // Glorot & Bengio 2010, eq. 16: W ~ U[-sqrt(6)/sqrt(n_j + n_{j+1}), +sqrt(6)/sqrt(n_j + n_{j+1})].
  const float a = gain * std::sqrt(6.0f / static_cast<float>(fan_in + fan_out));
  for (Eigen::Index i = 0; i < w.rows(); ++i)
    for (Eigen::Index j = 0; j < w.cols(); ++j) w(i, j) = rng.uniform(-a, a);
}

void glorot_uniform(Matrix& w, Rng& rng, float gain) {
  glorot_uniform(w, rng, static_cast<int>(w.cols()), static_cast<int>(w.rows()), gain);
}

namespace {

// Orthonormal columns for a tall (rows >= cols) block.
Eigen::MatrixXd orthogonal_tall(Eigen::Index rows, Eigen::Index cols, Rng& rng) {
  Eigen::MatrixXd a(rows, cols);
  for (Eigen::Index j = 0; j < cols; ++j)
    for (Eigen::Index i = 0; i < rows; ++i) a(i, j) = static_cast<double>(rng.normal());
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(a);
  Eigen::MatrixXd q = qr.householderQ() * Eigen::MatrixXd::Identity(rows, cols);
  const Eigen::MatrixXd& r = qr.matrixQR();  // R is its upper triangle
  // Mezzadri 2007, "How to generate random matrices from the classical compact groups", sec. 5:
  // multiplying column j by sign(R_jj) makes Q Haar-distributed (QR alone is not unique).
  for (Eigen::Index j = 0; j < cols; ++j)
    if (r(j, j) < 0.0) q.col(j) *= -1.0;
  return q;
}

void orthogonal_into(Eigen::Ref<Matrix> w, Rng& rng, float gain) {
  const Eigen::Index rows = w.rows(), cols = w.cols();
  if (rows >= cols) {
    w = (orthogonal_tall(rows, cols, rng) * static_cast<double>(gain)).cast<float>();
  } else {
    w = (orthogonal_tall(cols, rows, rng).transpose() * static_cast<double>(gain)).cast<float>();
  }
}

}  // namespace

void orthogonal(Matrix& w, Rng& rng, float gain) {
  GYRE_CHECK(w.size() > 0, "orthogonal: empty matrix");
  orthogonal_into(w, rng, gain);
}

void orthogonal_blocks(Matrix& w, int blocks, Rng& rng, float gain) {
  GYRE_CHECK(blocks > 0 && w.rows() % blocks == 0, "orthogonal_blocks: rows must split into equal blocks");
  const Eigen::Index n = w.rows() / blocks;
  for (int k = 0; k < blocks; ++k) orthogonal_into(w.middleRows(k * n, n), rng, gain);
}

void normal(Matrix& w, Rng& rng, float stddev) {
  for (Eigen::Index i = 0; i < w.rows(); ++i)
    for (Eigen::Index j = 0; j < w.cols(); ++j) w(i, j) = rng.normal() * stddev;
}

}  // namespace gyre::nn
