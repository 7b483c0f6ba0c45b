// Global-norm clipping (Pascanu, Mikolov & Bengio 2013, Algorithm 1) against hand-computed norms.

#include <catch2/catch.hpp>

#include <cmath>
#include <limits>

#include "gyre/core/error.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/optim/grad_clip.hpp"

using Catch::Matchers::WithinAbs;
using gyre::nn::ParameterStore;

namespace {
// grads: a = (3, 4), b = (12), frozen = (100) [ignored], emb rows: 0 untouched, 1 = (0, 0, 0),
// 2 touched = (0, 0, 0)... see each test.
void build(ParameterStore& s) {
  auto& a = s.add("a", 1, 2);
  a.grad << 3.0F, 4.0F;
  auto& b = s.add("b", 1, 1);
  b.grad << 12.0F;
  auto& frozen = s.add("frozen", 1, 1);
  frozen.trainable = false;
  frozen.grad << 100.0F;
}
}  // namespace

TEST_CASE("global gradient norm and clipping", "[optim][clip]") {
  ParameterStore s;
  build(s);
  // |g| = sqrt(3^2 + 4^2 + 12^2) = sqrt(169) = 13 (the frozen parameter does not count).
  CHECK_THAT(gyre::optim::global_grad_norm(s), WithinAbs(13.0, 1e-12));

  SECTION("below the threshold nothing changes") {
    const auto r = gyre::optim::clip_grad_norm(s, 20.0);
    CHECK_THAT(r.norm, WithinAbs(13.0, 1e-12));
    CHECK(r.finite);
    CHECK_FALSE(r.clipped);
    CHECK_THAT(s.at("a").grad(0, 0), WithinAbs(3.0, 0.0));
  }
  SECTION("above the threshold every gradient is scaled by threshold / norm") {
    // threshold 6.5: scale 6.5 / 13 = 0.5 -> a = (1.5, 2), b = 6, frozen untouched.
    const auto r = gyre::optim::clip_grad_norm(s, 6.5);
    CHECK_THAT(r.norm, WithinAbs(13.0, 1e-12));
    CHECK(r.clipped);
    CHECK_THAT(s.at("a").grad(0, 0), WithinAbs(1.5, 1e-6));
    CHECK_THAT(s.at("a").grad(0, 1), WithinAbs(2.0, 1e-6));
    CHECK_THAT(s.at("b").grad(0, 0), WithinAbs(6.0, 1e-6));
    CHECK_THAT(s.at("frozen").grad(0, 0), WithinAbs(100.0, 0.0));
    // After clipping the norm is the threshold.
    CHECK_THAT(gyre::optim::global_grad_norm(s), WithinAbs(6.5, 1e-5));
  }
}

TEST_CASE("clipping reads and scales only touched rows of sparse parameters", "[optim][clip]") {
  ParameterStore s;
  auto& emb = s.add("tokens.vectors", 3, 2, true);
  emb.grad << 1.0F, 2.0F,  //
      50.0F, 50.0F,        // row 1 is not listed: by contract zero, here poisoned to prove it is not read
      2.0F, 4.0F;
  emb.touched_rows = {2, 0, 2};  // unsorted with a duplicate: counted once
  // |g| = sqrt(1 + 4 + 4 + 16) = 5.
  CHECK_THAT(gyre::optim::global_grad_norm(s), WithinAbs(5.0, 1e-12));
  const auto r = gyre::optim::clip_grad_norm(s, 1.0);
  CHECK_THAT(r.norm, WithinAbs(5.0, 1e-12));
  // scale 1/5: row 0 -> (0.2, 0.4), row 2 -> (0.4, 0.8); row 1 untouched.
  CHECK_THAT(emb.grad(0, 1), WithinAbs(0.4, 1e-6));
  CHECK_THAT(emb.grad(2, 1), WithinAbs(0.8, 1e-6));
  CHECK_THAT(emb.grad(1, 0), WithinAbs(50.0, 0.0));
  REQUIRE(emb.touched_rows.size() == 2);  // normalised by clip_grad_norm
}

TEST_CASE("non-finite gradients are reported and left alone", "[optim][clip]") {
  ParameterStore s;
  build(s);
  SECTION("NaN") {
    s.at("b").grad(0, 0) = std::numeric_limits<float>::quiet_NaN();
    const auto r = gyre::optim::clip_grad_norm(s, 1.0);
    CHECK_FALSE(r.finite);
    CHECK(std::isnan(r.norm));
    CHECK_FALSE(r.clipped);
    CHECK_THAT(s.at("a").grad(0, 0), WithinAbs(3.0, 0.0));
  }
  SECTION("infinity") {
    s.at("a").grad(0, 1) = std::numeric_limits<float>::infinity();
    const auto r = gyre::optim::clip_grad_norm(s, 1.0);
    CHECK_FALSE(r.finite);
    CHECK(std::isinf(r.norm));
  }
  SECTION("large finite float gradients do not overflow the double accumulator") {
    // 3e30^2 overflows float but not double: norm = 3e30 * sqrt(2).
    auto& big = s.add("big", 1, 2);
    big.grad << 3e30F, 3e30F;
    const auto r = gyre::optim::clip_grad_norm(s, 1.0);
    CHECK(r.finite);
    CHECK_THAT(r.norm / 3e30, WithinAbs(std::sqrt(2.0), 1e-6));
  }
  CHECK_THROWS_AS(gyre::optim::clip_grad_norm(s, 0.0), gyre::Error);
}
