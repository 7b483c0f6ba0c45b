// Optimizer updates checked against the published update rules on values computed by hand
// (the arithmetic is written beside each check). float32 arithmetic: tolerances 1e-6 absolute on
// values of order 1.

#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <span>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/optim/adam.hpp"
#include "gyre/optim/optimizer.hpp"
#include "gyre/optim/sgd.hpp"

using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;
using gyre::nn::Matrix;
using gyre::nn::Parameter;
using gyre::nn::ParameterStore;
using gyre::optim::OptimizerConfig;

namespace {

// One [1 x 2] parameter "w" with the given value and gradient.
Parameter& add_pair(ParameterStore& store, const std::string& name, float w0, float w1) {
  Parameter& p = store.add(name, 1, 2);
  p.value << w0, w1;
  return p;
}

void set_grad(Parameter& p, float g0, float g1) {
  p.grad << g0, g1;
}

}  // namespace

TEST_CASE("SGD without momentum follows w <- w - lr * g", "[optim][sgd]") {
  ParameterStore store;
  Parameter& p = add_pair(store, "w", 1.0F, -2.0F);
  set_grad(p, 0.5F, 0.25F);

  SECTION("plain") {
    // Gradient descent w <- w - lr * g (Robbins & Monro 1951 step; any textbook):
    // 1 - 0.1 * 0.5 = 0.95;  -2 - 0.1 * 0.25 = -2.025
    auto opt = gyre::optim::make_optimizer("sgd", OptimizerConfig{});
    opt->step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.95, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-2.025, 1e-6));
    CHECK(opt->step_count() == 1);
    CHECK(opt->state_tensors().empty());
    // The optimizer never touches the gradient.
    CHECK_THAT(p.grad(0, 0), WithinAbs(0.5, 0.0));
  }
  SECTION("L2 weight decay adds weight_decay * w to the gradient") {
    // g' = g + 0.1 * w = (0.5 + 0.1, 0.25 - 0.2) = (0.6, 0.05)
    // w  = (1 - 0.1 * 0.6, -2 - 0.1 * 0.05) = (0.94, -2.005)
    OptimizerConfig c;
    c.weight_decay = 0.1F;
    gyre::optim::Sgd opt(c);
    opt.step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.94, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-2.005, 1e-6));
  }
}

TEST_CASE("SGD with momentum and Nesterov momentum", "[optim][sgd]") {
  // lr = 0.1, mu = 0.9, w0 = 1, gradients g1 = 1 then g2 = 0.5 (element 0); element 1 starts at 0
  // with gradients -2 then 0 (checks the velocity keeps moving a parameter with zero gradient).
  ParameterStore store;
  Parameter& p = add_pair(store, "w", 1.0F, 0.0F);
  OptimizerConfig c;
  c.momentum = 0.9F;

  SECTION("classical momentum") {
    // Sutskever et al. 2013, eq. 1-2: v <- mu v - lr g, w <- w + v.
    // step 1: v = -0.1 * 1 = -0.1, w = 0.9;   elem 1: v = 0.2, w = 0.2
    // step 2: v = 0.9 * -0.1 - 0.1 * 0.5 = -0.14, w = 0.76;  elem 1: v = 0.18, w = 0.38
    // (our velocity accumulates gradients, v' = mu v' + g, w <- w - lr v'; equal for constant lr)
    gyre::optim::Sgd opt(c);
    set_grad(p, 1.0F, -2.0F);
    opt.step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.9, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(0.2, 1e-6));
    set_grad(p, 0.5F, 0.0F);
    opt.step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.76, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(0.38, 1e-6));
    const auto state = opt.state_tensors();
    REQUIRE(state.size() == 1);
    CHECK(state[0].first == "optim.w.velocity");
    // v' = 0.9 * 1 + 0.5 = 1.4
    CHECK_THAT((*state[0].second)(0, 0), WithinAbs(1.4, 1e-6));
  }
  SECTION("Nesterov") {
    // Bengio et al. 2013 ("Advances in optimizing recurrent networks", eq. 7), the
    // reformulation of Sutskever et al. 2013 eq. 3-4 with parameters stored at the look-ahead
    // point: v <- mu v + g, w <- w - lr (g + mu v).
    // step 1: v = 1, w = 1 - 0.1 * (1 + 0.9 * 1) = 0.81;   elem 1: v = -2, w = 0.1 * 3.8 = 0.38
    // step 2: v = 0.9 + 0.5 = 1.4, w = 0.81 - 0.1 * (0.5 + 1.26) = 0.634
    //         elem 1: v = -1.8, w = 0.38 - 0.1 * (0 - 1.62) = 0.542
    c.nesterov = true;
    gyre::optim::Sgd opt(c);
    set_grad(p, 1.0F, -2.0F);
    opt.step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.81, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(0.38, 1e-6));
    set_grad(p, 0.5F, 0.0F);
    opt.step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.634, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(0.542, 1e-6));
  }
}

