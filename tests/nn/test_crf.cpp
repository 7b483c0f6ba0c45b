#include <catch2/catch.hpp>

#include <cmath>
#include <cstdint>
#include <limits>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/nn/crf.hpp"

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using gyre::nn::Crf;
using gyre::nn::Matrix;
using gyre::nn::MatrixD;
using gyre::nn::ParameterStore;

namespace {

void randomize(ParameterStore& store, gyre::Rng& rng) {
  for (auto& p : store)
    for (Eigen::Index i = 0; i < p.value.size(); ++i) p.value.data()[i] = rng.normal();
}

Matrix random_matrix(Eigen::Index rows, Eigen::Index cols, gyre::Rng& rng, float scale = 1.0f) {
  Matrix m(rows, cols);
  for (Eigen::Index i = 0; i < m.size(); ++i) m.data()[i] = scale * rng.normal();
  return m;
}

// Reference: the score of a path written straight from the definition (Lafferty et al. 2001,
// linear-chain form with start/end scores), for one sequence stored as [len x T].
double direct_score(const ParameterStore& store, const Matrix& e, const std::vector<int>& y) {
  const Matrix& tr = store.at("crf.transitions").value;
  double s = static_cast<double>(store.at("crf.start").value(0, y.front())) +
             static_cast<double>(store.at("crf.end").value(0, y.back()));
  for (std::size_t t = 0; t < y.size(); ++t) {
    s += static_cast<double>(e(static_cast<Eigen::Index>(t), y[t]));
    if (t > 0) s += static_cast<double>(tr(y[t - 1], y[t]));
  }
  return s;
}

struct Allowed {
  std::vector<std::uint8_t> trans, start, end;
  bool ok(const std::vector<int>& y, std::size_t n) const {
    if (trans.empty()) return true;
    if (!start[static_cast<std::size_t>(y.front())] || !end[static_cast<std::size_t>(y.back())]) return false;
    for (std::size_t t = 1; t < y.size(); ++t)
      if (!trans[static_cast<std::size_t>(y[t - 1]) * n + static_cast<std::size_t>(y[t])]) return false;
    return true;
  }
};

// Brute force over all T^len paths: log Z, best path and its score, marginals p(y_t = j).
struct Enumerated {
  double log_z = -std::numeric_limits<double>::infinity();
  double best = -std::numeric_limits<double>::infinity();
  std::vector<int> best_path;
  Matrix marg;
  MatrixD pair;  // expected transition counts sum_t p(y_t = i, y_{t+1} = j)
};

Enumerated enumerate(const ParameterStore& store, const Matrix& e, std::size_t n,
                     const Allowed& allowed = {}) {
  const auto len = static_cast<std::size_t>(e.rows());
  Enumerated r;
  std::vector<double> scores;
  std::vector<std::vector<int>> paths;
  std::vector<int> y(len, 0);
  while (true) {
    if (allowed.ok(y, n)) {
      const double s = direct_score(store, e, y);
      scores.push_back(s);
      paths.push_back(y);
      if (s > r.best) {
        r.best = s;
        r.best_path = y;
      }
    }
    std::size_t k = 0;
    while (k < len && ++y[k] == static_cast<int>(n)) y[k++] = 0;
    if (k == len) break;
  }
  double m = r.best, sum = 0.0;
  for (double s : scores) sum += std::exp(s - m);
  r.log_z = m + std::log(sum);
  r.marg = Matrix::Zero(static_cast<Eigen::Index>(len), static_cast<Eigen::Index>(n));
  r.pair = MatrixD::Zero(static_cast<Eigen::Index>(n), static_cast<Eigen::Index>(n));
  for (std::size_t p = 0; p < paths.size(); ++p) {
    const double prob = std::exp(scores[p] - r.log_z);
    for (std::size_t t = 0; t < len; ++t) {
      r.marg(static_cast<Eigen::Index>(t), paths[p][t]) += static_cast<float>(prob);
      if (t > 0) r.pair(paths[p][t - 1], paths[p][t]) += prob;
    }
  }
  return r;
}

}  // namespace

