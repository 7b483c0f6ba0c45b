// The in-process gradient reduction (gyre/train/reducer.hpp): what the workers' replicas add into
// the master. Values are small integers, so every sum is exact and written beside its check.

#include <catch2/catch.hpp>

#include "gyre/nn/parameter.hpp"
#include "gyre/train/reducer.hpp"

using gyre::nn::ParameterStore;

namespace {

// A [4 x 2] sparse-row parameter (an embedding) and a [1 x 3] dense one.
void add_params(ParameterStore& s) {
  s.add("tokens.vectors", 4, 2, true);
  s.add("b", 1, 3);
}

}  // namespace

TEST_CASE("a sparse row a backward listed twice is added once", "[train][reduce]") {
  // An embedding's backward adds a token's gradient into its row at every use and lists the row
  // at every use (nn::Embedding::backward): token 2 used twice by worker 1 leaves row 2 = the sum
  // of both uses, listed twice. The reduction must add that row once.
  for (const bool split : {false, true}) {
    INFO("reduce_part: " << split);
    ParameterStore master, worker;
    add_params(master);
    add_params(worker);
    master[0].grad.row(1) << 1, 1;
    master[0].touched_rows = {1};
    worker[0].grad.row(2) << 3, 5;  // two uses: (1, 2) + (2, 3)
    worker[0].grad.row(1) << 10, 20;
    worker[0].touched_rows = {2, 1, 2};
    master[1].grad << 1, 2, 3;
    worker[1].grad << 4, 5, 6;
    ParameterStore* others[] = {&worker};
    gyre::train::InProcessReducer reducer;
    if (split) {
      for (int part = 0; part < 2; ++part) reducer.reduce_part(master, others, part, 2);
    } else {
      reducer.reduce(master, others);
    }
    CHECK(master[0].grad(2, 0) == 3.0F);   // 0 + 3, not 0 + 3 + 3
    CHECK(master[0].grad(2, 1) == 5.0F);   // 0 + 5
    CHECK(master[0].grad(1, 0) == 11.0F);  // 1 + 10
    CHECK(master[0].grad(1, 1) == 21.0F);  // 1 + 20
    CHECK(master[0].grad.row(0).isZero(0.0F));
    CHECK(master[0].grad.row(3).isZero(0.0F));
    CHECK(master[0].touched_rows == std::vector<std::int32_t>{1, 2});
    CHECK(master[1].grad(0, 0) == 5.0F);  // 1 + 4
    CHECK(master[1].grad(0, 2) == 9.0F);  // 3 + 6
  }
}
