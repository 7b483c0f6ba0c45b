// Heads and losses: Linear, pooling, dropout, cross-entropy variants, multi-label BCE, checked by
// central differences and by identities of the definitions.

#include <catch2/catch.hpp>
#include <cmath>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/nn/dropout.hpp"
#include "gyre/nn/linear.hpp"
#include "gyre/nn/loss.hpp"
#include "gyre/nn/pooling.hpp"
#include "nn_test_util.hpp"

using namespace gyre;
using namespace gyre::nn;
using gyre::nn::test::all_close;
using gyre::nn::test::check_gradient;
using gyre::nn::test::dot;
using gyre::nn::test::GradCheckOptions;
using gyre::nn::test::random_matrix;

TEST_CASE("Linear gradients match central differences", "[nn][gradcheck]") {
  ParameterStore store;
  Linear lin(store, 5, 3);
  Rng rng(4);
  lin.init_parameters(rng);
  store.at("readout.b").value = random_matrix(1, 3, rng);
  Matrix x = random_matrix(6, 5, rng);
  const Matrix g = random_matrix(6, 3, rng);
  Matrix y, dx;
  auto loss = [&] {
    lin.forward(x, y);
    return dot(g, y);
  };
  loss();
  // y = x W^T + b by definition
  CHECK(all_close(
      y, (x * store.at("readout.w").value.transpose()).rowwise() + store.at("readout.b").value.row(0), 1e-6,
      1e-6));
  lin.backward(g, &dx);
  for (auto& p : store) check_gradient(p.name, p.value, p.grad, loss);
  check_gradient("x", x, dx, loss);
}

TEST_CASE("pooling over valid steps: values and gradients", "[nn][gradcheck]") {
  const int T = 5, H = 3;
  const std::vector<int> lengths = {5, 2, 1, 4};
  const auto B = static_cast<Eigen::Index>(lengths.size());
  for (const PoolingKind kind : {PoolingKind::kLast, PoolingKind::kMean, PoolingKind::kMax}) {
    for (const int dirs : {1, 2}) {
      DYNAMIC_SECTION(gyre::runtime::to_string(kind) << " directions " << dirs) {
        Rng rng(8);
        Matrix seq = random_matrix(T * B, H * dirs, rng);
        const Matrix g = random_matrix(B, H * dirs, rng);
        Pooling pool(kind, dirs);
        Matrix pooled, d_seq;
        auto loss = [&] {
          pool.forward(seq, T, lengths, pooled);
          return dot(g, pooled);
        };
        loss();
        // Values from the definitions (DEVELOPERS.md "Pooling"), computed directly.
        for (Eigen::Index b = 0; b < B; ++b) {
          const int len = lengths[static_cast<std::size_t>(b)];
          for (Eigen::Index f = 0; f < H * dirs; ++f) {
            float expect = 0.0f;
            if (kind == PoolingKind::kLast) {
              expect = f < H ? seq((len - 1) * B + b, f) : seq(b, f);
            } else if (kind == PoolingKind::kMean) {
              for (int t = 0; t < len; ++t) expect += seq(t * B + b, f);
              expect /= static_cast<float>(len);
            } else {
              expect = seq(b, f);
              for (int t = 1; t < len; ++t) expect = std::max(expect, seq(t * B + b, f));
            }
            CHECK(pooled(b, f) == Approx(expect).margin(1e-6));
          }
        }
        pool.backward(g, d_seq);
        GradCheckOptions opt;
        opt.eps = 1e-3f;  // max pooling is piecewise linear: keep the step below the gaps between values
        opt.max_entries = 1000;
        check_gradient("seq", seq, d_seq, loss, opt);
      }
    }
  }
  CHECK_THROWS_AS(gyre::runtime::pooling_from_string("median"), gyre::runtime::Error);
  CHECK(gyre::runtime::pooling_from_string("max") == PoolingKind::kMax);
}

