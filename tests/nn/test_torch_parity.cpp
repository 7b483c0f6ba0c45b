// Parity with an outside reference: torch.nn.LSTM / torch.nn.GRU (Debian python3-torch 1.13) on
// packed sequences, computed in float64 by tools/make_rnn_fixtures.py into tests/fixtures/rnn/.
// Outputs, final states and gradients of L = sum(G * out) must agree to 1e-5 relative with an
// absolute floor of 2e-6 (float32 rounding of values of order 1 accumulated over a few steps; the
// floor matters only for entries near zero).

#include <catch2/catch.hpp>
#include <fstream>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "gyre/nn/loss.hpp"
#include "gyre/nn/rnn_stack.hpp"
#include "nn_test_util.hpp"

using namespace gyre;
using namespace gyre::nn;
using nlohmann::json;

namespace {

constexpr double kRtol = 1e-5;
constexpr double kAtol = 2e-6;

json load_fixture(const std::string& name) {
  const std::string path = std::string(GYRE_FIXTURES_DIR) + "/rnn/" + name;
  std::ifstream in(path);
  REQUIRE(in.good());
  json j = json::parse(in);
  REQUIRE(j.at("generator").get<std::string>() == "tools/make_rnn_fixtures.py");
  return j;
}

Matrix to_matrix(const json& values, Eigen::Index rows, Eigen::Index cols) {
  REQUIRE(values.size() == static_cast<std::size_t>(rows * cols));
  Matrix m(rows, cols);
  for (Eigen::Index i = 0; i < m.size(); ++i) m.data()[i] = values[static_cast<std::size_t>(i)].get<float>();
  return m;
}

// Element-wise |ours - ref| <= kAtol + kRtol * |ref|, reporting the worst entry.
void check_close(const std::string& what, const Matrix& ours, const json& ref) {
  REQUIRE(ref.size() == static_cast<std::size_t>(ours.size()));
  double worst = 0.0;
  Eigen::Index worst_i = 0;
  for (Eigen::Index i = 0; i < ours.size(); ++i) {
    const double r = ref[static_cast<std::size_t>(i)].get<double>();
    const double ratio = std::abs(static_cast<double>(ours.data()[i]) - r) / (kAtol + kRtol * std::abs(r));
    if (ratio > worst) {
      worst = ratio;
      worst_i = i;
    }
  }
  INFO(what << ": worst entry " << worst_i << " ours " << ours.data()[worst_i] << " torch "
            << ref[static_cast<std::size_t>(worst_i)].get<double>() << " (error/tolerance " << worst << ")");
  CHECK(worst <= 1.0);
}

}  // namespace

TEST_CASE("LSTM/GRU stacks match torch 1.13 on packed sequences", "[nn][parity]") {
  for (const char* cell : {"lstm", "gru"}) {
    for (const int layers : {1, 2}) {
      for (const char* dir : {"uni", "bi"}) {
        const std::string name = std::string(cell) + "_l" + std::to_string(layers) + "_" + dir + ".json";
        DYNAMIC_SECTION(name) {
          const json fx = load_fixture(name);
          const RnnStackConfig cfg{.cell = fx.at("cell") == "lstm" ? CellType::kLstm : CellType::kGru,
                                   .input_size = fx.at("input_size"),
                                   .hidden_size = fx.at("hidden_size"),
                                   .layers = fx.at("layers"),
                                   .bidirectional = fx.at("bidirectional")};
          ParameterStore store;
          RnnStack stack(cfg, store);
          // Every parameter of the stack is in the fixture under the same name, and vice versa.
          REQUIRE(fx.at("params").size() == store.size());
          for (auto& p : store) {
            INFO(p.name);
            const json& ref = fx.at("params").at(p.name);
            REQUIRE(ref.at("shape")[0].get<Eigen::Index>() == p.value.rows());
            REQUIRE(ref.at("shape")[1].get<Eigen::Index>() == p.value.cols());
            p.value = to_matrix(ref.at("value"), p.value.rows(), p.value.cols());
          }
          const int T = fx.at("T"), B = fx.at("B");
          const std::vector<int> lengths = fx.at("lengths").get<std::vector<int>>();
          const Matrix x = to_matrix(fx.at("x"), T * B, cfg.input_size);
          const Matrix g = to_matrix(fx.at("g"), T * B, stack.output_size());
          Matrix out, dx;
          RnnState final;
          store.zero_grad();
          stack.forward(x, T, lengths, out, /*training=*/false, nullptr, nullptr, &final);
          stack.backward(g, dx);

          check_close("out", out, fx.at("out"));
          Matrix h_n(static_cast<Eigen::Index>(final.h.size()) * B, cfg.hidden_size);
          for (std::size_t k = 0; k < final.h.size(); ++k)
            h_n.middleRows(static_cast<Eigen::Index>(k) * B, B) = final.h[k].view();
          check_close("h_n", h_n, fx.at("h_n"));
          if (cfg.cell == CellType::kLstm) {
            Matrix c_n(static_cast<Eigen::Index>(final.c.size()) * B, cfg.hidden_size);
            for (std::size_t k = 0; k < final.c.size(); ++k)
              c_n.middleRows(static_cast<Eigen::Index>(k) * B, B) = final.c[k].view();
            check_close("c_n", c_n, fx.at("c_n"));
          }
          check_close("d_x", dx, fx.at("d_x"));
          for (const auto& p : store)
            check_close(p.name + ".grad", p.grad, fx.at("params").at(p.name).at("grad"));
        }
      }
    }
  }
}

