// Learning-rate schedules at specific steps (formulas in include/gyre/optim/lr_schedule.hpp) and
// reduce-on-plateau behaviour.

#include <catch2/catch.hpp>

#include <cmath>

#include "gyre/core/error.hpp"
#include "gyre/optim/lr_schedule.hpp"

using Catch::Matchers::WithinAbs;
using gyre::optim::ScheduleConfig;

namespace {
ScheduleConfig warmup_config() {
  ScheduleConfig c;
  c.base_rate = 0.1F;
  c.warmup_steps = 4;
  c.total_steps = 12;
  c.floor_rate = 0.01F;
  return c;
}
}  // namespace

TEST_CASE("constant schedule with and without warm-up", "[optim][schedule]") {
  ScheduleConfig c;
  c.base_rate = 0.1F;
  auto s = gyre::optim::make_schedule("constant", c);
  CHECK(s->name() == "constant");
  CHECK_THAT(s->rate(0), WithinAbs(0.1, 1e-8));
  CHECK_THAT(s->rate(100000), WithinAbs(0.1, 1e-8));
  CHECK_FALSE(s->observe(1.0));
  CHECK(s->state().empty());
  c.warmup_steps = 4;
  auto w = gyre::optim::make_schedule("constant", c);
  // (s + 1) / 4 * 0.1: 0.025, 0.05, 0.075, 0.1, then 0.1
  CHECK_THAT(w->rate(0), WithinAbs(0.025, 1e-8));
  CHECK_THAT(w->rate(1), WithinAbs(0.05, 1e-8));
  CHECK_THAT(w->rate(3), WithinAbs(0.1, 1e-8));
  CHECK_THAT(w->rate(4), WithinAbs(0.1, 1e-8));
}

TEST_CASE("linear and cosine decay after warm-up", "[optim][schedule]") {
  const ScheduleConfig c = warmup_config();  // base 0.1, warm-up 4, total 12, floor 0.01
  auto lin = gyre::optim::make_schedule("linear", c);
  auto cos = gyre::optim::make_schedule("cosine", c);
  // Warm-up is shared: step 0 -> 0.1 * 1/4, step 3 -> 0.1.
  for (auto* s : {lin.get(), cos.get()}) {
    CHECK_THAT(s->rate(0), WithinAbs(0.025, 1e-8));
    CHECK_THAT(s->rate(3), WithinAbs(0.1, 1e-8));
    CHECK_THAT(s->rate(4), WithinAbs(0.1, 1e-8));     // p = 0
    CHECK_THAT(s->rate(12), WithinAbs(0.01, 1e-8));   // p = 1
    CHECK_THAT(s->rate(500), WithinAbs(0.01, 1e-8));  // clamped
  }
  // p = (s - 4) / 8.
  // linear: 0.01 + 0.09 * (1 - p): s=6 (p=0.25) -> 0.0775, s=8 (p=0.5) -> 0.055, s=10 -> 0.0325
  CHECK_THAT(lin->rate(6), WithinAbs(0.0775, 1e-8));
  CHECK_THAT(lin->rate(8), WithinAbs(0.055, 1e-8));
  CHECK_THAT(lin->rate(10), WithinAbs(0.0325, 1e-8));
  // cosine (SGDR eq. 5): 0.01 + 0.045 * (1 + cos(pi p)): p=0.25 -> 0.01 + 0.045 * 1.7071067812 =
  // 0.0868198052, p=0.5 -> 0.055, p=0.75 -> 0.01 + 0.045 * 0.2928932188 = 0.0231801948
  CHECK_THAT(cos->rate(6), WithinAbs(0.0868198052, 1e-8));
  CHECK_THAT(cos->rate(8), WithinAbs(0.055, 1e-8));
  CHECK_THAT(cos->rate(10), WithinAbs(0.0231801948, 1e-8));

  ScheduleConfig bad = c;
  bad.total_steps = 4;  // not after the warm-up
  CHECK_THROWS_WITH(gyre::optim::make_schedule("linear", bad), Catch::Contains("total_steps"));
  bad = c;
  bad.floor_rate = 0.5F;  // above the base rate
  CHECK_THROWS_AS(gyre::optim::make_schedule("cosine", bad), gyre::ConfigError);
  CHECK_THROWS_WITH(gyre::optim::make_schedule("step", c),
                    Catch::Contains("constant, linear, cosine or plateau"));
}

