#include <catch2/catch.hpp>

#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/nn/char_cnn.hpp"
#include "nn_test_util.hpp"

using Catch::Matchers::WithinAbs;
using gyre::nn::CharCnn;
using gyre::nn::CharTokens;
using gyre::nn::Matrix;
using gyre::nn::ParameterStore;

namespace {

void fill(Matrix& m, const nlohmann::json& values) {
  const auto v = values.get<std::vector<double>>();
  REQUIRE(static_cast<Eigen::Index>(v.size()) == m.size());
  for (Eigen::Index i = 0; i < m.size(); ++i)
    m.data()[i] = static_cast<float>(v[static_cast<std::size_t>(i)]);
}

}  // namespace

// ref: tests/fixtures/chars/char_cnn.json, made by tools/make_char_fixtures.py (python3-torch:
// embedding -> conv1d(padding=w//2) per token -> max over positions -> tanh; float64 reference).
TEST_CASE("character CNN matches torch: outputs and every gradient", "[char]") {
  std::ifstream in(std::string(GYRE_FIXTURES_DIR) + "/chars/char_cnn.json");
  REQUIRE(in.good());
  std::stringstream text;
  text << in.rdbuf();
  const auto fx = nlohmann::json::parse(text.str());
  ParameterStore store;
  CharCnn cnn(store, fx["vocab"], fx["embedding_size"], fx["filters"], fx["width"]);
  fill(store.at("chars.vectors").value, fx["embedding"]);
  fill(store.at("chars.w_filter").value, fx["conv_weight"]);
  fill(store.at("chars.b_filter").value, fx["conv_bias"]);
  const auto ids = fx["ids"].get<std::vector<std::int32_t>>();
  const auto offsets = fx["offsets"].get<std::vector<std::int32_t>>();
  Matrix y;
  cnn.forward(CharTokens{ids, offsets}, y);
  Matrix want(y.rows(), y.cols()), g(y.rows(), y.cols());
  fill(want, fx["y"]);
  fill(g, fx["g"]);
  CHECK(gyre::nn::test::all_close(y, want, 0, 1e-6));
  CHECK(y.row(0).isZero());  // the empty token
  store.zero_grad();
  cnn.backward(g);
  for (const auto& [name, key] : {std::pair{"chars.vectors", "d_embedding"},
                                  {"chars.w_filter", "d_conv_weight"},
                                  {"chars.b_filter", "d_conv_bias"}}) {
    INFO(name);
    const auto& p = store.at(name);
    Matrix ref(p.grad.rows(), p.grad.cols());
    fill(ref, fx[key]);
    CHECK(gyre::nn::test::all_close(p.grad, ref, 1e-5, 1e-6));
  }
  CHECK(store.at("chars.vectors").grad.row(0).isZero());
}

TEST_CASE("character CNN gradients match central differences", "[char]") {
  gyre::Rng rng(7);
  for (const int width : {1, 3, 5}) {
    INFO("width " << width);
    ParameterStore store;
    CharCnn cnn(store, 9, 3, 4, width);
    cnn.init_parameters(rng);
    // Larger weights than the initialiser's so tanh is away from linear.
    store.at("chars.w_filter").value *= 3.0f;
    const std::vector<std::int32_t> ids{3, 1, 4, 1, 5, 2, 6, 5, 3, 5, 8};
    const std::vector<std::int32_t> offsets{0, 3, 3, 4, 11};  // lengths 3, 0, 1, 7
    Matrix y;
    cnn.forward(CharTokens{ids, offsets}, y);
    const Matrix g = gyre::nn::test::random_matrix(y.rows(), y.cols(), rng);
    store.zero_grad();
    cnn.backward(g);
    const auto loss = [&] {
      Matrix out;
      cnn.forward(CharTokens{ids, offsets}, out);
      return gyre::nn::test::dot(g, out);
    };
    // Max-pooling is piecewise: eps must not move an argmax. eps 1e-3 with float64-free sums is
    // enough here (checked: the winning margins of this seed exceed 1e-2).
    gyre::nn::test::GradCheckOptions opt;
    opt.eps = 1e-3f;
    opt.rtol = 2e-2;
    opt.atol = 1e-3;
    opt.max_entries = 60;
    for (const char* name : {"chars.vectors", "chars.w_filter", "chars.b_filter"}) {
      auto& p = store.at(name);
      const Matrix analytic = p.grad;
      CHECK(gyre::nn::test::check_gradient(name, p.value, analytic, loss, opt) > 0);
    }
  }
}

TEST_CASE("character CNN refuses bad shapes and ids", "[char]") {
  ParameterStore store;
  CHECK_THROWS_AS(CharCnn(store, 5, 2, 3, 2), gyre::Error);  // even width
  ParameterStore store2;
  CharCnn cnn(store2, 5, 2, 3, 3);
  Matrix y;
  const std::vector<std::int32_t> bad_id{1, 7};
  const std::vector<std::int32_t> offsets{0, 2};
  CHECK_THROWS_AS(cnn.forward(CharTokens{bad_id, offsets}, y), gyre::Error);
  const std::vector<std::int32_t> ids{1, 2};
  const std::vector<std::int32_t> bad_offsets{0, 3};
  CHECK_THROWS_AS(cnn.forward(CharTokens{ids, bad_offsets}, y), gyre::Error);
  cnn.forward(CharTokens{ids, offsets}, y);
  CHECK_THROWS_AS(cnn.backward(Matrix::Zero(2, 3)), gyre::Error);
}