// Adam, Kingma & Ba 2015, Algorithm 1 (beta1 = 0.9, beta2 = 0.999, eps = 1e-8, alpha = lr = 0.1):
//   m_t = b1 m + (1-b1) g;  v_t = b2 v + (1-b2) g^2;  m_hat = m_t/(1-b1^t);  v_hat = v_t/(1-b2^t)
//   w_t = w - alpha * m_hat / (sqrt(v_hat) + eps)
// Element a: w0 = 1, g = 0.5 then -0.25.  Element b: w0 = -2, g = -1 then 2.
TEST_CASE("Adam and AdamW follow Kingma & Ba Algorithm 1 and Loshchilov & Hutter Algorithm 2",
          "[optim][adam]") {
  ParameterStore store;
  Parameter& p = add_pair(store, "w", 1.0F, -2.0F);
  OptimizerConfig c;  // defaults are the paper's: 0.9, 0.999, 1e-8

  SECTION("Adam") {
    auto opt = gyre::optim::make_optimizer("adam", c);
    CHECK(opt->name() == "adam");
    // t=1, a: m = 0.05, v = 0.001 * 0.25 = 0.00025, m_hat = 0.05/0.1 = 0.5,
    //         v_hat = 0.00025/0.001 = 0.25, w = 1 - 0.1 * 0.5/(0.5 + 1e-8) = 0.900000002
    //      b: m = -0.1, v = 0.001, m_hat = -1, v_hat = 1, w = -2 + 0.1 * 1/(1 + 1e-8) = -1.900000001
    set_grad(p, 0.5F, -1.0F);
    opt->step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.900000002, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-1.900000001, 1e-6));
    // t=2, a: m = 0.045 - 0.025 = 0.02, v = 0.999 * 0.00025 + 0.001 * 0.0625 = 0.00031225,
    //         m_hat = 0.02/0.19 = 0.1052631579, v_hat = 0.00031225/0.001999 = 0.1562031016,
    //         w = 0.9 - 0.1 * 0.1052631579/0.3952253808 = 0.8733662987
    //      b: m = -0.09 + 0.2 = 0.11, v = 0.000999 + 0.004 = 0.004999, m_hat = 0.5789473684,
    //         v_hat = 2.500750375, w = -1.9 - 0.1 * 0.5789473684/1.581376098 = -1.936610353
    set_grad(p, -0.25F, 2.0F);
    opt->step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.8733662987, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-1.936610353, 1e-6));
    const auto state = opt->state_tensors();
    REQUIRE(state.size() == 2);
    CHECK(state[0].first == "optim.w.m");
    CHECK(state[1].first == "optim.w.v");
    // Relative 1e-4 on the moments: 0.999F is 0.99900001287, so 1 - beta2 evaluated in float is
    // 1.3e-5 away from 0.001 in relative terms (the update itself is insensitive to it).
    CHECK_THAT((*state[0].second)(0, 0), WithinRel(0.02, 1e-4));
    CHECK_THAT((*state[1].second)(0, 0), WithinRel(0.00031225, 1e-4));
    CHECK_THAT((*state[0].second)(0, 1), WithinRel(0.11, 1e-4));
    CHECK_THAT((*state[1].second)(0, 1), WithinRel(0.004999, 1e-4));
    CHECK(opt->step_count() == 2);
  }
  SECTION("Adam with L2 weight decay") {
    // g' = g + 0.1 w. t=1, a: g' = 0.6, m = 0.06, v = 0.00036, m_hat = 0.6, v_hat = 0.36,
    //      w = 1 - 0.1 * 0.6/0.6 = 0.9000000017;  b: g' = -1.2, w = -1.900000001
    // t=2, a: g' = -0.25 + 0.09 = -0.16, m = 0.054 - 0.016 = 0.038, v = 0.00035964 + 0.0000256
    //      = 0.00038524, m_hat = 0.2, v_hat = 0.1927163582, w = 0.9 - 0.1 * 0.2/0.4389947 =
    //      0.8544413675;  b: g' = 2 - 0.19 = 1.81, m = 0.073, v = 0.00471466,
    //      m_hat = 0.3842105263, v_hat = 2.358509254, w = -1.925017878
    c.weight_decay = 0.1F;
    gyre::optim::Adam opt(c, false);
    set_grad(p, 0.5F, -1.0F);
    opt.step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.9000000017, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-1.900000001, 1e-6));
    set_grad(p, -0.25F, 2.0F);
    opt.step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.8544413675, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-1.925017878, 1e-6));
  }
  SECTION("AdamW") {
    // Loshchilov & Hutter 2019, Algorithm 2 line 12 with eta_t alpha = lr = 0.1 and decay
    // lr * 0.1 * w: moments as in plain Adam, then
    // t=1, a: w = 1 - 0.1 * (0.99999998 + 0.1 * 1) = 0.890000002
    //      b: w = -2 - 0.1 * (-0.99999999 + 0.1 * -2) = -1.880000001
    // t=2, a: w = 0.89 - 0.1 * (0.2663370130 + 0.089) = 0.8544662987
    //      b: w = -1.88 - 0.1 * (0.3661035 - 0.188) = -1.897810353
    c.weight_decay = 0.1F;
    auto opt = gyre::optim::make_optimizer("adamw", c);
    CHECK(opt->name() == "adamw");
    set_grad(p, 0.5F, -1.0F);
    opt->step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.890000002, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-1.880000001, 1e-6));
    set_grad(p, -0.25F, 2.0F);
    opt->step(store, 0.1F);
    CHECK_THAT(p.value(0, 0), WithinAbs(0.8544662987, 1e-6));
    CHECK_THAT(p.value(0, 1), WithinAbs(-1.897810353, 1e-6));
  }
}