TEST_CASE("CRF registers its tensors under the documented names", "[nn][crf]") {
  ParameterStore store;
  Crf crf(store, 5);
  REQUIRE(crf.num_tags() == 5);
  REQUIRE(store.at("crf.transitions").value.rows() == 5);
  REQUIRE(store.at("crf.transitions").value.cols() == 5);
  REQUIRE(store.at("crf.start").value.rows() == 1);
  REQUIRE(store.at("crf.start").value.cols() == 5);
  REQUIRE(store.at("crf.end").value.cols() == 5);
  REQUIRE_THROWS_AS(Crf(store, 5), gyre::Error);  // names taken
}

// ref: brute-force enumeration of all 3^len tag paths (direct_score above), in double.
TEST_CASE("CRF log-partition, Viterbi and marginals equal brute-force enumeration", "[nn][crf]") {
  const std::uint64_t seed = 1234;
  INFO("seed " << seed);
  gyre::Rng rng(seed);
  const std::size_t n = 3;
  ParameterStore store;
  Crf crf(store, n);
  for (int trial = 0; trial < 20; ++trial) {
    randomize(store, rng);
    const Eigen::Index len = 1 + static_cast<Eigen::Index>(trial % 4);  // lengths 1..4
    const Matrix e = random_matrix(len, static_cast<Eigen::Index>(n), rng, 2.0f);
    const std::vector<std::int32_t> lengths{static_cast<std::int32_t>(len)};
    const Enumerated ref = enumerate(store, e, n);
    INFO("trial " << trial << ", length " << len);

    double log_z = 0;
    crf.log_partition(e, lengths, std::span<double>(&log_z, 1));
    // Both sides sum the same doubles in different orders: agreement to ~1e-12 expected.
    REQUIRE_THAT(log_z, WithinAbs(ref.log_z, 1e-9));

    std::vector<std::int32_t> tags(static_cast<std::size_t>(len));
    double best = 0;
    crf.decode(e, lengths, tags, std::span<double>(&best, 1));
    REQUIRE(std::vector<int>(tags.begin(), tags.end()) == ref.best_path);
    REQUIRE_THAT(best, WithinAbs(ref.best, 1e-9));
    double scored = 0;
    crf.path_score(e, lengths, tags, std::span<double>(&scored, 1));
    REQUIRE_THAT(scored, WithinAbs(ref.best, 1e-9));

    Matrix marg;
    crf.marginals(e, lengths, marg);
    for (Eigen::Index t = 0; t < len; ++t)
      for (Eigen::Index j = 0; j < static_cast<Eigen::Index>(n); ++j)
        REQUIRE_THAT(marg(t, j), WithinAbs(ref.marg(t, j), 1e-6));  // float output

    // NLL of any path = log Z - score.
    const std::vector<std::int32_t> gold(static_cast<std::size_t>(len), static_cast<std::int32_t>(trial % 3));
    const double nll = crf.loss(e, lengths, gold);
    REQUIRE_THAT(
        nll, WithinAbs(ref.log_z - direct_score(store, e, std::vector<int>(gold.begin(), gold.end())), 1e-9));
  }
}