TEST_CASE("softmax cross-entropy: definition values and gradients", "[nn][gradcheck]") {
  SECTION("uniform logits give log C (definition of the softmax)") {
    const Matrix logits = Matrix::Zero(2, 4);
    const std::vector<int> y = {1, 3};
    Matrix d;
    CHECK(softmax_cross_entropy(logits, y, d) == Approx(std::log(4.0)).epsilon(1e-12));
    CHECK(d(0, 1) == Approx((0.25 - 1.0) / 2.0).margin(1e-7));  // (p - onehot) / N
    CHECK(d(0, 0) == Approx(0.25 / 2.0).margin(1e-7));
  }
  SECTION("huge logits stay finite (log-sum-exp)") {
    Matrix logits(1, 3);
    logits << 1000.0f, -1000.0f, 999.0f;
    const std::vector<int> y = {2};
    Matrix d;
    const double loss = softmax_cross_entropy(logits, y, d);
    CHECK(loss == Approx(std::log1p(std::exp(1.0))).epsilon(1e-9));  // -log(e^999 / (e^1000 + e^999))
    CHECK(d.allFinite());
  }
  SECTION("weights, smoothing and ignored rows: gradient matches central differences") {
    Rng rng(5);
    Matrix logits = random_matrix(6, 4, rng, 2.0f);
    const std::vector<int> y = {0, 3, -1, 2, 1, 1};  // -1: ignored
    const std::vector<float> w = {0.5f, 2.0f, 1.0f, 1.5f};
    CrossEntropyOptions opt;
    opt.class_weights = w;
    opt.label_smoothing = 0.1f;
    Matrix d, scratch;
    softmax_cross_entropy(logits, y, d, opt);
    CHECK(d.row(2).isZero(0.0f));
    check_gradient("logits", logits, d, [&] { return softmax_cross_entropy(logits, y, scratch, opt); });
  }
  SECTION("bad targets are rejected") {
    const Matrix logits = Matrix::Zero(1, 3);
    const std::vector<int> y = {3};
    Matrix d;
    CHECK_THROWS_AS(softmax_cross_entropy(logits, y, d), Error);
  }
}

TEST_CASE("token cross-entropy ignores padding and equals cross-entropy over the valid tokens", "[nn]") {
  const int T = 4, C = 3;
  const std::vector<int> lengths = {4, 1, 2};
  const auto B = static_cast<Eigen::Index>(lengths.size());
  Rng rng(6);
  const Matrix logits = random_matrix(T * B, C, rng, 3.0f);
  std::vector<int> tags(static_cast<std::size_t>(T * B));
  for (auto& t : tags) t = static_cast<int>(rng.below(C));
  Matrix d;
  const double loss = token_cross_entropy(logits, tags, T, lengths, d);
  // Same rows with padding marked as ignored (-1) through the general function.
  std::vector<int> masked = tags;
  for (Eigen::Index b = 0; b < B; ++b)
    for (int t = lengths[static_cast<std::size_t>(b)]; t < T; ++t)
      masked[static_cast<std::size_t>(t * B + b)] = -1;
  Matrix d2;
  CHECK(loss == Approx(softmax_cross_entropy(logits, masked, d2)).epsilon(1e-12));
  CHECK(d == d2);
  for (Eigen::Index b = 0; b < B; ++b)
    for (int t = lengths[static_cast<std::size_t>(b)]; t < T; ++t) CHECK(d.row(t * B + b).isZero(0.0f));
}

TEST_CASE("sigmoid binary cross-entropy: gradient and stability", "[nn][gradcheck]") {
  Rng rng(7);
  Matrix logits = random_matrix(4, 3, rng, 3.0f);
  Matrix y(4, 3);
  for (Eigen::Index i = 0; i < y.size(); ++i) y.data()[i] = rng.uniform() < 0.5f ? 1.0f : 0.0f;
  Matrix d, scratch;
  sigmoid_binary_cross_entropy(logits, y, d);
  check_gradient("logits", logits, d, [&] { return sigmoid_binary_cross_entropy(logits, y, scratch); });
  Matrix big(1, 2);
  big << 200.0f, -200.0f;
  Matrix yb(1, 2);
  yb << 0.0f, 0.0f;
  // -log(1 - sigmoid(200)) = 200 + log(1 + e^-200) ~ 200; -log(1 - sigmoid(-200)) ~ e^-200
  CHECK(sigmoid_binary_cross_entropy(big, yb, d) == Approx(100.0).epsilon(1e-12));
  CHECK(d.allFinite());
}

TEST_CASE("inverted dropout: identity at inference, 1/(1-p) scaling and masked gradient in training",
          "[nn]") {
  Dropout drop(0.5f);
  Rng rng(9);
  Matrix x = Matrix::Constant(200, 50, 1.0f);
  Matrix inference = x;
  drop.forward(inference, false, nullptr);
  CHECK(inference == x);
  drop.forward(x, true, &rng);
  std::size_t kept = 0;
  for (Eigen::Index i = 0; i < x.size(); ++i) {
    const float v = x.data()[i];
    CHECK((v == 0.0f || v == 2.0f));  // Srivastava et al. 2014 with the inverted 1/(1-p) scaling
    kept += v != 0.0f;
  }
  // 10000 Bernoulli(0.5) draws: mean within 5 standard deviations (sd = 0.005).
  CHECK(static_cast<double>(kept) / 10000.0 == Approx(0.5).margin(0.025));
  Matrix grad = Matrix::Constant(200, 50, 1.0f);
  drop.backward(grad);
  CHECK(grad == x);
  CHECK_THROWS_AS(Dropout(1.0f), ConfigError);
}
