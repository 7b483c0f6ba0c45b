#pragma once
// Helpers shared by the nn tests: seeded random buffers and central finite-difference checks.

#include <catch2/catch.hpp>
#include <cmath>
#include <functional>
#include <string>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn::test {

inline Matrix random_matrix(Eigen::Index rows, Eigen::Index cols, Rng& rng, float scale = 1.0f) {
  Matrix m(rows, cols);
  for (Eigen::Index i = 0; i < m.size(); ++i) m.data()[i] = rng.uniform(-scale, scale);
  return m;
}

/// sum(G .* Y) in double: a fixed random linear functional of an output, so d/dY = G.
inline double dot(const Matrix& g, const Matrix& y) {
  return (g.cast<double>().array() * y.cast<double>().array()).sum();
}

struct GradCheckOptions {
  // float32 central differences: eps 1e-2 keeps the rounding noise (~1e-7 * |L| / eps) well below
  // the truncation error O(eps^2); rtol 1e-2 with a small absolute floor is common practice for
  // float32 gradient checks (no single source).
  float eps = 1e-2f;
  double rtol = 1e-2;
  double atol = 2e-4;
  int max_entries = 40;  // entries checked per tensor (evenly strided)
  // Piecewise-smooth losses (max over positions): a fingerprint of the active piece (e.g. which
  // position won each max), read after each loss evaluation. A central difference across a switch
  // of pieces measures the jump, not the derivative, so when the pieces at v - eps, v and v + eps
  // differ the step is halved (at most max_halvings times, so float32 rounding stays below the
  // tolerance); an entry whose pieces still differ sits at a kink and is reported, not counted.
  std::function<std::vector<std::int32_t>()> piece;
  int max_halvings = 3;
};

/// Compares analytic[i] with (L(v_i + eps) - L(v_i - eps)) / (2 eps) for a strided subset of the
/// entries of `value` (restored afterwards). Returns the number of entries checked.
inline int check_gradient(const std::string& what, Matrix& value, const Matrix& analytic,
                          const std::function<double()>& loss, const GradCheckOptions& opt = {}) {
  REQUIRE(analytic.rows() == value.rows());
  REQUIRE(analytic.cols() == value.cols());
  const Eigen::Index n = value.size();
  const Eigen::Index stride = std::max<Eigen::Index>(1, n / opt.max_entries);
  int checked = 0;
  for (Eigen::Index i = (n > opt.max_entries ? stride / 2 : 0); i < n; i += stride) {
    const float v = value.data()[i];
    std::vector<std::int32_t> at_v;
    if (opt.piece) {
      loss();
      at_v = opt.piece();
    }
    float eps = opt.eps;
    double lp = 0, lm = 0;
    bool smooth = true;
    for (int halvings = 0;; ++halvings, eps /= 2) {
      value.data()[i] = v + eps;
      lp = loss();
      smooth = !opt.piece || opt.piece() == at_v;
      value.data()[i] = v - eps;
      lm = loss();
      smooth = smooth && (!opt.piece || opt.piece() == at_v);
      if (smooth || halvings == opt.max_halvings) break;
    }
    value.data()[i] = v;
    if (!smooth) {
      WARN(what << " entry " << i << ": a switch of pieces within " << eps << ", not checked");
      continue;
    }
    const double numeric = (lp - lm) / (2.0 * static_cast<double>(eps));
    const double a = analytic.data()[i];
    INFO(what << " entry " << i << ": analytic " << a << ", numeric " << numeric << " (step " << eps << ")");
    CHECK(std::abs(a - numeric) <= opt.atol + opt.rtol * std::max(std::abs(a), std::abs(numeric)));
    ++checked;
  }
  return checked;
}

/// max |a - b| / (atol + rtol * |b|) <= 1 elementwise.
inline bool all_close(const Matrix& a, const Matrix& b, double rtol, double atol) {
  if (a.rows() != b.rows() || a.cols() != b.cols()) return false;
  for (Eigen::Index i = 0; i < a.size(); ++i) {
    const double x = a.data()[i], y = b.data()[i];
    if (!(std::abs(x - y) <= atol + rtol * std::abs(y))) return false;
  }
  return true;
}

}  // namespace gyre::nn::test