TEST_CASE("reduce-on-plateau", "[optim][schedule][plateau]") {
  ScheduleConfig c;
  c.base_rate = 1.0F;
  c.plateau_factor = 0.5F;
  c.plateau_patience = 2;
  c.plateau_min_rate = 0.2F;

  SECTION("lower is better") {
    auto s = gyre::optim::make_schedule("plateau", c);
    auto* p = dynamic_cast<gyre::optim::PlateauSchedule*>(s.get());
    REQUIRE(p != nullptr);
    CHECK_FALSE(s->observe(1.0));   // first value: best = 1.0
    CHECK_FALSE(s->observe(0.9));   // improvement
    CHECK_FALSE(s->observe(0.95));  // miss 1
    CHECK(p->misses() == 1);
    CHECK_THAT(s->rate(7), WithinAbs(1.0, 0.0));
    CHECK(s->observe(0.92));  // miss 2 = patience -> 1.0 * 0.5
    CHECK_THAT(s->rate(8), WithinAbs(0.5, 1e-8));
    CHECK(p->misses() == 0);
    CHECK_FALSE(s->observe(0.85));  // improvement: best = 0.85
    CHECK_FALSE(s->observe(0.85));  // equal is not better: miss 1
    CHECK(s->observe(0.86));        // miss 2 -> 0.25
    CHECK_THAT(s->rate(9), WithinAbs(0.25, 1e-8));
    CHECK_FALSE(s->observe(0.9));
    CHECK(s->observe(0.9));  // 0.125 is below the minimum: 0.2
    CHECK_THAT(s->rate(10), WithinAbs(0.2, 1e-8));
    CHECK_FALSE(s->observe(0.9));
    CHECK_FALSE(s->observe(0.9));  // at the minimum already: no change reported
    CHECK_THAT(s->rate(11), WithinAbs(0.2, 1e-8));
    CHECK_THROWS_AS(s->observe(std::nan("")), gyre::DivergenceError);
  }
  SECTION("higher is better, with a minimum gain") {
    c.plateau_goal = gyre::optim::PlateauGoal::kHigher;
    c.plateau_min_gain = 0.01;
    auto s = gyre::optim::make_schedule("plateau", c);
    CHECK_FALSE(s->observe(0.50));
    CHECK_FALSE(s->observe(0.505));  // +0.005 < 0.01: miss 1, best stays 0.50
    CHECK_FALSE(s->observe(0.52));   // +0.02: improvement, best 0.52
    CHECK_FALSE(s->observe(0.40));   // miss 1
    CHECK(s->observe(0.525));        // +0.005: miss 2 -> 0.5
    CHECK_THAT(s->rate(0), WithinAbs(0.5, 1e-8));
  }
  SECTION("state round trip continues identically") {
    auto a = gyre::optim::make_schedule("plateau", c);
    a->observe(1.0);
    a->observe(0.8);
    a->observe(0.9);  // miss 1
    auto b = gyre::optim::make_schedule("plateau", c);
    b->load_state(a->state());
    for (const double metric : {0.95, 0.7, 0.75, 0.76, 0.8}) {
      CHECK(a->observe(metric) == b->observe(metric));
      CHECK_THAT(b->rate(0), WithinAbs(a->rate(0), 0.0));
    }
    // 0.95: miss 2 -> 0.5; 0.7 improves; 0.75, 0.76 -> 0.25; 0.8 miss 1.
    CHECK_THAT(b->rate(0), WithinAbs(0.25, 1e-8));
    auto state = a->state();
    state.pop_back();
    CHECK_THROWS_WITH(b->load_state(state), Catch::Contains("misses"));
    state = a->state();
    state.emplace_back("surprise", 1.0);
    CHECK_THROWS_WITH(b->load_state(state), Catch::Contains("surprise"));
  }
  SECTION("bad settings") {
    ScheduleConfig bad = c;
    bad.plateau_factor = 1.0F;
    CHECK_THROWS_WITH(gyre::optim::make_schedule("plateau", bad), Catch::Contains("plateau_factor"));
    bad = c;
    bad.plateau_patience = 0;
    CHECK_THROWS_AS(gyre::optim::make_schedule("plateau", bad), gyre::ConfigError);
  }
}
