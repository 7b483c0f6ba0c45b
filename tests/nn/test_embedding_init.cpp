// Embedding (sparse rows, padding, frozen, pretrained vectors) and initialisation helpers.

#include <catch2/catch.hpp>
#include <filesystem>
#include <fstream>
#include <map>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/nn/embedding.hpp"
#include "gyre/nn/init.hpp"
#include "gyre/nn/lstm_layer.hpp"
#include "nn_test_util.hpp"

using namespace gyre;
using namespace gyre::nn;
using gyre::nn::test::random_matrix;
namespace fs = std::filesystem;

TEST_CASE("embedding gathers rows, zero for padding, sparse accumulated gradients", "[nn]") {
  ParameterStore store;
  Embedding emb(store, 6, 3);
  Rng rng(1);
  emb.init_parameters(rng);
  Parameter& w = store.at("tokens.vectors");
  CHECK(w.sparse_rows);
  CHECK(w.value.row(0).isZero(0.0f));
  w.value.row(0).setConstant(9.0f);  // even a non-zero padding row must give a zero vector
  const std::vector<std::int32_t> ids = {2, 0, 5, 2, 1, 0};  // time-major [T=3 x B=2]
  Matrix out;
  emb.forward(ids, out);
  REQUIRE(out.rows() == 6);
  CHECK(out.row(0) == w.value.row(2));
  CHECK(out.row(1).isZero(0.0f));
  CHECK(out.row(2) == w.value.row(5));
  const Matrix d = random_matrix(6, 3, rng);
  store.zero_grad();
  emb.backward(d);
  w.finalize_touched_rows();
  CHECK(w.touched_rows == std::vector<std::int32_t>{1, 2, 5});
  CHECK(w.grad.row(2).isApprox(d.row(0) + d.row(3), 1e-6f));  // repeated id: gradients add up
  CHECK(w.grad.row(5) == d.row(2));
  CHECK(w.grad.row(0).isZero(0.0f));  // padding never learns
  CHECK(w.grad.row(3).isZero(0.0f));
  store.zero_grad();
  CHECK(w.grad.isZero(0.0f));
  CHECK(w.touched_rows.empty());

  emb.set_trainable(false);
  emb.forward(ids, out);
  emb.backward(d);
  CHECK(w.grad.isZero(0.0f));
  CHECK(w.touched_rows.empty());

  const std::vector<std::int32_t> bad = {6};
  CHECK_THROWS_AS(emb.forward(bad, out), Error);
}

TEST_CASE("pretrained vectors load by vocabulary lookup, bad files name file and line", "[nn]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "nn_pretrained";
  fs::create_directories(dir);
  const std::map<std::string, int, std::less<>> vocab = {{"<pad>", 0}, {"kettle", 2}, {"coil", 3}};
  auto lookup = [&](std::string_view tok) {
    const auto it = vocab.find(tok);
    return it == vocab.end() ? -1 : it->second;
  };
  auto write = [&](const std::string& name, const std::string& text) {
    const fs::path p = dir / name;
    std::ofstream(p) << text;
    return p.string();
  };
  ParameterStore store;
  Embedding emb(store, 5, 3);
  const std::string good =
      write("good.vec", "3 3\nkettle 0.5 -1 2e-1\nspanner 1 2 3\ncoil 1 1 1\n<pad> 7 7 7\n");
  const PretrainedStats st = emb.load_pretrained(good, lookup);
  CHECK(st.lines == 4);
  CHECK(st.matched == 2);
  const Parameter& w = store.at("tokens.vectors");
  CHECK(w.value(2, 0) == 0.5f);
  CHECK(w.value(2, 1) == -1.0f);
  CHECK(w.value(2, 2) == 0.2f);
  CHECK(w.value.row(3).isOnes(0.0f));
  CHECK(w.value.row(0).isZero(0.0f));  // padding not overwritten

  const std::string short_line = write("short.vec", "kettle 1 2 3\ncoil 1 2\n");
  try {
    emb.load_pretrained(short_line, lookup);
    FAIL("expected ParseError");
  } catch (const ParseError& e) {
    CHECK(e.line() == 2);
    CHECK_THAT(e.what(), Catch::Contains("short.vec:2") && Catch::Contains("found 2 values"));
  }
  const std::string bad_number = write("nan.vec", "kettle 1 2 3\ncoil 1 x2 3\n");
  try {
    emb.load_pretrained(bad_number, lookup);
    FAIL("expected ParseError");
  } catch (const ParseError& e) {
    CHECK(e.line() == 2);
    CHECK_THAT(e.what(), Catch::Contains("'x2'"));
  }
  const std::string bad_header = write("header.vec", "2 4\nkettle 1 2 3\n");
  CHECK_THROWS_AS(emb.load_pretrained(bad_header, lookup), ParseError);
  CHECK_THROWS_AS(emb.load_pretrained((dir / "missing.vec").string(), lookup), IoError);
}

TEST_CASE("initialisers: Glorot bounds, orthogonality, determinism, LSTM forget bias", "[nn]") {
  Rng rng(123);
  SECTION("Glorot uniform (Glorot & Bengio 2010, eq. 16)") {
    Matrix w(200, 300);
    glorot_uniform(w, rng);
    const double a = std::sqrt(6.0 / 500.0);
    CHECK(w.cwiseAbs().maxCoeff() <= a);
    // Variance of U(-a, a) is a^2 / 3; 60000 draws: relative sd of the estimate ~0.6%, allow 3%.
    const double var = w.cast<double>().array().square().mean();
    CHECK(var == Approx(a * a / 3.0).epsilon(0.03));
  }
  SECTION("orthogonal (Saxe et al. 2014): Q^T Q = I for tall, Q Q^T = I for wide") {
    Matrix tall(12, 5), wide(4, 9), sq(16, 16);
    orthogonal(tall, rng);
    orthogonal(wide, rng);
    orthogonal(sq, rng);
    CHECK((tall.transpose() * tall).isIdentity(1e-5f));
    CHECK((wide * wide.transpose()).isIdentity(1e-5f));
    CHECK((sq * sq.transpose()).isIdentity(1e-5f));
    Matrix u(4 * 8, 8);
    orthogonal_blocks(u, 4, rng);
    for (int k = 0; k < 4; ++k) {
      const Matrix blk = u.middleRows(k * 8, 8);
      CHECK((blk * blk.transpose()).isIdentity(1e-5f));
    }
  }
  SECTION("same seed, same weights; LSTM forget-gate bias 1 (Jozefowicz et al. 2015)") {
    ParameterStore a, b;
    LstmLayer la(a, "x", 3, 4), lb(b, "x", 3, 4);
    Rng ra(77), rb(77);
    la.init_parameters(ra);
    lb.init_parameters(rb);
    for (std::size_t i = 0; i < a.size(); ++i) CHECK(a[i].value == b[i].value);
    const Matrix& bias = a.at("x.b_input").value;
    CHECK(bias.middleCols(0, 4).isZero(0.0f));
    CHECK(bias.middleCols(4, 4).isOnes(0.0f));
    CHECK(bias.middleCols(8, 8).isZero(0.0f));
  }
  SECTION("embedding N(0, 0.1^2), padding row zero") {
    ParameterStore s;
    Embedding emb(s, 2001, 50);
    emb.init_parameters(rng);
    const Matrix& w = s.at("tokens.vectors").value;
    CHECK(w.row(0).isZero(0.0f));
    const double var = w.bottomRows(2000).cast<double>().array().square().mean();
    CHECK(var == Approx(0.01).epsilon(0.03));  // 100000 draws: relative sd of the estimate ~0.45%
  }
}
