#include "gyre/eval/calibration.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/runtime/calibration.hpp"

namespace gyre::eval {

namespace {

/// Value, first and second derivative of the mean NLL at beta = 1 / T.
struct Nll {
  double value = 0.0, d1 = 0.0, d2 = 0.0;
};

template <class Eval>
TemperatureFit minimise(Eval&& nll_at, std::size_t n) {
  // f(beta) is convex: f'(beta) grows, so its zero is bracketed by [lo, hi] once the signs differ.
  double lo = 1.0 / static_cast<double>(runtime::kMaxTemperature);
  double hi = 1.0 / static_cast<double>(runtime::kMinTemperature);
  TemperatureFit fit;
  fit.examples = n;
  fit.nll_before = nll_at(1.0).value;
  double beta = 1.0;
  const Nll at_lo = nll_at(lo), at_hi = nll_at(hi);
  if (at_lo.d1 >= 0.0) {
    beta = lo;  // even the softest allowed temperature is too sharp
  } else if (at_hi.d1 <= 0.0) {
    beta = hi;  // separable data: the NLL keeps falling as T -> 0
  } else {
    // Safeguarded Newton (Press et al., Numerical Recipes 3rd ed., section 9.4 "rtsafe"): a Newton
    // step when it stays inside the bracket, else bisection; the bracket shrinks every step.
    for (int it = 0; it < 200; ++it) {
      fit.iterations = it + 1;
      const Nll f = nll_at(beta);
      if (f.d1 > 0)
        hi = beta;
      else
        lo = beta;
      double next = f.d2 > 0 ? beta - f.d1 / f.d2 : 0.5 * (lo + hi);
      if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
      const double step = std::abs(next - beta);
      beta = next;
      // Tolerance: 1e-12 relative on beta (our choice: far below float resolution of the scores).
      if (step <= 1e-12 * beta || hi - lo <= 1e-12 * beta) break;
    }
  }
  fit.temperature = 1.0 / beta;
  fit.nll_after = nll_at(beta).value;
  return fit;
}

}  // namespace

TemperatureFit fit_softmax_temperature(std::span<const float> scores, std::span<const std::int32_t> gold,
                                       std::size_t num_classes) {
  const std::size_t n = gold.size(), C = num_classes;
  GYRE_CHECK(n > 0, "temperature fit: no examples");
  GYRE_CHECK(C >= 2, "temperature fit: a softmax needs at least two classes");
  GYRE_CHECK(scores.size() == n * C, "temperature fit: scores have " + std::to_string(scores.size()) +
                                         " values, expected " + std::to_string(n) + " x " +
                                         std::to_string(C));
  for (const float s : scores) GYRE_CHECK(std::isfinite(s), "temperature fit: a score is not finite");
  for (const auto g : gold)
    GYRE_CHECK(g >= 0 && static_cast<std::size_t>(g) < C, "temperature fit: gold id out of range");
  std::vector<double> p(C);
  auto nll_at = [&](double beta) {
    // f = mean(lse(beta z) - beta z_y); f' = mean(E_p[z] - z_y); f'' = mean(Var_p[z]).
    Nll r;
    for (std::size_t i = 0; i < n; ++i) {
      const float* z = scores.data() + i * C;
      double mx = -std::numeric_limits<double>::infinity();
      for (std::size_t c = 0; c < C; ++c) mx = std::max(mx, beta * z[c]);
      double sum = 0.0;
      for (std::size_t c = 0; c < C; ++c) sum += p[c] = std::exp(beta * z[c] - mx);
      double mean = 0.0, sq = 0.0;
      for (std::size_t c = 0; c < C; ++c) {
        p[c] /= sum;
        mean += p[c] * z[c];
        sq += p[c] * static_cast<double>(z[c]) * z[c];
      }
      const double zy = z[static_cast<std::size_t>(gold[i])];
      r.value += mx + std::log(sum) - beta * zy;
      r.d1 += mean - zy;
      r.d2 += std::max(0.0, sq - mean * mean);
    }
    const auto N = static_cast<double>(n);
    r.value /= N;
    r.d1 /= N;
    r.d2 /= N;
    return r;
  };
  return minimise(nll_at, n);
}

TemperatureFit fit_sigmoid_temperature(std::span<const float> logits, std::span<const std::uint8_t> gold) {
  const std::size_t n = gold.size();
  GYRE_CHECK(n > 0, "temperature fit: no examples");
  GYRE_CHECK(logits.size() == n, "temperature fit: one logit per gold value");
  for (const float s : logits) GYRE_CHECK(std::isfinite(s), "temperature fit: a logit is not finite");
  for (const auto g : gold) GYRE_CHECK(g <= 1, "temperature fit: gold values must be 0 or 1");
  auto nll_at = [&](double beta) {
    // f = mean(softplus(beta z) - y beta z); f' = mean((sigma(beta z) - y) z);
    // f'' = mean(sigma (1 - sigma) z^2).
    Nll r;
    for (std::size_t i = 0; i < n; ++i) {
      const double z = logits[i], x = beta * z;
      const double softplus = x > 0 ? x + std::log1p(std::exp(-x)) : std::log1p(std::exp(x));
      const double s = x >= 0 ? 1.0 / (1.0 + std::exp(-x)) : std::exp(x) / (1.0 + std::exp(x));
      r.value += softplus - gold[i] * x;
      r.d1 += (s - gold[i]) * z;
      r.d2 += s * (1.0 - s) * z * z;
    }
    const auto N = static_cast<double>(n);
    r.value /= N;
    r.d1 /= N;
    r.d2 /= N;
    return r;
  };
  return minimise(nll_at, n);
}

Reliability reliability(std::span<const float> confidence, std::span<const std::uint8_t> correct, int bins) {
  GYRE_CHECK(!confidence.empty(), "reliability of zero predictions");
  GYRE_CHECK(confidence.size() == correct.size(), "reliability: one correct flag per confidence");
  GYRE_CHECK(bins >= 1, "reliability needs at least one bin");
  Reliability r;
  r.predictions = confidence.size();
  r.bins.assign(static_cast<std::size_t>(bins), CalibrationBin{});
  std::vector<double> conf(r.bins.size(), 0.0);
  std::vector<std::int64_t> hits(r.bins.size(), 0);
  for (std::size_t m = 0; m < r.bins.size(); ++m) {
    r.bins[m].lower = static_cast<double>(m) / bins;
    r.bins[m].upper = static_cast<double>(m + 1) / bins;
  }
  for (std::size_t i = 0; i < confidence.size(); ++i) {
    const double c = confidence[i];
    GYRE_CHECK(c >= 0.0 && c <= 1.0, "reliability: confidence " + std::to_string(c) + " is outside [0, 1]");
    // Bin m (1-based) holds ((m-1)/M, m/M]: m = ceil(c * M), 0 goes to bin 1 (as classification.cpp).
    auto m = static_cast<long>(std::ceil(c * bins));
    m = std::clamp(m, 1L, static_cast<long>(bins));
    const auto k = static_cast<std::size_t>(m - 1);
    r.bins[k].count += 1;
    conf[k] += c;
    hits[k] += correct[i] ? 1 : 0;
  }
  const auto n = static_cast<double>(confidence.size());
  for (std::size_t k = 0; k < r.bins.size(); ++k) {
    if (r.bins[k].count == 0) continue;
    const auto cnt = static_cast<double>(r.bins[k].count);
    r.bins[k].mean_confidence = conf[k] / cnt;
    r.bins[k].accuracy = static_cast<double>(hits[k]) / cnt;
    r.error += cnt / n * std::abs(r.bins[k].accuracy - r.bins[k].mean_confidence);
  }
  return r;
}

nlohmann::json Reliability::to_json() const {
  nlohmann::json b = nlohmann::json::array();
  for (const auto& bin : bins)
    b.push_back({{"lower", bin.lower},
                 {"upper", bin.upper},
                 {"count", bin.count},
                 {"confidence", bin.mean_confidence},
                 {"accuracy", bin.accuracy}});
  return {{"error", error}, {"predictions", predictions}, {"bins", std::move(b)}};
}

std::string reliability_table(const Reliability& before, const Reliability& after) {
  std::string out;
  char line[160];
  std::snprintf(line, sizeof line, "%-13s  %28s  %28s\n", "", "before (T = 1)", "after (temperature)");
  out += line;
  std::snprintf(line, sizeof line, "%-13s  %8s %9s %9s  %8s %9s %9s\n", "confidence", "count", "mean",
                "accuracy", "count", "mean", "accuracy");
  out += line;
  for (std::size_t k = 0; k < before.bins.size() && k < after.bins.size(); ++k) {
    const auto& a = before.bins[k];
    const auto& b = after.bins[k];
    if (a.count == 0 && b.count == 0) continue;
    auto cells = [](const CalibrationBin& x, char* buf, std::size_t size) {
      if (x.count == 0)
        std::snprintf(buf, size, "%8d %9s %9s", 0, "-", "-");
      else
        std::snprintf(buf, size, "%8lld %9.4f %9.4f", static_cast<long long>(x.count), x.mean_confidence,
                      x.accuracy);
    };
    char left[48], right[48];
    cells(a, left, sizeof left);
    cells(b, right, sizeof right);
    std::snprintf(line, sizeof line, "(%.3f,%.3f]  %s  %s\n", a.lower, a.upper, left, right);
    out += line;
  }
  std::snprintf(line, sizeof line, "%-13s  %28.4f  %28.4f\n", "ECE", before.error, after.error);
  out += line;
  return out;
}

}  // namespace gyre::eval
