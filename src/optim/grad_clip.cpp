#include "gyre/optim/grad_clip.hpp"

#include <algorithm>
#include <cmath>
#include <vector>

#include "gyre/core/error.hpp"

namespace gyre::optim {

// Sum of squares of one float block in double (float partial sums would lose digits for the
// millions of values an embedding gradient can hold).
double sum_squares(const float* data, Eigen::Index count) {
  return Eigen::Map<const Eigen::ArrayXf>(data, count).cast<double>().square().sum();
}

double global_grad_norm(const nn::ParameterStore& params) {
  double total = 0.0;
  for (const nn::Parameter& p : params) {
    if (!p.trainable) continue;
    if (!p.sparse_rows) {
      total += sum_squares(p.grad.data(), p.grad.size());
      continue;
    }
    // touched_rows may hold duplicates here (const store): count each row once.
    const Eigen::Index cols = p.grad.cols();
    std::int32_t previous = -1;
    bool sorted = true;
    for (const std::int32_t row : p.touched_rows) {
      if (row <= previous) {
        sorted = false;
        break;
      }
      previous = row;
    }
    if (sorted) {
      for (const std::int32_t row : p.touched_rows) total += sum_squares(p.grad.data() + row * cols, cols);
    } else {
      std::vector<std::int32_t> rows(p.touched_rows);
      std::sort(rows.begin(), rows.end());
      rows.erase(std::unique(rows.begin(), rows.end()), rows.end());
      for (const std::int32_t row : rows) total += sum_squares(p.grad.data() + row * cols, cols);
    }
  }
  return std::sqrt(total);
}

ClipResult clip_grad_norm(nn::ParameterStore& params, double max_norm) {
  GYRE_CHECK(std::isfinite(max_norm) && max_norm > 0.0, "clip norm must be finite and > 0");
  for (nn::Parameter& p : params)
    if (p.trainable && p.sparse_rows) p.finalize_touched_rows();
  ClipResult result;
  result.norm = global_grad_norm(params);
  result.finite = std::isfinite(result.norm);
  if (!result.finite || result.norm <= max_norm) return result;
  // Pascanu et al. 2013, Algorithm 1: g <- (threshold / |g|) g.
  const auto scale = static_cast<float>(max_norm / result.norm);
  for (nn::Parameter& p : params) {
    if (!p.trainable) continue;
    if (!p.sparse_rows) {
      p.grad *= scale;
      continue;
    }
    for (const std::int32_t row : p.touched_rows) p.grad.row(row) *= scale;
  }
  result.clipped = true;
  return result;
}

}  // namespace gyre::optim
