// Choosing the n-gram part's mix on dev (gyre/train/ngram_blend.hpp).
#include <catch2/catch.hpp>

#include <cmath>
#include <random>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/train/ngram_blend.hpp"

namespace {

using Catch::Matchers::WithinAbs;

// Brute force, written from the definition: mean -log softmax((a + mix b) / T)[gold], minimised
// over a fine grid of ln T in [ln 0.05, ln 20] (4001 points), in double.
double brute_tempered_loss(const std::vector<float>& a, const std::vector<float>& b, float mix,
                           const std::vector<std::int32_t>& gold, std::size_t C) {
  double best = 1e300;
  for (int k = 0; k <= 4000; ++k) {
    const double t = std::exp(std::log(0.05) + (std::log(20.0) - std::log(0.05)) * k / 4000.0);
    double nll = 0;
    for (std::size_t i = 0; i < gold.size(); ++i) {
      double m = -1e300;
      std::vector<double> z(C);
      for (std::size_t c = 0; c < C; ++c) {
        z[c] = (static_cast<double>(a[i * C + c]) + static_cast<double>(mix * b[i * C + c])) / t;
        m = std::max(m, z[c]);
      }
      double s = 0;
      for (std::size_t c = 0; c < C; ++c) s += std::exp(z[c] - m);
      nll += m + std::log(s) - z[static_cast<std::size_t>(gold[i])];
    }
    best = std::min(best, nll / static_cast<double>(gold.size()));
  }
  return best;
}

}  // namespace

TEST_CASE("n-gram mix: the grid's lowest tempered dev log-loss, checked by brute force", "[ngram]") {
  const std::uint32_t seed = 20261202;
  INFO("seed " << seed);
  std::mt19937 rng(seed);
  std::normal_distribution<float> noise(0.0F, 1.0F);
  const std::size_t n = 60, C = 3;
  std::vector<float> network(n * C), part(n * C);
  std::vector<std::int32_t> gold(n);
  for (std::size_t i = 0; i < n; ++i) {
    gold[i] = static_cast<std::int32_t>(i % C);
    for (std::size_t c = 0; c < C; ++c) {
      // Both scorers lean towards the gold label, with independent noise: a blend helps.
      const float signal = c == static_cast<std::size_t>(gold[i]) ? 1.0F : 0.0F;
      network[i * C + c] = 2.0F * signal + 1.5F * noise(rng);
      part[i * C + c] = signal + 0.8F * noise(rng);
    }
  }
  const std::vector<float> grid{0.0F, 0.5F, 1.0F, 2.0F, 4.0F};
  const gyre::train::MixChoice choice = gyre::train::choose_ngram_mix(network, part, gold, 3, grid);
  std::size_t brute_best = 0;
  std::vector<double> brute(grid.size());
  for (std::size_t k = 0; k < grid.size(); ++k) {
    brute[k] = brute_tempered_loss(network, part, grid[k], gold, C);
    // Golden section vs a 4001-point grid: equal to 1e-5 (the grid's spacing in ln T is 0.002).
    CHECK_THAT(choice.loss[k], WithinAbs(brute[k], 1e-5));
    if (brute[k] < brute[brute_best]) brute_best = k;
    // Accuracy: hand count of argmax(network + mix part).
    std::size_t right = 0;
    for (std::size_t i = 0; i < n; ++i) {
      std::size_t arg = 0;
      for (std::size_t c = 1; c < C; ++c)
        if (network[i * C + c] + grid[k] * part[i * C + c] >
            network[i * C + arg] + grid[k] * part[i * C + arg])
          arg = c;
      right += arg == static_cast<std::size_t>(gold[i]);
    }
    CHECK_THAT(choice.accuracy[k], WithinAbs(static_cast<double>(right) / n, 1e-12));
  }
  CHECK(choice.mix == grid[brute_best]);
  CHECK(choice.mix > 0.0F);  // the blend helps on this data
  CHECK_THAT(choice.network_accuracy, WithinAbs(choice.accuracy[0], 1e-12));
  CHECK_THAT(choice.blend_accuracy, WithinAbs(choice.accuracy[brute_best], 1e-12));
}

TEST_CASE("n-gram mix: a part of pure noise gets mix 0 (the network alone)", "[ngram]") {
  std::mt19937 rng(7);
  std::normal_distribution<float> noise(0.0F, 1.0F);
  const std::size_t n = 80, C = 2;
  std::vector<float> network(n * C), part(n * C);
  std::vector<std::int32_t> gold(n);
  for (std::size_t i = 0; i < n; ++i) {
    gold[i] = static_cast<std::int32_t>(i % C);
    network[i * C + static_cast<std::size_t>(gold[i])] = 3.0F;  // right, and confident
    for (std::size_t c = 0; c < C; ++c) part[i * C + c] = 5.0F * noise(rng);
  }
  const std::vector<float> grid{0.0F, 1.0F, 4.0F};
  const auto choice = gyre::train::choose_ngram_mix(network, part, gold, 2, grid);
  CHECK(choice.mix == 0.0F);
  CHECK(choice.network_accuracy == 1.0);
  CHECK(choice.part_accuracy < 0.8);
  // A full tie (a part of zeros) also keeps 0, the smallest mix.
  const std::vector<float> zeros(n * C, 0.0F);
  CHECK(gyre::train::choose_ngram_mix(network, zeros, gold, 2, grid).mix == 0.0F);
}

TEST_CASE("n-gram mix refuses bad input", "[ngram]") {
  const std::vector<float> two{0.0F, 1.0F}, grid{0.0F, 1.0F}, bad_grid{0.0F, -1.0F};
  const std::vector<std::int32_t> gold{1}, out_of_range{2}, none;
  using gyre::train::choose_ngram_mix;
  CHECK_THROWS_AS(choose_ngram_mix(two, two, out_of_range, 2, grid), gyre::Error);
  CHECK_THROWS_AS(choose_ngram_mix(two, two, none, 2, grid), gyre::Error);
  CHECK_THROWS_AS(choose_ngram_mix(two, std::vector<float>{0.0F}, gold, 2, grid), gyre::Error);
  CHECK_THROWS_AS(choose_ngram_mix(two, two, gold, 2, bad_grid), gyre::Error);
  CHECK_THROWS_AS(choose_ngram_mix(two, two, gold, 2, std::vector<float>{}), gyre::Error);
  CHECK_THROWS_AS(choose_ngram_mix(two, two, gold, 1, grid), gyre::Error);
}
