#include "gyre/train/ngram_blend.hpp"

#include <cmath>
#include <string>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"

namespace gyre::train {

namespace {

// Accuracy and mean negative log-likelihood of rows z = a + mix * b (double, log-sum-exp).
void score_rows(std::span<const float> a, std::span<const float> b, float mix,
                std::span<const std::int32_t> gold, std::size_t classes, double& accuracy, double& loss) {
  const std::size_t n = gold.size();
  std::vector<double> z(classes);
  std::size_t right = 0;
  double nll = 0;
  for (std::size_t i = 0; i < n; ++i) {
    std::size_t best = 0;
    for (std::size_t c = 0; c < classes; ++c) {
      z[c] = static_cast<double>(a[i * classes + c]) + static_cast<double>(mix) * b[i * classes + c];
      if (z[c] > z[best]) best = c;  // first maximum, as the library's argmax
    }
    double sum = 0;
    for (std::size_t c = 0; c < classes; ++c) sum += std::exp(z[c] - z[best]);
    nll += z[best] + std::log(sum) - z[static_cast<std::size_t>(gold[i])];
    right += best == static_cast<std::size_t>(gold[i]);
  }
  accuracy = static_cast<double>(right) / static_cast<double>(n);
  loss = nll / static_cast<double>(n);
}

// Log-loss at the best temperature: golden-section search over ln T in [ln 0.05, ln 20] (the loss is
// smooth and, for these rows, unimodal in T; 60 steps shrink the interval far below float noise).
double tempered_loss(std::span<const float> a, std::span<const float> b, float mix,
                     std::span<const std::int32_t> gold, std::size_t classes) {
  std::vector<float> z(a.size());
  for (std::size_t i = 0; i < a.size(); ++i) z[i] = a[i] + mix * b[i];
  const std::vector<float> zeros(z.size(), 0.0F);
  auto loss_at = [&](double log_t) {
    const double inv = std::exp(-log_t);
    std::vector<float> s(z.size());
    for (std::size_t i = 0; i < z.size(); ++i) s[i] = static_cast<float>(z[i] * inv);
    double acc = 0, loss = 0;
    score_rows(s, zeros, 0.0F, gold, classes, acc, loss);
    return loss;
  };
  const double g = (std::sqrt(5.0) - 1) / 2;
  double lo = std::log(0.05), hi = std::log(20.0);
  double x1 = hi - g * (hi - lo), x2 = lo + g * (hi - lo), f1 = loss_at(x1), f2 = loss_at(x2);
  for (int it = 0; it < 60; ++it) {
    if (f1 <= f2) {
      hi = x2;
      x2 = x1;
      f2 = f1;
      x1 = hi - g * (hi - lo);
      f1 = loss_at(x1);
    } else {
      lo = x1;
      x1 = x2;
      f1 = f2;
      x2 = lo + g * (hi - lo);
      f2 = loss_at(x2);
    }
  }
  return std::min(f1, f2);
}

}  // namespace

MixChoice choose_ngram_mix(std::span<const float> network, std::span<const float> part,
                           std::span<const std::int32_t> gold, int classes, std::span<const float> grid) {
  GYRE_CHECK(classes >= 2, "n-gram mix: fewer than two classes");
  const auto C = static_cast<std::size_t>(classes);
  GYRE_CHECK(!gold.empty(), "n-gram mix: no dev examples");
  GYRE_CHECK(network.size() == gold.size() * C && part.size() == gold.size() * C,
             "n-gram mix: the score rows do not match the examples and classes");
  GYRE_CHECK(!grid.empty(), "n-gram mix: an empty grid");
  for (const float m : grid)
    GYRE_CHECK(std::isfinite(m) && m >= 0.0F, "n-gram mix: a grid value is not >= 0");
  for (const std::int32_t g : gold) GYRE_CHECK(g >= 0 && g < classes, "n-gram mix: a label is out of range");
  MixChoice out;
  std::size_t best = 0;
  for (std::size_t k = 0; k < grid.size(); ++k) {
    double acc = 0, raw_loss = 0;
    score_rows(network, part, grid[k], gold, C, acc, raw_loss);
    const double loss = tempered_loss(network, part, grid[k], gold, C);
    out.accuracy.push_back(acc);
    out.loss.push_back(loss);
    const bool better = loss < out.loss[best] || (loss == out.loss[best] && grid[k] < grid[best]);
    if (k > 0 && better) best = k;
  }
  out.mix = grid[best];
  out.blend_accuracy = out.accuracy[best];
  out.blend_loss = out.loss[best];
  const std::vector<float> zeros(network.size(), 0.0F);
  double unused = 0;
  double unused_loss = 0;
  score_rows(network, zeros, 0.0F, gold, C, out.network_accuracy, unused_loss);
  out.network_loss = tempered_loss(network, zeros, 0.0F, gold, C);
  score_rows(zeros, part, 1.0F, gold, C, out.part_accuracy, unused);
  return out;
}

nlohmann::json to_json(const MixChoice& choice, std::span<const float> grid) {
  nlohmann::json g = nlohmann::json::array();
  for (std::size_t k = 0; k < grid.size() && k < choice.accuracy.size(); ++k)
    g.push_back(
        {{"mix", grid[k]}, {"dev_accuracy", choice.accuracy[k]}, {"dev_tempered_loss", choice.loss[k]}});
  return {{"mix", choice.mix},
          {"grid", std::move(g)},
          {"dev_accuracy",
           {{"network", choice.network_accuracy},
            {"ngram_part", choice.part_accuracy},
            {"blend", choice.blend_accuracy}}}};
}

}  // namespace gyre::train
