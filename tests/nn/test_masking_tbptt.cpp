// Padding/masking invariance and truncated BPTT (Williams & Peng 1990) for RnnStack.

#include <catch2/catch.hpp>
#include <vector>

#include "gyre/nn/rnn_stack.hpp"
#include "nn_test_util.hpp"

using namespace gyre;
using namespace gyre::nn;
using gyre::nn::test::all_close;
using gyre::nn::test::check_gradient;
using gyre::nn::test::dot;
using gyre::nn::test::random_matrix;

namespace {

RnnStackConfig make_config(CellType cell, bool bidirectional, int layers, int D, int H) {
  return {.cell = cell, .input_size = D, .hidden_size = H, .layers = layers, .bidirectional = bidirectional};
}

// Rows of sequence b (steps 0..len-1) of a time-major [T*B x F] buffer, as a [len x F] matrix.
Matrix sequence_rows(const Matrix& m, Eigen::Index B, Eigen::Index b, int len) {
  Matrix s(len, m.cols());
  for (int t = 0; t < len; ++t) s.row(t) = m.row(t * B + b);
  return s;
}

std::vector<Matrix> grads(const ParameterStore& store) {
  std::vector<Matrix> g;
  for (const auto& p : store) g.push_back(p.grad);
  return g;
}

}  // namespace

// Tolerances: the batched and single-sequence runs do the same arithmetic per row, but the GEMM
// kernels may block differently for different batch sizes, so results agree to float32 rounding
// (1e-5 relative, 1e-6 absolute; common practice for float32 reorderings).
TEST_CASE("a sequence's outputs and gradients do not depend on its batch neighbours or padding",
          "[nn][masking]") {
  const int D = 5, H = 4, T = 7;
  const std::vector<int> lengths = {7, 3, 1, 5};
  const auto B = static_cast<Eigen::Index>(lengths.size());
  for (const CellType cell : {CellType::kLstm, CellType::kGru}) {
    DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm" : "gru") << " 2-layer bidirectional") {
      ParameterStore store;
      RnnStack stack(make_config(cell, true, 2, D, H), store);
      Rng rng(11);
      stack.init_parameters(rng);
      Matrix x = random_matrix(T * B, D, rng);
      const Matrix g = random_matrix(T * B, stack.output_size(), rng);
      Matrix out, dx;
      store.zero_grad();
      stack.forward(x, T, lengths, out, false, nullptr);
      stack.backward(g, dx);
      const std::vector<Matrix> batch_grads = grads(store);
      // Padded rows: zero output, zero input gradient.
      for (Eigen::Index b = 0; b < B; ++b)
        for (int t = lengths[static_cast<std::size_t>(b)]; t < T; ++t) {
          CHECK(out.row(t * B + b).isZero(0.0f));
          CHECK(dx.row(t * B + b).isZero(0.0f));
        }

      // Each sequence alone, with extra padding (T + 3 steps) filled with garbage.
      std::vector<Matrix> sum_grads;
      for (const auto& gm : batch_grads) sum_grads.push_back(Matrix::Zero(gm.rows(), gm.cols()));
      for (Eigen::Index b = 0; b < B; ++b) {
        const int len = lengths[static_cast<std::size_t>(b)];
        const int T1 = T + 3;
        Matrix x1 = random_matrix(T1, D, rng, 5.0f);  // padding garbage
        Matrix g1 = random_matrix(T1, stack.output_size(), rng, 5.0f);
        x1.topRows(len) = sequence_rows(x, B, b, len);
        g1.topRows(len) = sequence_rows(g, B, b, len);
        const std::vector<int> len1 = {len};
        Matrix out1, dx1;
        store.zero_grad();
        stack.forward(x1, T1, len1, out1, false, nullptr);
        stack.backward(g1, dx1);
        CHECK(all_close(out1.topRows(len), sequence_rows(out, B, b, len), 1e-5, 1e-6));
        CHECK(all_close(dx1.topRows(len), sequence_rows(dx, B, b, len), 1e-5, 1e-6));
        CHECK(out1.bottomRows(T1 - len).isZero(0.0f));
        CHECK(dx1.bottomRows(T1 - len).isZero(0.0f));
        for (std::size_t i = 0; i < store.size(); ++i) sum_grads[i] += store[i].grad;
      }
      // Parameter gradients of the batch are the sum of the per-sequence gradients.
      for (std::size_t i = 0; i < store.size(); ++i) {
        INFO(store[i].name);
        CHECK(all_close(batch_grads[i], sum_grads[i], 1e-5, 1e-6));
      }
    }
  }
}