// Large scores make the scaled sums of the forward, backward and pair-marginal passes underflow
// for some entries, which then take the exact log-sum-exp path. ref: brute-force enumeration.
TEST_CASE("CRF stays exact when scaled sums underflow", "[nn][crf]") {
  const std::size_t n = 2;
  ParameterStore store;
  Crf crf(store, n);
  SECTION("constructed: the best predecessor of every tag is 1000 nats down") {
    // trans [[0, -1000], [-1000, 0]], emissions alternate strongly, so alpha(t-1) peaks at one
    // tag while the cheap transition comes from the other: sum_i A_i exp(trans_ij - colmax) = 0.
    store.at("crf.transitions").value << 0.0f, -1000.0f, -1000.0f, 0.0f;
    Matrix e(4, 2);
    e << 0.0f, -1000.0f, -1000.0f, 0.0f, 0.0f, -1000.0f, -1000.0f, 0.0f;
    const std::vector<std::int32_t> lengths{4};
    const Enumerated ref = enumerate(store, e, n);
    double log_z = 0;
    crf.log_partition(e, lengths, std::span<double>(&log_z, 1));
    REQUIRE(std::isfinite(log_z));
    REQUIRE_THAT(log_z, WithinAbs(ref.log_z, 1e-8));  // |log Z| ~ 3000: 1e-8 abs is ~3e-12 relative
    // Gradients (backward pass and pair marginals hit the same underflow) against enumeration.
    const std::vector<std::int32_t> gold{0, 0, 1, 1};
    store.zero_grad();
    Matrix d;
    crf.loss(e, lengths, gold, &d);
    for (Eigen::Index t = 0; t < 4; ++t)
      for (Eigen::Index j = 0; j < 2; ++j)
        REQUIRE_THAT(d(t, j),
                     WithinAbs(ref.marg(t, j) - (gold[static_cast<std::size_t>(t)] == j ? 1.0 : 0.0), 1e-6));
    const Matrix& g_trans = store.at("crf.transitions").grad;
    const double observed[2][2] = {{1, 1}, {0, 1}};  // 0->0, 0->1, 1->1
    for (Eigen::Index i = 0; i < 2; ++i)
      for (Eigen::Index j = 0; j < 2; ++j)
        REQUIRE_THAT(g_trans(i, j), WithinAbs(ref.pair(i, j) - observed[i][j], 1e-6));
  }
  SECTION("random parameters at scale 300") {
    const std::uint64_t seed = 31;
    INFO("seed " << seed);
    gyre::Rng rng(seed);
    for (int trial = 0; trial < 30; ++trial) {
      for (auto& p : store)
        for (Eigen::Index i = 0; i < p.value.size(); ++i) p.value.data()[i] = 300.0f * rng.normal();
      const Eigen::Index len = 2 + static_cast<Eigen::Index>(trial % 3);
      const Matrix e = random_matrix(len, static_cast<Eigen::Index>(n), rng, 300.0f);
      const std::vector<std::int32_t> lengths{static_cast<std::int32_t>(len)};
      const Enumerated ref = enumerate(store, e, n);
      INFO("trial " << trial);
      std::vector<std::int32_t> gold(static_cast<std::size_t>(len));
      for (auto& g : gold) g = static_cast<std::int32_t>(rng.below(n));
      store.zero_grad();
      Matrix d;
      const double nll = crf.loss(e, lengths, gold, &d);
      const double gold_score = direct_score(store, e, std::vector<int>(gold.begin(), gold.end()));
      REQUIRE_THAT(nll, WithinAbs(ref.log_z - gold_score, 1e-6 * (1.0 + std::abs(ref.log_z))));
      // d(loss)/d(emissions) = marginals - gold indicator; d/d(transitions) = expected - observed.
      for (Eigen::Index t = 0; t < len; ++t)
        for (Eigen::Index j = 0; j < static_cast<Eigen::Index>(n); ++j)
          REQUIRE_THAT(
              d(t, j),
              WithinAbs(ref.marg(t, j) - (gold[static_cast<std::size_t>(t)] == j ? 1.0 : 0.0), 1e-6));
      MatrixD observed = MatrixD::Zero(2, 2);
      for (std::size_t t = 1; t < gold.size(); ++t) observed(gold[t - 1], gold[t]) += 1.0;
      const Matrix& g_trans = store.at("crf.transitions").grad;
      for (Eigen::Index i = 0; i < 2; ++i)
        for (Eigen::Index j = 0; j < 2; ++j)
          REQUIRE_THAT(g_trans(i, j), WithinAbs(ref.pair(i, j) - observed(i, j), 1e-5));
    }
  }
}