TEST_CASE("frozen parameters are skipped and get no state", "[optim]") {
  ParameterStore store;
  Parameter& frozen = add_pair(store, "frozen", 1.0F, 2.0F);
  frozen.trainable = false;
  Parameter& live = add_pair(store, "live", 1.0F, 2.0F);
  set_grad(frozen, 1.0F, 1.0F);
  set_grad(live, 1.0F, 1.0F);
  auto opt = gyre::optim::make_optimizer("adam", OptimizerConfig{});
  opt->step(store, 0.1F);
  CHECK_THAT(frozen.value(0, 0), WithinAbs(1.0, 0.0));
  CHECK_THAT(frozen.value(0, 1), WithinAbs(2.0, 0.0));
  // Adam's first step moves by lr * g/|g| (Kingma & Ba 2015, section 2.1): 1 - 0.1 = 0.9.
  CHECK_THAT(live.value(0, 0), WithinAbs(0.9, 1e-6));
  const auto state = opt->state_tensors();
  REQUIRE(state.size() == 2);
  CHECK(state[0].first == "optim.live.m");
}

namespace {

// Fills a gradient with values in [-1, 1) from a seeded generator.
void random_fill(Matrix& m, gyre::Rng& rng) {
  for (Eigen::Index i = 0; i < m.size(); ++i) m.data()[i] = rng.uniform(-1.0F, 1.0F);
}

struct ConfigCase {
  const char* optimizer;
  OptimizerConfig config;
};

std::vector<ConfigCase> all_configs() {
  std::vector<ConfigCase> out;
  OptimizerConfig c;
  out.push_back({"sgd", c});
  c.momentum = 0.9F;
  c.weight_decay = 0.01F;
  out.push_back({"sgd", c});
  c.nesterov = true;
  out.push_back({"sgd", c});
  OptimizerConfig a;
  a.weight_decay = 0.01F;
  out.push_back({"adam", a});
  out.push_back({"adamw", a});
  return out;
}

}  // namespace

