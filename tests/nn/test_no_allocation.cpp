// "No heap allocation inside the time loop" (DESIGN.md Numerics, STYLE.md Performance): after a
// warm-up call, forward + backward of the same (or a smaller) batch shape must not call malloc at
// all, and the layers' caches must not move. Counted by interposing malloc in this executable
// (glibc exports the real allocator as __libc_malloc); skipped under AddressSanitizer, which owns
// malloc itself.

#include <catch2/catch.hpp>
#include <cstddef>
#include <utility>
#include <vector>

#include "gyre/nn/gru_layer.hpp"
#include "gyre/nn/lstm_layer.hpp"
#include "gyre/nn/rnn_stack.hpp"
#include "nn_test_util.hpp"

#include "support/malloc_counter.hpp"  // defines malloc: this file only, in this executable

using namespace gyre;
using namespace gyre::nn;
using gyre::nn::test::random_matrix;

namespace {

// Both tests' stack: two bidirectional layers with dropout between them.
RnnStackConfig two_bidirectional_layers(CellType cell, int input, int hidden) {
  return {.cell = cell,
          .input_size = input,
          .hidden_size = hidden,
          .layers = 2,
          .bidirectional = true,
          .dropout = 0.2f};
}

}  // namespace

TEST_CASE("RnnStack forward+backward allocate nothing after warm-up", "[nn][alloc]") {
#if !GYRE_COUNT_MALLOC
  WARN("malloc counting unavailable (sanitizer build); only capacities are checked");
#endif
  for (const CellType cell : {CellType::kLstm, CellType::kGru}) {
    DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm" : "gru")) {
      // Realistic sizes so Eigen takes its blocked GEMM path (small products are unrolled).
      const int T = 12, D = 64, H = 128;
      const std::vector<int> lengths = {12, 7, 3, 12, 9, 1, 5, 11, 12, 2, 8, 6, 10, 4, 12, 12,
                                        12, 7, 3, 12, 9, 1, 5, 11, 12, 2, 8, 6, 10, 4, 12, 12};
      const auto B = static_cast<Eigen::Index>(lengths.size());
      ParameterStore store;
      const RnnStackConfig cfg = two_bidirectional_layers(cell, D, H);
      RnnStack stack(cfg, store);
      Rng rng(3);
      stack.init_parameters(rng);
      const Matrix x = random_matrix(T * B, D, rng);
      const Matrix g = random_matrix(T * B, stack.output_size(), rng);
      Matrix out, dx;
      RnnState final;
      auto run = [&](const Matrix& xs, int Ts, std::span<const int> lens, const Matrix& gs) {
        stack.forward(xs, Ts, lens, out, true, &rng, nullptr, &final);
        stack.backward(gs, dx);
      };
      run(x, T, lengths, g);  // warm-up sizes every cache
      std::vector<std::size_t> caps;
      for (int k = 0; k < cfg.layers; ++k)
        for (int d = 0; d < 2; ++d) {
          auto& l = stack.layer(k, d);
          caps.push_back(cell == CellType::kLstm ? dynamic_cast<LstmLayer&>(l).workspace_capacity()
                                                 : dynamic_cast<GruLayer&>(l).workspace_capacity());
        }
#if GYRE_COUNT_MALLOC
      g_mallocs = 0;
      g_counting = true;
#endif
      run(x, T, lengths, g);
#if GYRE_COUNT_MALLOC
      g_counting = false;
      CHECK(g_mallocs == 0);
#endif
      std::size_t i = 0;
      for (int k = 0; k < cfg.layers; ++k)
        for (int d = 0; d < 2; ++d) {
          auto& l = stack.layer(k, d);
          const std::size_t cap = cell == CellType::kLstm ? dynamic_cast<LstmLayer&>(l).workspace_capacity()
                                                          : dynamic_cast<GruLayer&>(l).workspace_capacity();
          CHECK(cap == caps[i++]);
        }
    }
  }
}

TEST_CASE("RnnStack allocates nothing for batches of changing shape once the largest was seen",
          "[nn][alloc]") {
  // Length-bucketed training changes T and B from step to step; the caller's buffers
  // (MatrixBuffer) and the stack's own keep their storage, so after a warm-up pass over the shapes
  // no step allocates, whatever the order.
  for (const CellType cell : {CellType::kLstm, CellType::kGru}) {
    DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm" : "gru")) {
      const int D = 64, H = 128;
      ParameterStore store;
      RnnStack stack(two_bidirectional_layers(cell, D, H), store);
      Rng rng(3);
      stack.init_parameters(rng);
      // (T, lengths) per batch: several padded lengths and batch sizes, not sorted.
      const std::vector<std::pair<int, std::vector<int>>> shapes = {
          {7, {7, 3, 5}},
          {19, {19, 2, 11, 19, 4, 8, 13}},
          {1, {1}},
          {12, {12, 9, 1, 5, 3, 7, 10, 12, 6, 2, 11}},
          {4, {4, 4}}};
      MatrixBuffer x_buf, g_buf, out_buf, dx_buf;
      auto run = [&](std::size_t k) {
        const int T = shapes[k].first;
        const std::vector<int>& lens = shapes[k].second;
        const auto TB = static_cast<Eigen::Index>(T) * static_cast<Eigen::Index>(lens.size());
        MatrixMap x = x_buf.shape(TB, D);
        for (Eigen::Index i = 0; i < x.size(); ++i) x.data()[i] = rng.uniform() - 0.5f;
        MatrixMap out = out_buf.shape(TB, stack.output_size());
        stack.forward(x, T, lens, out, true, &rng);
        MatrixMap g = g_buf.shape(TB, stack.output_size());
        for (Eigen::Index i = 0; i < g.size(); ++i) g.data()[i] = rng.uniform() - 0.5f;
        stack.backward(g, dx_buf.shape(TB, D));
      };
      for (std::size_t k = 0; k < shapes.size(); ++k) run(k);  // warm-up: every shape once
#if GYRE_COUNT_MALLOC
      g_mallocs = 0;
      g_counting = true;
#endif
      for (const std::size_t k : {2u, 0u, 4u, 1u, 3u, 0u, 1u}) run(k);
#if GYRE_COUNT_MALLOC
      g_counting = false;
      CHECK(g_mallocs == 0);
#endif
    }
  }
}
