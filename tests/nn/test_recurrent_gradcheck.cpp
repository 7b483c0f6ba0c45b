// Central finite-difference checks of the hand-written LSTM/GRU backward passes (STYLE.md: "Gradient-check
// every layer against central differences"), on masked batches, both directions, stacked and
// bidirectional, with dropout between layers and with a carried initial state.

#include <catch2/catch.hpp>
#include <memory>
#include <vector>

#include "gyre/nn/gru_layer.hpp"
#include "gyre/nn/lstm_layer.hpp"
#include "gyre/nn/rnn_stack.hpp"
#include "nn_test_util.hpp"

using namespace gyre;
using namespace gyre::nn;
using gyre::nn::test::check_gradient;
using gyre::nn::test::dot;
using gyre::nn::test::random_matrix;

namespace {

std::unique_ptr<RecurrentLayer> make_layer(CellType cell, ParameterStore& store, int D, int H, bool reverse) {
  if (cell == CellType::kLstm) return std::make_unique<LstmLayer>(store, "l", D, H, reverse);
  return std::make_unique<GruLayer>(store, "l", D, H, reverse);
}

// Biases start at 0 / 1; move every parameter off its init so each term of the gradient matters.
void jitter(ParameterStore& store, Rng& rng, float scale) {
  for (auto& p : store) p.value += random_matrix(p.value.rows(), p.value.cols(), rng, scale);
}

}  // namespace

TEST_CASE("recurrent layer gradients match central differences", "[nn][gradcheck]") {
  const int T = 5, D = 4;
  const std::vector<int> lengths = {5, 2, 3, 0};  // 0: no step in this window (state passes through)
  const auto B = static_cast<Eigen::Index>(lengths.size());
  // H = 16 takes the fused step (AVX-512 or AVX2) where the CPU has it (src/nn/detail/fast_kernels.hpp).
  for (const int H : {3, 16})
    for (const CellType cell : {CellType::kLstm, CellType::kGru}) {
      for (const bool reverse : {false, true}) {
        DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm" : "gru")
                        << (reverse ? " reverse" : " forward") << " H " << H) {
          ParameterStore store;
          auto layer = make_layer(cell, store, D, H, reverse);
          Rng rng(1234);
          layer->init_parameters(rng);
          jitter(store, rng, 0.3f);
          Matrix x = random_matrix(T * B, D, rng);
          Matrix h0 = random_matrix(B, H, rng, 0.5f), c0 = random_matrix(B, H, rng, 0.5f);
          const Matrix g = random_matrix(T * B, H, rng);
          const Matrix g_final = random_matrix(B, H, rng);
          Matrix out(T * B, H);
          MatrixBuffer h0_in, c0_in, h_final;  // the layer's state arguments
          // The final state is an output too; its gradient is not propagated (window boundary), so
          // the loss uses only `out`; h_final is checked for equality with the last valid output.
          auto loss = [&] {
            h0_in.assign(h0);
            c0_in.assign(c0);
            layer->forward(x, T, lengths, out, &h0_in, &c0_in, &h_final, nullptr);
            return dot(g, out);
          };
          store.zero_grad();
          loss();
          for (Eigen::Index b = 0; b < B; ++b) {
            const int len = lengths[static_cast<std::size_t>(b)];
            const Eigen::Index last = len == 0 ? -1 : (reverse ? 0 : len - 1) * B + b;
            for (Eigen::Index j = 0; j < H; ++j) {
              const float expect = last < 0 ? h0(b, j) : out(last, j);
              CHECK(h_final.view()(b, j) == Approx(expect).margin(0));  // a copy of the same value: exact
            }
            for (Eigen::Index t = len; t < T; ++t) CHECK(out.row(t * B + b).isZero(0.0f));
          }
          Matrix dx, dh0, dc0;
          layer->backward(g, &dx, false, &dh0, &dc0);
          int n = 0;
          for (auto& p : store) n += check_gradient(p.name, p.value, p.grad, loss);
          n += check_gradient("x", x, dx, loss);
          n += check_gradient("h0", h0, dh0, loss);
          if (cell == CellType::kLstm) n += check_gradient("c0", c0, dc0, loss);
          CHECK(n > 100);
          (void)g_final;
        }
      }
    }
}

TEST_CASE("stacked bidirectional RnnStack gradients match central differences", "[nn][gradcheck]") {
  const int T = 4, D = 3, H = 3;
  const std::vector<int> lengths = {2, 4, 1};
  const auto B = static_cast<Eigen::Index>(lengths.size());
  for (const CellType cell : {CellType::kLstm, CellType::kGru}) {
    for (const bool bidirectional : {false, true}) {
      DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm" : "gru") << (bidirectional ? " bi" : " uni")) {
        ParameterStore store;
        const RnnStackConfig cfg{.cell = cell,
                                 .input_size = D,
                                 .hidden_size = H,
                                 .layers = 2,
                                 .bidirectional = bidirectional,
                                 .dropout = 0.25f};
        RnnStack stack(cfg, store);
        Rng rng(99);
        stack.init_parameters(rng);
        jitter(store, rng, 0.2f);
        Matrix x = random_matrix(T * B, D, rng);
        const Matrix g = random_matrix(T * B, stack.output_size(), rng);
        // Carried state for the forward directions (truncated BPTT); gradient w.r.t. it is cut.
        RnnState init;
        for (int k = 0; k < cfg.layers * stack.directions(); ++k) {
          init.h.emplace_back().assign(random_matrix(B, H, rng, 0.5f));
          init.c.emplace_back().assign(random_matrix(B, H, rng, 0.5f));
        }
        Matrix out;
        // Re-seeding the dropout Rng before every forward fixes the mask, so the loss is a smooth
        // function of the parameters and finite differences apply.
        auto loss = [&] {
          Rng drop(7);
          stack.forward(x, T, lengths, out, true, &drop, &init);
          return dot(g, out);
        };
        store.zero_grad();
        loss();
        Matrix dx;
        stack.backward(g, dx);
        for (auto& p : store) check_gradient(p.name, p.value, p.grad, loss);
        check_gradient("x", x, dx, loss);
      }
    }
  }
}