TEST_CASE("CRF constraints: decoding and training sum over allowed paths only", "[nn][crf]") {
  const std::uint64_t seed = 99;
  INFO("seed " << seed);
  gyre::Rng rng(seed);
  // Tags O, B-x, I-x (BIO): forbid O -> I-x and starting on I-x.
  const std::size_t n = 3;
  const Allowed allowed{{1, 1, 0,   // O -> O, B-x; not I-x
                         1, 1, 1,   // B-x -> anything
                         1, 1, 1},  // I-x -> anything
                        {1, 1, 0},
                        {1, 1, 1}};
  ParameterStore store;
  Crf crf(store, n);
  for (int trial = 0; trial < 12; ++trial) {
    randomize(store, rng);
    // Make the forbidden moves attractive so an unconstrained decoder would take them.
    store.at("crf.transitions").value(0, 2) = 5.0f;
    store.at("crf.start").value(0, 2) = 5.0f;
    const Eigen::Index len = 1 + static_cast<Eigen::Index>(trial % 4);
    const Matrix e = random_matrix(len, 3, rng, 2.0f);
    const std::vector<std::int32_t> lengths{static_cast<std::int32_t>(len)};
    const Enumerated ref = enumerate(store, e, n, allowed);
    const Enumerated free = enumerate(store, e, n);
    INFO("trial " << trial);

    crf.set_constraints(allowed.trans, allowed.start, allowed.end, /*in_training=*/false);
    std::vector<std::int32_t> tags(static_cast<std::size_t>(len));
    crf.decode(e, lengths, tags);
    REQUIRE(std::vector<int>(tags.begin(), tags.end()) == ref.best_path);
    double log_z = 0;
    crf.log_partition(e, lengths, std::span<double>(&log_z, 1));
    REQUIRE_THAT(log_z, WithinAbs(free.log_z, 1e-9));  // training unconstrained

    crf.set_constraints(allowed.trans, allowed.start, allowed.end, /*in_training=*/true);
    crf.log_partition(e, lengths, std::span<double>(&log_z, 1));
    REQUIRE_THAT(log_z, WithinAbs(ref.log_z, 1e-9));
    Matrix marg;
    crf.marginals(e, lengths, marg);
    REQUIRE_THAT(marg(0, 2), WithinAbs(0.0, 1e-12));  // I-x cannot start

    crf.clear_constraints();
    crf.decode(e, lengths, tags);
    REQUIRE(std::vector<int>(tags.begin(), tags.end()) == free.best_path);
  }
  crf.set_constraints(allowed.trans, allowed.start, allowed.end, true);
  const Matrix e = random_matrix(2, 3, rng);
  const std::vector<std::int32_t> lengths{2};
  REQUIRE_THROWS_WITH(crf.loss(e, lengths, std::vector<std::int32_t>{0, 2}), Contains("constraints forbid"));
  const std::vector<std::uint8_t> none(3, 0);
  REQUIRE_THROWS_AS(crf.set_constraints(allowed.trans, none, allowed.end), gyre::Error);
}

namespace {

// Central difference of the loss w.r.t. one float, divided by the difference actually stored
// after rounding to float, so only the O(h^2) truncation error remains (the loss is summed in
// double).
template <class Loss>
double central_difference(float& x, Loss&& loss_fn, float h) {
  const float orig = x;
  x = orig + h;
  const float xp = x;
  const double lp = loss_fn();
  x = orig - h;
  const float xm = x;
  const double lm = loss_fn();
  x = orig;
  return (lp - lm) / (static_cast<double>(xp) - static_cast<double>(xm));
}

}  // namespace

