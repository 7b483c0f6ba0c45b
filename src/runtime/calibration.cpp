// Temperature scaling of output distributions (gyre/runtime/calibration.hpp).

#include "gyre/runtime/calibration.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace gyre::runtime {

void tempered_softmax(const float* z, std::size_t n, float temperature, float* out) {
  const double inv_t = 1.0 / static_cast<double>(temperature);
  double mx = -std::numeric_limits<double>::infinity();
  for (std::size_t i = 0; i < n; ++i) mx = std::max(mx, static_cast<double>(z[i]) * inv_t);
  double sum = 0.0;
  for (std::size_t i = 0; i < n; ++i) sum += std::exp(static_cast<double>(z[i]) * inv_t - mx);
  const double log_z = mx + std::log(sum);
  for (std::size_t i = 0; i < n; ++i)
    out[i] = static_cast<float>(std::exp(static_cast<double>(z[i]) * inv_t - log_z));
}

float tempered_sigmoid(float z, float temperature) {
  const double x = static_cast<double>(z) / static_cast<double>(temperature);
  // Two branches so that exp never overflows.
  return static_cast<float>(x >= 0 ? 1.0 / (1.0 + std::exp(-x)) : std::exp(x) / (1.0 + std::exp(x)));
}

void temper_distribution(float* p, std::size_t n, float temperature) {
  const double inv_t = 1.0 / static_cast<double>(temperature);
  double mx = -std::numeric_limits<double>::infinity();
  for (std::size_t i = 0; i < n; ++i)
    if (p[i] > 0.0f) mx = std::max(mx, std::log(static_cast<double>(p[i])) * inv_t);
  if (!std::isfinite(mx)) return;  // all zero: nothing to temper
  double sum = 0.0;
  for (std::size_t i = 0; i < n; ++i)
    if (p[i] > 0.0f) sum += std::exp(std::log(static_cast<double>(p[i])) * inv_t - mx);
  const double log_z = mx + std::log(sum);
  for (std::size_t i = 0; i < n; ++i)
    p[i] = p[i] > 0.0f ? static_cast<float>(std::exp(std::log(static_cast<double>(p[i])) * inv_t - log_z))
                       : 0.0f;
}

}  // namespace gyre::runtime