namespace {

// Runs the truncated-BPTT procedure a trainer uses: windows of K steps, each window's forward
// starts from the previous window's final state, gradients accumulate over windows.
// Returns the summed loss sum_w <G_w, out_w>.
double run_tbptt(RnnStack& stack, ParameterStore& store, const Matrix& x, const Matrix& g, int T,
                 const std::vector<int>& lengths, int K) {
  const auto B = static_cast<Eigen::Index>(lengths.size());
  store.zero_grad();
  RnnState state;
  bool have_state = false;
  double loss = 0.0;
  for (int t0 = 0; t0 < T; t0 += K) {
    const int Tw = std::min(K, T - t0);
    std::vector<int> lw;
    for (const int len : lengths) lw.push_back(std::clamp(len - t0, 0, Tw));
    const Matrix xw = x.middleRows(t0 * B, Tw * B);
    const Matrix gw = g.middleRows(t0 * B, Tw * B);
    Matrix out, dx;
    RnnState next;
    stack.forward(xw, Tw, lw, out, false, nullptr, have_state ? &state : nullptr, &next);
    loss += dot(gw, out);
    stack.backward(gw, dx);
    state = next;
    have_state = true;
  }
  return loss;
}

}  // namespace

TEST_CASE("truncated BPTT: window >= length equals full BPTT, shorter windows equal a hand-cut reference",
          "[nn][tbptt]") {
  const int D = 3, H = 3, T = 7;
  const std::vector<int> lengths = {7, 5, 2};
  const auto B = static_cast<Eigen::Index>(lengths.size());
  for (const CellType cell : {CellType::kLstm, CellType::kGru}) {
    DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm" : "gru") << " 2-layer") {
      ParameterStore store;
      RnnStack stack(make_config(cell, false, 2, D, H), store);
      Rng rng(21);
      stack.init_parameters(rng);
      for (auto& p : store) p.value += random_matrix(p.value.rows(), p.value.cols(), rng, 0.3f);
      Matrix x = random_matrix(T * B, D, rng);
      const Matrix g = random_matrix(T * B, stack.output_size(), rng);

      // Full BPTT.
      Matrix out, dx;
      store.zero_grad();
      stack.forward(x, T, lengths, out, false, nullptr);
      const double full_loss = dot(g, out);
      stack.backward(g, dx);
      const std::vector<Matrix> full = grads(store);

      SECTION("window covering the whole batch is full BPTT, bit for bit") {
        const double loss = run_tbptt(stack, store, x, g, T, lengths, T);
        CHECK(loss == full_loss);
        for (std::size_t i = 0; i < store.size(); ++i) CHECK(store[i].grad == full[i]);
      }
      SECTION("window 5 >= every length (T = 7): the empty second window changes nothing") {
        // All sequences end inside the first window; the second window has lengths {0, 0, 0}:
        // states pass through, nothing is added. Same arithmetic as full BPTT except the GEMMs
        // see 5 instead of 7 time blocks (zero rows), so agreement is to float32 rounding.
        const std::vector<int> short_lengths = {5, 4, 2};
        store.zero_grad();
        stack.forward(x, T, short_lengths, out, false, nullptr);
        const double full_short = dot(g, out);
        stack.backward(g, dx);
        const std::vector<Matrix> full_short_grads = grads(store);
        const double loss = run_tbptt(stack, store, x, g, T, short_lengths, 5);
        CHECK(loss == Approx(full_short).epsilon(1e-6));
        for (std::size_t i = 0; i < store.size(); ++i) {
          INFO(store[i].name);
          CHECK(all_close(store[i].grad, full_short_grads[i], 1e-6, 1e-7));
        }
      }
      SECTION("window 3 equals finite differences of the loss with boundary states held fixed") {
        const int K = 3;
        run_tbptt(stack, store, x, g, T, lengths, K);
        const std::vector<Matrix> tbptt = grads(store);
        // Hand-cut reference: the state entering window w is computed by a separate forward
        // over the prefix x[0, w*K) (not by chaining windows) and then held constant while the
        // parameters are perturbed, so only the window's own steps carry gradient.
        std::vector<RnnState> boundary;
        std::vector<int> starts;
        for (int t0 = 0; t0 < T; t0 += K) {
          starts.push_back(t0);
          RnnState s;
          if (t0 > 0) {
            std::vector<int> lp;
            for (const int len : lengths) lp.push_back(std::min(len, t0));
            const Matrix xp = x.topRows(t0 * B);
            Matrix op;
            stack.forward(xp, t0, lp, op, false, nullptr, nullptr, &s);
          }
          boundary.push_back(s);
        }
        auto cut_loss = [&] {
          double loss = 0.0;
          for (std::size_t w = 0; w < starts.size(); ++w) {
            const int t0 = starts[w], Tw = std::min(K, T - t0);
            std::vector<int> lw;
            for (const int len : lengths) lw.push_back(std::clamp(len - t0, 0, Tw));
            const Matrix xw = x.middleRows(t0 * B, Tw * B);
            Matrix o;
            stack.forward(xw, Tw, lw, o, false, nullptr, t0 > 0 ? &boundary[w] : nullptr);
            loss += dot(g.middleRows(t0 * B, Tw * B), o);
          }
          return loss;
        };
        for (std::size_t i = 0; i < store.size(); ++i)
          check_gradient(store[i].name, store[i].value, tbptt[i], cut_loss);
        // The cut is real: truncated and full gradients of the recurrent weights differ.
        double diff = 0.0;
        for (std::size_t i = 0; i < store.size(); ++i)
          diff = std::max(diff, double((tbptt[i] - full[i]).cwiseAbs().maxCoeff()));
        CHECK(diff > 1e-3);
      }
    }
  }
}