// Gradient check: analytic gradients (forward-backward marginals) against central differences.
// h = 1e-3; tolerance |analytic - numeric| <= 2e-5 + 1e-4 * |numeric|: the float32 gradient
// outputs carry ~1e-7 relative rounding, the truncation error is ~h^2 * |L'''| / 6 < 1e-6.
TEST_CASE("CRF gradients pass central finite differences", "[nn][crf]") {
  const std::uint64_t seed = 777;
  INFO("seed " << seed);
  gyre::Rng rng(seed);
  const std::size_t n = 4;
  const std::size_t batch = 3, steps = 5;
  const std::vector<std::int32_t> lengths{5, 2, 4};
  for (const bool constrained : {false, true}) {
    ParameterStore store;
    Crf crf(store, n);
    randomize(store, rng);
    Matrix e = random_matrix(static_cast<Eigen::Index>(steps * batch), static_cast<Eigen::Index>(n), rng);
    std::vector<std::int32_t> gold(steps * batch, 0);
    for (auto& g : gold) g = static_cast<std::int32_t>(rng.below(n));
    if (constrained) {
      // Forbid 3 -> 1 and ending on 2; make gold respect it.
      std::vector<std::uint8_t> tr(n * n, 1), st(n, 1), en(n, 1);
      tr[3 * n + 1] = 0;
      en[2] = 0;
      crf.set_constraints(tr, st, en, true);
      for (std::size_t b = 0; b < batch; ++b) {
        const auto len = static_cast<std::size_t>(lengths[b]);
        for (std::size_t t = 0; t < len; ++t)
          gold[t * batch + b] = static_cast<std::int32_t>((t + b) % 2 == 0 ? 0 : 3);
        gold[(len - 1) * batch + b] = 0;
      }
    }
    const float scale = 0.5f;
    store.zero_grad();
    Matrix d_e;
    const double loss = crf.loss(e, lengths, gold, &d_e, scale);
    REQUIRE(std::isfinite(loss));
    auto loss_fn = [&] { return static_cast<double>(scale) * crf.loss(e, lengths, gold); };
    const float h = 1e-3f;
    auto check = [&](float& x, double analytic, const char* what, Eigen::Index i) {
      const double numeric = central_difference(x, loss_fn, h);
      INFO(what << " index " << i << " constrained " << constrained);
      REQUIRE_THAT(analytic, WithinAbs(numeric, 2e-5 + 1e-4 * std::abs(numeric)));
    };
    for (Eigen::Index i = 0; i < e.size(); ++i) check(e.data()[i], d_e.data()[i], "emission", i);
    for (const char* name : {"crf.transitions", "crf.start", "crf.end"}) {
      auto& p = store.at(name);
      for (Eigen::Index i = 0; i < p.value.size(); ++i) check(p.value.data()[i], p.grad.data()[i], name, i);
    }
    // Padding rows get exactly zero gradient.
    for (std::size_t b = 0; b < batch; ++b)
      for (std::size_t t = static_cast<std::size_t>(lengths[b]); t < steps; ++t)
        REQUIRE(d_e.row(static_cast<Eigen::Index>(t * batch + b)).isZero(0.0f));
  }
}