TEST_CASE("sparse-row update equals the dense update when every row is touched", "[optim][sparse]") {
  // The lazy rule (optimizer.hpp) differs from the dense rule only on untouched rows; with every
  // row touched at every step both must give the same numbers.
  for (const ConfigCase& cc : all_configs()) {
    const std::uint64_t seed = 20261201;
    INFO("optimizer " << cc.optimizer << ", momentum " << cc.config.momentum << ", seed " << seed);
    gyre::Rng rng(seed);
    ParameterStore dense_store;
    ParameterStore sparse_store;
    Parameter& dense = dense_store.add("tokens.vectors", 5, 3);
    Parameter& sparse = sparse_store.add("tokens.vectors", 5, 3, true);
    random_fill(dense.value, rng);
    sparse.value = dense.value;
    auto dense_opt = gyre::optim::make_optimizer(cc.optimizer, cc.config);
    auto sparse_opt = gyre::optim::make_optimizer(cc.optimizer, cc.config);
    for (int step = 0; step < 4; ++step) {
      random_fill(dense.grad, rng);
      sparse.grad = dense.grad;
      sparse.touched_rows = {4, 0, 2, 1, 3, 2};  // unsorted, with a duplicate: step() normalises
      dense_opt->step(dense_store, 0.05F);
      sparse_opt->step(sparse_store, 0.05F);
      // Same arithmetic per element (row blocks vs one block): differences only from FMA
      // contraction in vector vs scalar tails, far below 1e-6.
      for (Eigen::Index i = 0; i < dense.value.size(); ++i)
        REQUIRE_THAT(sparse.value.data()[i], WithinAbs(dense.value.data()[i], 1e-6));
    }
  }
}

TEST_CASE("sparse-row Adam is lazy: untouched rows keep value and moments", "[optim][sparse]") {
  ParameterStore store;
  Parameter& emb = store.add("tokens.vectors", 3, 2, true);
  emb.value.setConstant(1.0F);
  auto opt = gyre::optim::make_optimizer("adam", OptimizerConfig{});
  // Step 1 touches row 0 only.
  emb.grad.row(0) << 0.5F, 0.5F;
  emb.touched_rows = {0};
  opt->step(store, 0.1F);
  store.zero_grad();
  // Step 2 touches row 1 only, for the first time.
  emb.grad.row(1) << 0.5F, -0.5F;
  emb.touched_rows = {1};
  opt->step(store, 0.1F);

  // Row 0 moved once (t=1: 1 - 0.1 * 0.5/(0.5 + 1e-8)) and was not moved again at t=2 although
  // dense Adam would have moved it by its decayed first moment.
  CHECK_THAT(emb.value(0, 0), WithinAbs(0.900000002, 1e-6));
  // Row 1 first touched at t=2 uses the global t in the bias correction:
  // m = 0.1 * 0.5 = 0.05, v = 0.001 * 0.25 = 0.00025, m_hat = 0.05/(1 - 0.81) = 0.2631578947,
  // v_hat = 0.00025/(1 - 0.998001) = 0.1250625313, step = 0.2631578947/0.3536425 = 0.7441368025,
  // w = 1 - 0.1 * 0.7441368025 = 0.9255863197 (and 1.0744136803 for the negative gradient).
  CHECK_THAT(emb.value(1, 0), WithinAbs(0.9255863197, 1e-6));
  CHECK_THAT(emb.value(1, 1), WithinAbs(1.0744136803, 1e-6));
  // Row 2 never touched: value and moments untouched.
  CHECK_THAT(emb.value(2, 0), WithinAbs(1.0, 0.0));
  const auto state = opt->state_tensors();
  const Matrix& m = *state[0].second;
  CHECK_THAT(m(2, 0), WithinAbs(0.0, 0.0));
  // Row 0's first moment was not decayed at t=2: still 0.1 * 0.5.
  CHECK_THAT(m(0, 0), WithinRel(0.05, 1e-5));  // float (1 - 0.9F) = 0.100000024
}

