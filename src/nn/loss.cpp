#include "gyre/nn/loss.hpp"

#include <algorithm>
#include <cmath>
#include <string>

#include "detail/buffer.hpp"
#include "gyre/core/error.hpp"

namespace gyre::nn {

namespace {

// Shared by the sequence and token versions; valid(i) says whether row i counts.
template <typename Valid>
double cross_entropy_impl(const Eigen::Ref<const Matrix>& logits, std::span<const int> targets,
                          Eigen::Ref<Matrix> d_logits, const CrossEntropyOptions& opt, Valid valid) {
  const Eigen::Index N = logits.rows(), C = logits.cols();
  GYRE_CHECK(static_cast<Eigen::Index>(targets.size()) == N,
             "cross-entropy: one target per logits row expected");
  GYRE_CHECK(opt.class_weights.empty() || static_cast<Eigen::Index>(opt.class_weights.size()) == C,
             "cross-entropy: class_weights must have one weight per class");
  GYRE_CHECK(opt.label_smoothing >= 0.0f && opt.label_smoothing < 1.0f,
             "cross-entropy: label_smoothing must be in [0, 1)");
  GYRE_CHECK(d_logits.rows() == N && d_logits.cols() == C,
             "cross-entropy: d_logits must be shaped like logits");
  const bool weighted = !opt.class_weights.empty();
  const double eps = opt.label_smoothing;
  auto w = [&](Eigen::Index c) {
    return weighted ? static_cast<double>(opt.class_weights[static_cast<std::size_t>(c)]) : 1.0;
  };
  double sum_w = 0.0;  // sum over classes of w_c (smoothing term)
  for (Eigen::Index c = 0; c < C; ++c) sum_w += w(c);

  // loss_i = (1 - eps) w_y (-log p_y) + (eps / C) sum_c w_c (-log p_c)   (Szegedy et al. 2016 for
  // the smoothed target; weighting and the mean over sum_i w_{y_i} as torch 1.13 CrossEntropyLoss).
  double total = 0.0, norm = 0.0;
  for (Eigen::Index i = 0; i < N; ++i) {
    const int y = targets[static_cast<std::size_t>(i)];
    if (y < 0 || !valid(i)) {
      d_logits.row(i).setZero();
      continue;
    }
    GYRE_CHECK(y < C, "cross-entropy: target " + std::to_string(y) + " >= class count " + std::to_string(C));
    const auto row = logits.row(i);
    const double m = static_cast<double>(row.maxCoeff());
    double z = 0.0;
    for (Eigen::Index c = 0; c < C; ++c) z += std::exp(static_cast<double>(row(c)) - m);
    const double lse = m + std::log(z);
    double smooth = 0.0;
    for (Eigen::Index c = 0; c < C; ++c) smooth += w(c) * (lse - static_cast<double>(row(c)));
    const double wy = w(y);
    total += (1.0 - eps) * wy * (lse - static_cast<double>(row(y))) + eps / static_cast<double>(C) * smooth;
    norm += wy;
    for (Eigen::Index c = 0; c < C; ++c) {
      const double p = std::exp(static_cast<double>(row(c)) - lse);
      double g =
          (1.0 - eps) * wy * (p - (c == y ? 1.0 : 0.0)) + eps / static_cast<double>(C) * (sum_w * p - w(c));
      d_logits(i, c) = static_cast<float>(g);
    }
  }
  if (norm <= 0.0) {
    d_logits.setZero();
    return 0.0;
  }
  d_logits *= static_cast<float>(1.0 / norm);
  return total / norm;
}

}  // namespace

namespace {
void shape_like(const Matrix& logits, Matrix& d_logits) {
  if (d_logits.rows() != logits.rows() || d_logits.cols() != logits.cols())
    d_logits.resize(logits.rows(), logits.cols());
}
}  // namespace

double softmax_cross_entropy(const Matrix& logits, std::span<const int> targets, Matrix& d_logits,
                             const CrossEntropyOptions& options) {
  shape_like(logits, d_logits);
  return softmax_cross_entropy(Eigen::Ref<const Matrix>(logits), targets, Eigen::Ref<Matrix>(d_logits),
                               options);
}

double softmax_cross_entropy(Eigen::Ref<const Matrix> logits, std::span<const int> targets,
                             Eigen::Ref<Matrix> d_logits, const CrossEntropyOptions& options) {
  return cross_entropy_impl(logits, targets, d_logits, options, [](Eigen::Index) { return true; });
}

double token_cross_entropy(const Matrix& logits, std::span<const int> tags, int T,
                           std::span<const int> lengths, Matrix& d_logits,
                           const CrossEntropyOptions& options) {
  shape_like(logits, d_logits);
  return token_cross_entropy(Eigen::Ref<const Matrix>(logits), tags, T, lengths, Eigen::Ref<Matrix>(d_logits),
                             options);
}

double token_cross_entropy(Eigen::Ref<const Matrix> logits, std::span<const int> tags, int T,
                           std::span<const int> lengths, Eigen::Ref<Matrix> d_logits,
                           const CrossEntropyOptions& options) {
  const Eigen::Index B = detail::check_batch("token_cross_entropy", logits.rows(), T, lengths, 0);
  return cross_entropy_impl(logits, tags, d_logits, options,
                            [&](Eigen::Index i) { return i / B < lengths[static_cast<std::size_t>(i % B)]; });
}

double sigmoid_binary_cross_entropy(const Matrix& logits, const Matrix& targets, Matrix& d_logits) {
  shape_like(logits, d_logits);
  return sigmoid_binary_cross_entropy(Eigen::Ref<const Matrix>(logits), Eigen::Ref<const Matrix>(targets),
                                      Eigen::Ref<Matrix>(d_logits));
}

double sigmoid_binary_cross_entropy(Eigen::Ref<const Matrix> logits, Eigen::Ref<const Matrix> targets,
                                    Eigen::Ref<Matrix> d_logits) {
  GYRE_CHECK(logits.rows() == targets.rows() && logits.cols() == targets.cols(),
             "sigmoid_binary_cross_entropy: logits and targets must have the same shape");
  GYRE_CHECK(logits.size() > 0, "sigmoid_binary_cross_entropy: empty input");
  GYRE_CHECK(d_logits.rows() == logits.rows() && d_logits.cols() == logits.cols(),
             "sigmoid_binary_cross_entropy: d_logits must be shaped like logits");
  GYRE_CHECK(logits.outerStride() == logits.cols() && targets.outerStride() == targets.cols() &&
                 d_logits.outerStride() == d_logits.cols(),
             "sigmoid_binary_cross_entropy: the matrices must be contiguous");
  const double inv_n = 1.0 / static_cast<double>(logits.size());
  double total = 0.0;
  for (Eigen::Index i = 0; i < logits.size(); ++i) {
    const double x = logits.data()[i], y = targets.data()[i];
    // -[y log s(x) + (1-y) log(1-s(x))] = max(x,0) - x y + log(1 + e^{-|x|}), stable for any x.
    total += std::max(x, 0.0) - x * y + std::log1p(std::exp(-std::abs(x)));
    const double s = x >= 0.0 ? 1.0 / (1.0 + std::exp(-x)) : std::exp(x) / (1.0 + std::exp(x));
    d_logits.data()[i] = static_cast<float>((s - y) * inv_n);
  }
  return total * inv_n;
}

void softmax_rows(Eigen::Ref<const Matrix> logits, Matrix& probs) {
  if (probs.rows() != logits.rows() || probs.cols() != logits.cols())
    probs.resize(logits.rows(), logits.cols());
  for (Eigen::Index i = 0; i < logits.rows(); ++i) {
    const float m = logits.row(i).maxCoeff();
    probs.row(i) = (logits.row(i).array() - m).exp().matrix();
    probs.row(i) /= probs.row(i).sum();
  }
}

}  // namespace gyre::nn