// Hidden 32, input 20, 14 sequences of ragged lengths, one bidirectional layer: the shapes that
// take the AVX-512 kernels (fused cell steps, register tiles plus row tails) where the CPU has
// them. ctest runs this file again with GYRE_NN_KERNELS=portable (tests/nn/extra.cmake).
TEST_CASE("wide LSTM/GRU layers match torch 1.13 on packed sequences", "[nn][parity]") {
  for (const char* cell : {"lstm", "gru"}) {
    DYNAMIC_SECTION(cell) {
      const json fx = load_fixture(std::string(cell) + "_wide.json");
      const RnnStackConfig cfg{.cell = fx.at("cell") == "lstm" ? CellType::kLstm : CellType::kGru,
                               .input_size = fx.at("input_size"),
                               .hidden_size = fx.at("hidden_size"),
                               .layers = fx.at("layers"),
                               .bidirectional = fx.at("bidirectional")};
      REQUIRE(cfg.hidden_size % 16 == 0);
      ParameterStore store;
      RnnStack stack(cfg, store);
      REQUIRE(fx.at("params").size() == store.size());
      for (auto& p : store)
        p.value = to_matrix(fx.at("params").at(p.name).at("value"), p.value.rows(), p.value.cols());
      const int T = fx.at("T"), B = fx.at("B");
      const std::vector<int> lengths = fx.at("lengths").get<std::vector<int>>();
      const Matrix x = to_matrix(fx.at("x"), T * B, cfg.input_size);
      const Matrix g = to_matrix(fx.at("g"), T * B, stack.output_size());
      Matrix out, dx;
      RnnState final;
      store.zero_grad();
      stack.forward(x, T, lengths, out, false, nullptr, nullptr, &final);
      stack.backward(g, dx);
      check_close("out", out, fx.at("out"));
      Matrix h_n(static_cast<Eigen::Index>(final.h.size()) * B, cfg.hidden_size);
      for (std::size_t k = 0; k < final.h.size(); ++k)
        h_n.middleRows(static_cast<Eigen::Index>(k) * B, B) = final.h[k].view();
      check_close("h_n", h_n, fx.at("h_n"));
      check_close("d_x", dx, fx.at("d_x"));
      for (const auto& p : store)
        check_close(p.name + ".grad", p.grad, fx.at("params").at(p.name).at("grad"));
    }
  }
}

TEST_CASE("losses match torch 1.13 cross_entropy and binary_cross_entropy_with_logits", "[nn][parity]") {
  const json fx = load_fixture("loss.json");
  const int N = fx.at("N"), C = fx.at("C");
  const Matrix logits = to_matrix(fx.at("logits"), N, C);
  const std::vector<int> targets = fx.at("targets").get<std::vector<int>>();
  for (const json& c : fx.at("cross_entropy")) {
    const std::vector<float> weights = c.at("class_weights").get<std::vector<float>>();
    CrossEntropyOptions opt;
    opt.class_weights = weights;
    opt.label_smoothing = c.at("label_smoothing").get<float>();
    DYNAMIC_SECTION("cross_entropy weights=" << weights.size() << " smoothing=" << opt.label_smoothing) {
      Matrix d;
      const double loss = softmax_cross_entropy(logits, targets, d, opt);
      // ref: torch.nn.functional.cross_entropy (float64 on the same float32 logits)
      CHECK(loss == Approx(c.at("loss").get<double>()).epsilon(1e-6));
      check_close("d_logits", d, c.at("d_logits"));
    }
  }
  const Matrix y = to_matrix(fx.at("bce_targets"), N, C);
  for (const json& c : fx.at("bce")) {
    const Matrix x = to_matrix(c.at("logits"), N, C);
    Matrix d;
    const double loss = sigmoid_binary_cross_entropy(x, y, d);
    // ref: torch.nn.functional.binary_cross_entropy_with_logits
    CHECK(loss == Approx(c.at("loss").get<double>()).epsilon(1e-6));
    check_close("bce d_logits", d, c.at("d_logits"));
  }
}