TEST_CASE("saved and restored optimizer state continues bit-identically", "[optim][state]") {
  for (const ConfigCase& cc : all_configs()) {
    const std::uint64_t seed = 77;
    INFO("optimizer " << cc.optimizer << ", momentum " << cc.config.momentum << ", seed " << seed);
    gyre::Rng rng(seed);
    const auto make_store = [](ParameterStore& s) {
      s.add("tokens.vectors", 4, 3, true);
      s.add("rnn.l0.fwd.w_input", 6, 3);
      s.add("readout.b", 1, 2);
    };
    ParameterStore a;
    make_store(a);
    for (Parameter& p : a) random_fill(p.value, rng);
    auto opt_a = gyre::optim::make_optimizer(cc.optimizer, cc.config);

    // Gradients for 5 steps, drawn once so both runs see the same ones.
    std::vector<std::vector<Matrix>> grads(5);
    for (auto& step_grads : grads)
      for (Parameter& p : a) {
        Matrix g(p.value.rows(), p.value.cols());
        random_fill(g, rng);
        step_grads.push_back(g);
      }
    const auto apply = [&](ParameterStore& s, gyre::optim::Optimizer& opt, int step) {
      for (std::size_t i = 0; i < s.size(); ++i) {
        s[i].grad = grads[static_cast<std::size_t>(step)][i];
        if (s[i].sparse_rows) s[i].touched_rows = {static_cast<std::int32_t>(step % 4), 3};
      }
      opt.step(s, 0.01F * static_cast<float>(step + 1));
      s.zero_grad();
    };
    for (int step = 0; step < 3; ++step) apply(a, *opt_a, step);

    // "Checkpoint": copy values, state tensors and the step count into a fresh store/optimizer.
    ParameterStore b;
    make_store(b);
    for (std::size_t i = 0; i < a.size(); ++i) b[i].value = a[i].value;
    auto opt_b = gyre::optim::make_optimizer(cc.optimizer, cc.config);
    opt_b->bind(b);
    const auto saved = opt_a->state_tensors();
    const auto restored = opt_b->state_tensors();
    REQUIRE(saved.size() == restored.size());
    for (std::size_t k = 0; k < saved.size(); ++k) {
      REQUIRE(saved[k].first == restored[k].first);
      *restored[k].second = *saved[k].second;
    }
    opt_b->set_step_count(opt_a->step_count());

    for (int step = 3; step < 5; ++step) {
      apply(a, *opt_a, step);
      apply(b, *opt_b, step);
    }
    // Bit-identical (tolerance 0): same inputs, same operations, same order.
    for (std::size_t i = 0; i < a.size(); ++i)
      for (Eigen::Index j = 0; j < a[i].value.size(); ++j)
        REQUIRE_THAT(b[i].value.data()[j], WithinAbs(a[i].value.data()[j], 0.0));
  }
}

