// Weight packs shared by replicas (RecurrentLayer::pack_weights / read_packs_from, issue 13): a
// layer that reads another layer's packs, made in parts, computes exactly what it computes when
// it packs its own weights per call (same outputs, input gradients and parameter gradients, bit
// for bit), and packs per call again once it stops reading them.

#include <catch2/catch.hpp>
#include <cstring>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/nn/gru_layer.hpp"
#include "gyre/nn/lstm_layer.hpp"
#include "gyre/nn/rnn_stack.hpp"
#include "nn/detail/fast_kernels.hpp"
#include "nn_test_util.hpp"

using namespace gyre;
using namespace gyre::nn;
using gyre::nn::test::random_matrix;

namespace {

bool same_bits(const Matrix& a, const Matrix& b) {
  return a.rows() == b.rows() && a.cols() == b.cols() &&
         std::memcmp(a.data(), b.data(), static_cast<std::size_t>(a.size()) * sizeof(float)) == 0;
}

struct Replica {
  ParameterStore store;
  RnnStack stack;
  Matrix out, dx;
  explicit Replica(const RnnStackConfig& cfg) : stack(cfg, store) {}
  void run(const Matrix& x, int T, std::span<const int> lengths, const Matrix& g) {
    store.zero_grad();
    stack.forward(x, T, lengths, out, true, nullptr);
    stack.backward(g, dx);
  }
  std::vector<RecurrentLayer*> layers() {
    std::vector<RecurrentLayer*> all;
    for (int k = 0; k < stack.config().layers; ++k)
      for (int d = 0; d < stack.directions(); ++d) all.push_back(&stack.layer(k, d));
    return all;
  }
};

void check_same(Replica& a, Replica& b) {
  CHECK(same_bits(a.out, b.out));
  CHECK(same_bits(a.dx, b.dx));
  REQUIRE(a.store.size() == b.store.size());
  for (std::size_t i = 0; i < a.store.size(); ++i) {
    INFO(a.store[i].name);
    CHECK(same_bits(a.store[i].grad, b.store[i].grad));
  }
}

}  // namespace

TEST_CASE("layers reading shared weight packs compute the bits of packing per call", "[nn][gemm]") {
  // H = 64: the fused step (H a multiple of 16) and whole panels; H = 24, D = 20: the unfused
  // step and partial panels. Three parts: some get fewer panels than others.
  struct Shape {
    int hidden, input, parts;
  };
  for (const CellType cell : {CellType::kLstm, CellType::kGru})
    for (const Shape shape : {Shape{64, 40, 2}, Shape{24, 20, 3}}) {
      DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm" : "gru")
                      << " H " << shape.hidden << " D " << shape.input) {
        const RnnStackConfig cfg{.cell = cell,
                                 .input_size = shape.input,
                                 .hidden_size = shape.hidden,
                                 .layers = 2,
                                 .bidirectional = true};
        // master: makes the packs and reads its own; replica: reads the master's; alone: packs per call.
        Replica master(cfg), replica(cfg), alone(cfg);
        Rng rng(11);
        master.stack.init_parameters(rng);
        for (Replica* r : {&replica, &alone})
          for (std::size_t i = 0; i < master.store.size(); ++i) r->store[i].value = master.store[i].value;
        const int T = 9;
        const std::vector<int> lengths = {9, 4, 9, 1, 7, 0, 9, 3};
        const auto B = static_cast<Eigen::Index>(lengths.size());
        const Matrix x = random_matrix(T * B, shape.input, rng);
        const Matrix g = random_matrix(T * B, master.stack.output_size(), rng);

        const auto ml = master.layers(), rl = replica.layers();
        for (RecurrentLayer* l : ml) l->reserve_packs();
        for (int part = shape.parts - 1; part >= 0; --part)  // any order: the parts are disjoint
          for (RecurrentLayer* l : ml) l->pack_weights(part, shape.parts);
        for (std::size_t i = 0; i < ml.size(); ++i) {
          ml[i]->read_packs_from(ml[i]);
          rl[i]->read_packs_from(ml[i]);
        }
        master.run(x, T, lengths, g);
        replica.run(x, T, lengths, g);
        alone.run(x, T, lengths, g);
        check_same(master, alone);
        check_same(replica, alone);

        // Stopped sharing: new weights are packed per call again (stale packs would differ).
        for (std::size_t i = 0; i < ml.size(); ++i) rl[i]->read_packs_from(nullptr);
        for (Replica* r : {&replica, &alone})
          for (std::size_t i = 0; i < r->store.size(); ++i) r->store[i].value.array() *= 0.5f;
        replica.run(x, T, lengths, g);
        alone.run(x, T, lengths, g);
        check_same(replica, alone);
        CHECK_FALSE(same_bits(replica.out, master.out));
      }
    }
}

TEST_CASE("a layer refuses the packs of a layer of another kind or shape", "[nn][gemm]") {
  ParameterStore store;
  LstmLayer lstm(store, "a", 8, 16), wide(store, "b", 8, 32);
  GruLayer gru(store, "c", 8, 16);
  CHECK_THROWS_AS(lstm.read_packs_from(&gru), Error);
  CHECK_THROWS_AS(lstm.read_packs_from(&wide), Error);
  CHECK_THROWS_AS(gru.read_packs_from(&lstm), Error);
  CHECK_NOTHROW(lstm.read_packs_from(&lstm));
  CHECK_NOTHROW(lstm.read_packs_from(nullptr));
}

TEST_CASE("packing an operand stored transposed gives the panel layout by definition", "[nn][gemm]") {
  // fast_kernels.hpp, "packed B": panel p holds columns [32p, 32p + 32) of op(B) = B as k rows of
  // 32 floats, columns past n zero. Shapes with whole and partial panels, k below, at and past a
  // multiple of 16, and a row stride wider than k.
  namespace fast = gyre::nn::detail::fast;
  struct Shape {
    std::ptrdiff_t k, n, ldb;
  };
  for (const Shape sh :
       {Shape{128, 1024, 128}, Shape{37, 70, 40}, Shape{16, 32, 16}, Shape{9, 96, 9}, Shape{50, 33, 64}}) {
    INFO("k " << sh.k << " n " << sh.n << " ldb " << sh.ldb);
    Rng rng(5);
    const Matrix stored = random_matrix(sh.n, sh.ldb, rng);  // B^T [n x k] in the first k columns
    std::vector<float> out(fast::packed_size(sh.k, sh.n), -1.0f);
    fast::pack_b(stored.data(), sh.ldb, true, sh.k, sh.n, out.data());
    std::size_t wrong = 0;
    for (std::ptrdiff_t p = 0; p * fast::kGemmNr < sh.n; ++p)
      for (std::ptrdiff_t kk = 0; kk < sh.k; ++kk)
        for (std::ptrdiff_t j = 0; j < fast::kGemmNr; ++j) {
          const std::ptrdiff_t col = p * fast::kGemmNr + j;
          const float want = col < sh.n ? stored(col, kk) : 0.0f;
          const float got = out[static_cast<std::size_t>((p * sh.k + kk) * fast::kGemmNr + j)];
          if (std::memcmp(&want, &got, sizeof want) != 0) ++wrong;
        }
    CHECK(wrong == 0);
  }
}