// A sequence padded inside a batch gives the same loss, gradients, path and marginals as alone.
TEST_CASE("CRF: padded sequences in a batch equal the same sequences alone", "[nn][crf]") {
  const std::uint64_t seed = 4242;
  INFO("seed " << seed);
  gyre::Rng rng(seed);
  const std::size_t n = 5, batch = 3, steps = 6;
  const std::vector<std::int32_t> lengths{3, 6, 1};
  ParameterStore store;
  Crf crf(store, n);
  crf.reserve_workspace(steps, batch);
  randomize(store, rng);
  Matrix e = random_matrix(static_cast<Eigen::Index>(steps * batch), static_cast<Eigen::Index>(n), rng);
  std::vector<std::int32_t> gold(steps * batch);
  for (auto& g : gold) g = static_cast<std::int32_t>(rng.below(n));
  // Garbage on padding rows and padding gold entries must not matter.
  for (std::size_t b = 0; b < batch; ++b)
    for (std::size_t t = static_cast<std::size_t>(lengths[b]); t < steps; ++t) {
      e.row(static_cast<Eigen::Index>(t * batch + b)).setConstant(1e6f);
      gold[t * batch + b] = 77;
    }

  store.zero_grad();
  Matrix d_batch;
  const double loss_batch = crf.loss(e, lengths, gold, &d_batch);
  const Matrix g_trans_batch = store.at("crf.transitions").grad;
  std::vector<std::int32_t> tags_batch(steps * batch);
  crf.decode(e, lengths, tags_batch);
  Matrix marg_batch;
  crf.marginals(e, lengths, marg_batch);

  double loss_sum = 0;
  Matrix g_trans_sum = Matrix::Zero(static_cast<Eigen::Index>(n), static_cast<Eigen::Index>(n));
  for (std::size_t b = 0; b < batch; ++b) {
    const auto len = static_cast<std::size_t>(lengths[b]);
    Matrix e1(static_cast<Eigen::Index>(len), static_cast<Eigen::Index>(n));
    std::vector<std::int32_t> g1(len);
    for (std::size_t t = 0; t < len; ++t) {
      e1.row(static_cast<Eigen::Index>(t)) = e.row(static_cast<Eigen::Index>(t * batch + b));
      g1[t] = gold[t * batch + b];
    }
    const std::vector<std::int32_t> l1{static_cast<std::int32_t>(len)};
    store.zero_grad();
    Matrix d1;
    loss_sum += crf.loss(e1, l1, g1, &d1);
    g_trans_sum += store.at("crf.transitions").grad;
    std::vector<std::int32_t> tags1(len);
    crf.decode(e1, l1, tags1);
    Matrix marg1;
    crf.marginals(e1, l1, marg1);
    INFO("sequence " << b);
    for (std::size_t t = 0; t < len; ++t) {
      const auto row = static_cast<Eigen::Index>(t * batch + b);
      const auto r1 = static_cast<Eigen::Index>(t);
      REQUIRE(tags_batch[t * batch + b] == tags1[t]);
      for (Eigen::Index j = 0; j < static_cast<Eigen::Index>(n); ++j) {
        // Same arithmetic in the same order: identical up to float rounding of the output.
        REQUIRE_THAT(d_batch(row, j), WithinAbs(d1(r1, j), 1e-7));
        REQUIRE_THAT(marg_batch(row, j), WithinAbs(marg1(r1, j), 1e-7));
      }
    }
    for (std::size_t t = len; t < steps; ++t) REQUIRE(tags_batch[t * batch + b] == -1);
  }
  REQUIRE_THAT(loss_batch, WithinAbs(loss_sum, 1e-9));
  // The batch sums float grads once; the loop adds three float-rounded parts: 1e-5 abs.
  for (Eigen::Index i = 0; i < g_trans_sum.size(); ++i)
    REQUIRE_THAT(g_trans_batch.data()[i], WithinAbs(g_trans_sum.data()[i], 1e-5));
}

// After training with constraints, the forbidden entries have had zero gradient; baking writes
// kForbiddenScore there so a decoder without a mask (embedded runtime) finds the same paths.
TEST_CASE("CRF: baked constraints decode like the mask", "[nn][crf]") {
  const std::uint64_t seed = 5150;
  INFO("seed " << seed);
  gyre::Rng rng(seed);
  const std::size_t n = 3;  // O, B-x, I-x
  const std::vector<std::uint8_t> trans{1, 1, 0, 1, 1, 1, 1, 1, 1}, start{1, 1, 0}, end{1, 1, 1};
  ParameterStore store;
  Crf crf(store, n);
  REQUIRE_THROWS_AS(crf.bake_constraints(), gyre::Error);
  randomize(store, rng);
  store.at("crf.transitions").value(0, 2) = 3.0f;  // a forbidden move the data would like
  crf.set_constraints(trans, start, end, true);
  crf.bake_constraints();
  REQUIRE(store.at("crf.transitions").value(0, 2) == Crf::kForbiddenScore);
  REQUIRE(store.at("crf.start").value(0, 2) == Crf::kForbiddenScore);
  REQUIRE(store.at("crf.transitions").value(1, 2) != Crf::kForbiddenScore);
  for (int trial = 0; trial < 50; ++trial) {
    const Eigen::Index len = 1 + static_cast<Eigen::Index>(trial % 6);
    const Matrix e = random_matrix(len, 3, rng, 5.0f);
    const std::vector<std::int32_t> lengths{static_cast<std::int32_t>(len)};
    std::vector<std::int32_t> masked(static_cast<std::size_t>(len)), baked(static_cast<std::size_t>(len));
    crf.set_constraints(trans, start, end, true);
    crf.decode(e, lengths, masked);
    crf.clear_constraints();
    crf.decode(e, lengths, baked);
    INFO("trial " << trial);
    REQUIRE(masked == baked);
  }
}