TEST_CASE("optimizer factory and misuse", "[optim][errors]") {
  OptimizerConfig c;
  CHECK_THROWS_AS(gyre::optim::make_optimizer("rmsprop", c), gyre::ConfigError);
  CHECK_THROWS_WITH(gyre::optim::make_optimizer("rmsprop", c), Catch::Contains("sgd, adam or adamw"));
  OptimizerConfig bad = c;
  bad.momentum = 1.0F;
  CHECK_THROWS_AS(gyre::optim::make_optimizer("sgd", bad), gyre::ConfigError);
  bad = c;
  bad.nesterov = true;  // without momentum
  CHECK_THROWS_WITH(gyre::optim::make_optimizer("sgd", bad), Catch::Contains("nesterov"));
  bad = c;
  bad.beta2 = 1.0F;
  CHECK_THROWS_WITH(gyre::optim::make_optimizer("adam", bad), Catch::Contains("beta2"));
  bad = c;
  bad.epsilon = 0.0F;
  CHECK_THROWS_AS(gyre::optim::make_optimizer("adamw", bad), gyre::ConfigError);
  bad = c;
  bad.weight_decay = -1.0F;
  CHECK_THROWS_AS(gyre::optim::make_optimizer("adamw", bad), gyre::ConfigError);

  ParameterStore store;
  add_pair(store, "w", 1.0F, 2.0F);
  auto opt = gyre::optim::make_optimizer("adam", c);
  CHECK_THROWS_AS(opt->state_tensors(), gyre::Error);  // not bound yet
  CHECK_THROWS_AS(opt->step(store, std::nanf("")), gyre::Error);
  CHECK_THROWS_AS(opt->step(store, -0.1F), gyre::Error);
  opt->step(store, 0.1F);
  // A store that grew a trainable parameter no longer matches the bound state.
  add_pair(store, "extra", 0.0F, 0.0F);
  CHECK_THROWS_WITH(opt->step(store, 0.1F), Catch::Contains("lost trainable") || Catch::Contains("extra"));
  // A sparse row outside the tensor is refused.
  ParameterStore emb_store;
  Parameter& emb = emb_store.add("tokens.vectors", 2, 2, true);
  emb.touched_rows = {5};
  auto sgd = gyre::optim::make_optimizer("sgd", c);
  CHECK_THROWS_WITH(sgd->step(emb_store, 0.1F), Catch::Contains("touched row 5"));
}

TEST_CASE("an update split into parts equals step() bit for bit", "[optim][parts]") {
  // The trainer runs update_part() from several threads; the split must not change any value
  // (the updates are element-wise). Sizes not multiples of 16 check the part boundaries.
  for (const ConfigCase& cc : all_configs()) {
    for (const int parts : {2, 3}) {
      INFO("optimizer " << cc.optimizer << ", momentum " << cc.config.momentum << ", parts " << parts);
      gyre::Rng rng(77);
      ParameterStore whole, split;
      for (ParameterStore* s : {&whole, &split}) {
        s->add("tokens.vectors", 7, 5, true);
        s->add("w", 37, 11);
        s->add("b", 1, 3);
      }
      for (std::size_t i = 0; i < whole.size(); ++i) {
        random_fill(whole[i].value, rng);
        split[i].value = whole[i].value;
      }
      auto opt_whole = gyre::optim::make_optimizer(cc.optimizer, cc.config);
      auto opt_split = gyre::optim::make_optimizer(cc.optimizer, cc.config);
      for (int step = 0; step < 3; ++step) {
        for (std::size_t i = 0; i < whole.size(); ++i) {
          random_fill(whole[i].grad, rng);
          split[i].grad = whole[i].grad;
        }
        whole[0].touched_rows = {6, 1, 3};
        split[0].touched_rows = whole[0].touched_rows;
        opt_whole->step(whole, 0.01F);
        opt_split->prepare_step(split, 0.01F);
        for (int part = parts - 1; part >= 0; --part) opt_split->update_part(split, part, parts);
        for (std::size_t i = 0; i < whole.size(); ++i)
          REQUIRE(std::memcmp(whole[i].value.data(), split[i].value.data(),
                              static_cast<std::size_t>(whole[i].value.size()) * sizeof(float)) == 0);
      }
      REQUIRE(opt_whole->step_count() == opt_split->step_count());
    }
  }
  // The ranges tile [0, size) in order, on multiples of 16.
  for (const Eigen::Index size : {Eigen::Index{0}, Eigen::Index{5}, Eigen::Index{16}, Eigen::Index{1000}}) {
    Eigen::Index next = 0;
    for (int part = 0; part < 3; ++part) {
      const auto [begin, end] = gyre::optim::Optimizer::part_range(size, part, 3);
      REQUIRE(begin == next);
      REQUIRE(end >= begin);
      REQUIRE((begin % 16 == 0 || begin == size));
      next = end;
    }
    REQUIRE(next == size);
  }
}