TEST_CASE("CRF: gradient descent on a toy problem learns the gold path", "[nn][crf]") {
  // Emissions are uninformative (all zero); only transitions/start/end can learn the pattern
  // 0 1 2 0 1 2 ..., so a falling loss and an exact decode show the gradients' sign and use.
  ParameterStore store;
  Crf crf(store, 3);
  const std::size_t steps = 6;
  const Matrix e = Matrix::Zero(static_cast<Eigen::Index>(steps), 3);
  const std::vector<std::int32_t> lengths{static_cast<std::int32_t>(steps)};
  std::vector<std::int32_t> gold(steps);
  for (std::size_t t = 0; t < steps; ++t) gold[t] = static_cast<std::int32_t>(t % 3);
  double first = 0, last = 0;
  for (int it = 0; it < 200; ++it) {
    store.zero_grad();
    Matrix d;
    last = crf.loss(e, lengths, gold, &d);
    if (it == 0) first = last;
    for (auto& p : store) p.value -= 0.5f * p.grad;
  }
  REQUIRE_THAT(first, WithinAbs(6.0 * std::log(3.0), 1e-9));  // uniform over 3^6 paths
  REQUIRE(last < 0.05);
  std::vector<std::int32_t> tags(steps);
  crf.decode(e, lengths, tags);
  REQUIRE(tags == gold);
}

TEST_CASE("CRF refuses bad shapes and tags", "[nn][crf]") {
  ParameterStore store;
  Crf crf(store, 3);
  const Matrix e = Matrix::Zero(6, 3);
  std::vector<std::int32_t> tags(6);
  SECTION("lengths") {
    const std::vector<std::int32_t> lengths{4, 1};
    REQUIRE_THROWS_WITH(crf.decode(e, lengths, tags), Contains("length 4 of sequence 0"));
    const std::vector<std::int32_t> zero{0, 3};
    REQUIRE_THROWS_AS(crf.decode(e, zero, tags), gyre::Error);
  }
  SECTION("columns") {
    const Matrix wrong = Matrix::Zero(6, 4);
    const std::vector<std::int32_t> lengths{3, 3};
    REQUIRE_THROWS_WITH(crf.decode(wrong, lengths, tags), Contains("4 columns"));
  }
  SECTION("non-finite emissions") {
    Matrix bad = Matrix::Zero(6, 3);
    bad(3, 1) = std::numeric_limits<float>::quiet_NaN();  // step 1 of sequence 1
    const std::vector<std::int32_t> lengths{3, 3};
    REQUIRE_THROWS_WITH(crf.decode(bad, lengths, tags), Contains("sequence 1 at step 1"));
    REQUIRE_THROWS_AS(crf.loss(bad, lengths, std::vector<std::int32_t>(6, 0)), gyre::DivergenceError);
    const std::vector<std::int32_t> short_lengths{3, 1};  // the NaN is on a padding row now
    REQUIRE_NOTHROW(crf.decode(bad, short_lengths, tags));
  }
  SECTION("gold out of range") {
    const std::vector<std::int32_t> lengths{3, 3};
    const std::vector<std::int32_t> gold{0, 0, 1, 3, 0, 0};
    REQUIRE_THROWS_WITH(crf.loss(e, lengths, gold), Contains("sequence 1 at step 1"));
  }
}