namespace {

std::vector<std::int32_t> ref_union(const std::vector<std::vector<std::int32_t>>& lists) {
  std::vector<std::int32_t> all;
  for (const auto& l : lists) all.insert(all.end(), l.begin(), l.end());
  std::sort(all.begin(), all.end());
  all.erase(std::unique(all.begin(), all.end()), all.end());
  return all;
}

bool same_bits(const Matrix& a, const Matrix& b) {
  return a.size() == b.size() &&
         std::memcmp(a.data(), b.data(), static_cast<std::size_t>(a.size()) * sizeof(float)) == 0;
}

// Worker stores as the trainer holds them: an embedding-like sparse-row parameter and two dense
// ones whose sizes are not multiples of the fused block (2048) or of 16.
void add_worker_params(ParameterStore& s) {
  s.add("tokens.vectors", 40, 9, true);
  s.add("w", 97, 53);  // 5141 values: three fused blocks, the last partial
  s.add("b", 1, 19);
}

}  // namespace

TEST_CASE("the fused update equals reduce, clip, step, zero and copy done one after another",
          "[optim][parts][fused]") {
  // issue 13: update_part(params, part, parts, fusion) does the trainer's reduction (adds in store
  // order), the clipping scale, the update, the zeroing and the copy into replicas in one pass;
  // every value, moment, gradient and replica must have the bits of the separate passes. Two
  // workers without scaling take update_block_fused (one call per block, Adam's AVX-512 kernel
  // doing all of it in one loop), three workers or a scale the block-by-block passes.
  for (const ConfigCase& cc : all_configs()) {
    for (const int parts : {1, 2, 3}) {
      for (const float scale : {1.0F, 0.37F}) {
        for (const int workers : {2, 3}) {
          INFO("optimizer " << cc.optimizer << ", momentum " << cc.config.momentum << ", parts " << parts
                            << ", scale " << scale << ", workers " << workers);
          gyre::Rng rng(20261203);
          // ref: master + two workers, separate passes; fused: the same with update_part.
          ParameterStore ref[3], fused[3];
          for (int w = 0; w < 3; ++w) {
            add_worker_params(ref[w]);
            add_worker_params(fused[w]);
          }
          for (std::size_t i = 0; i < ref[0].size(); ++i) {
            random_fill(ref[0][i].value, rng);
            for (int w = 0; w < 3; ++w) {
              ref[w][i].value = ref[0][i].value;
              fused[w][i].value = ref[0][i].value;
            }
          }
          auto opt_ref = gyre::optim::make_optimizer(cc.optimizer, cc.config);
          auto opt_fused = gyre::optim::make_optimizer(cc.optimizer, cc.config);
          std::vector<std::int32_t> scratch;
          std::vector<std::vector<std::int32_t>> rows = {{3, 7, 7, 1, 30}, {7, 2, 39, 2}, {0, 30, 11}};
          rows.resize(static_cast<std::size_t>(workers));
          for (int step = 0; step < 3; ++step) {
            for (int w = 0; w < workers; ++w) {
              for (std::size_t i = 1; i < ref[w].size(); ++i) {
                random_fill(ref[w][i].grad, rng);
                fused[w][i].grad = ref[w][i].grad;
              }
              // Sparse rows: only the listed rows carry gradient (a row listed twice as a backward
              // lists it, once per use).
              Parameter& r = ref[w][0];
              r.grad.setZero();
              for (const auto row : rows[static_cast<std::size_t>(w)])
                r.grad.row(row).setConstant(rng.uniform(-1.0F, 1.0F));
              r.touched_rows = rows[static_cast<std::size_t>(w)];
              fused[w][0].grad = r.grad;
              fused[w][0].touched_rows = r.touched_rows;
            }
            // Separate passes: reduce into the master (each row once), scale, step, zero, copy.
            for (int w = 1; w < workers; ++w) {
              for (std::size_t i = 1; i < ref[0].size(); ++i) ref[0][i].grad += ref[w][i].grad;
              ref[w][0].finalize_touched_rows();
              for (const auto row : ref[w][0].touched_rows)
                ref[0][0].grad.row(row) += ref[w][0].grad.row(row);
              ref[0][0].touched_rows.insert(ref[0][0].touched_rows.end(), ref[w][0].touched_rows.begin(),
                                            ref[w][0].touched_rows.end());
            }
            ref[0][0].finalize_touched_rows();
            for (std::size_t i = 1; i < ref[0].size(); ++i) ref[0][i].grad *= scale;
            for (const auto row : ref[0][0].touched_rows) ref[0][0].grad.row(row) *= scale;
            opt_ref->step(ref[0], 0.01F);
            for (int w = 1; w < workers; ++w) {
              for (std::size_t i = 0; i < ref[w].size(); ++i) {
                if (!ref[w][i].sparse_rows) ref[w][i].value = ref[0][i].value;
                if (ref[w][i].sparse_rows)
                  for (const auto row : ref[0][i].touched_rows)
                    ref[w][i].value.row(row) = ref[0][i].value.row(row);
              }
            }
            for (int w = 0; w < workers; ++w) ref[w].zero_grad();
            // Fused.
            ParameterStore* const all_others[] = {&fused[1], &fused[2]};
            const std::span<ParameterStore* const> others(all_others, static_cast<std::size_t>(workers - 1));
            gyre::optim::Optimizer::merge_touched_rows(fused[0], others, scratch);
            REQUIRE(fused[0][0].touched_rows == ref_union(rows));
            gyre::optim::Optimizer::Fusion f;
            f.add = others;
            f.grad_scale = scale;
            f.zero = true;
            f.zero_also = others;
            f.copy_to = others;
            opt_fused->prepare_step(fused[0], 0.01F);
            for (int part = parts - 1; part >= 0; --part)
              REQUIRE(opt_fused->update_part(fused[0], part, parts, f) ==
                      gyre::optim::Optimizer::GradCheck::kFinite);
            for (int w = 0; w < workers; ++w) fused[w][0].touched_rows.clear();
            for (int w = 0; w < workers; ++w)
              for (std::size_t i = 0; i < ref[w].size(); ++i) {
                INFO("worker " << w << ", parameter " << ref[w][i].name << ", step " << step);
                REQUIRE(same_bits(ref[w][i].value, fused[w][i].value));
                REQUIRE(fused[w][i].grad.isZero(0.0F));
              }
          }
          auto s_ref = opt_ref->state_tensors(), s_fused = opt_fused->state_tensors();
          REQUIRE(s_ref.size() == s_fused.size());
          for (std::size_t k = 0; k < s_ref.size(); ++k)
            REQUIRE(same_bits(*s_ref[k].second, *s_fused[k].second));
        }
      }
    }
  }
}

TEST_CASE("the fused update reports a gradient that is not finite", "[optim][parts][fused]") {
  const float inf = std::numeric_limits<float>::infinity();
  for (const float bad : {inf, -inf, std::numeric_limits<float>::quiet_NaN()}) {
    ParameterStore store;
    add_worker_params(store);
    store[1].grad(96, 52) = bad;  // the last value of the dense parameter
    store[1].grad(0, 0) = 1e38F;  // large but finite
    auto opt = gyre::optim::make_optimizer("adam", OptimizerConfig{});
    gyre::optim::Optimizer::Fusion f;
    opt->prepare_step(store, 0.01F);
    const auto check0 = opt->update_part(store, 0, 2, f);
    const auto check1 = opt->update_part(store, 1, 2, f);
    REQUIRE(check0 == gyre::optim::Optimizer::GradCheck::kFinite);  // part 0 holds the first half
    REQUIRE(check1 == (std::isnan(bad) ? gyre::optim::Optimizer::GradCheck::kNaN
                                       : gyre::optim::Optimizer::GradCheck::kInfinite));
  }
}
