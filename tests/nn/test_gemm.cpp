// The reusable GEMM must give the same bits for a product whatever products it computed before:
// the summation order is fixed by the current shape alone (issue 10, item 1: a resumed run
// drifted from an uninterrupted one because blocking was sized by the largest shape seen).

#include <catch2/catch.hpp>

#include <Eigen/Core>
#include <cstring>

#include "gyre/core/rng.hpp"
#include "nn/detail/gemm.hpp"

using gyre::nn::Matrix;
using gyre::nn::detail::Gemm;
using gyre::nn::detail::Op;

namespace {

Matrix random_matrix(Eigen::Index rows, Eigen::Index cols, gyre::Rng& rng) {
  Matrix m(rows, cols);
  for (Eigen::Index i = 0; i < m.size(); ++i) m.data()[i] = rng.uniform(-1.0f, 1.0f);
  return m;
}

bool same_bits(const Matrix& a, const Matrix& b) {
  return a.rows() == b.rows() && a.cols() == b.cols() &&
         std::memcmp(a.data(), b.data(), static_cast<std::size_t>(a.size()) * sizeof(float)) == 0;
}

}  // namespace

TEST_CASE("a GEMM's result does not depend on the shapes it computed before", "[nn][gemm]") {
  gyre::Rng rng(20261202);
  // The weight-gradient product of a recurrent layer: dW[4H x H] = dG^T[4H x k] * h[k x H], with
  // k = tokens in the batch. Eigen's blocking splits k into kc-sized panels; k >= ~900 is where a
  // blocking sized for a larger earlier product changed the panel boundaries.
  const Eigen::Index rows = 512, cols = 128;
  for (const Eigen::Index k : {Eigen::Index{960}, Eigen::Index{1500}, Eigen::Index{3000}}) {
    INFO("k = " << k);
    const Matrix a = random_matrix(k, rows, rng);  // read transposed
    const Matrix b = random_matrix(k, cols, rng);

    Matrix fresh(rows, cols);
    Gemm first;
    first.run(fresh, a, Op::kT, b, Op::kN, false);

    // The same product after a much larger one (k * 4) on the same Gemm object.
    Gemm used;
    const Matrix big_a = random_matrix(4 * k, rows, rng);
    const Matrix big_b = random_matrix(4 * k, cols, rng);
    Matrix big(rows, cols);
    used.run(big, big_a, Op::kT, big_b, Op::kN, false);
    Matrix after(rows, cols);
    used.run(after, a, Op::kT, b, Op::kN, false);
    REQUIRE(same_bits(fresh, after));

    // And it is Eigen's own product up to rounding (tolerance: float sums of k terms of size <= 1,
    // relative 1e-5 is common practice, no source).
    const Matrix reference = a.transpose() * b;
    REQUIRE(((fresh - reference).cwiseAbs().maxCoeff()) <= 1e-5f * static_cast<float>(k));
  }
}

TEST_CASE("accumulating and every operand orientation match Eigen's product", "[nn][gemm]") {
  gyre::Rng rng(7);
  const Matrix a = random_matrix(37, 53, rng), b = random_matrix(53, 29, rng);
  const Matrix at = a.transpose(), bt = b.transpose();
  const Matrix reference = a * b;
  Gemm gemm;
  Matrix c(37, 29);
  for (int variant = 0; variant < 4; ++variant) {
    const bool ta = (variant & 1) != 0, tb = (variant & 2) != 0;
    gemm.run(c, ta ? at : a, ta ? Op::kT : Op::kN, tb ? bt : b, tb ? Op::kT : Op::kN, false);
    REQUIRE((c - reference).cwiseAbs().maxCoeff() <= 1e-4f);  // common practice, no source
  }
  gemm.run(c, a, Op::kN, b, Op::kN, true);  // c = 2ab
  REQUIRE((c - 2 * reference).cwiseAbs().maxCoeff() <= 2e-4f);
}

TEST_CASE("a bias added in the GEMM's epilogue gives the bits of adding it afterwards", "[nn][gemm]") {
  // issue 13: the recurrent layers' input projection adds the bias inside the product instead of in
  // a second pass over the [N x G*H] result; it must round exactly as the second pass did, also
  // when k spans several of the kernel's k blocks (256) and when the product accumulates. Column
  // counts that are not multiples of the 32-column panels check the masked tail.
  gyre::Rng rng(20261203);
  for (const Eigen::Index k :
       {Eigen::Index{0}, Eigen::Index{7}, Eigen::Index{128}, Eigen::Index{300}, Eigen::Index{600}}) {
    for (const Eigen::Index n : {Eigen::Index{1024}, Eigen::Index{45}}) {
      for (const bool accumulate : {false, true}) {
        INFO("k = " << k << ", n = " << n << ", accumulate " << accumulate);
        const Eigen::Index m = 37;
        const Matrix a = random_matrix(m, k, rng);
        const Matrix w = random_matrix(n, k, rng);  // read transposed, as W in X W^T
        const Matrix bias = random_matrix(1, n, rng);
        const Matrix start = random_matrix(m, n, rng);
        Matrix separate = start, fused = start;
        Gemm g1, g2;
        g1.run(separate, a, Op::kN, w, Op::kT, accumulate);
        separate.rowwise() += bias.row(0);
        g2.run(fused, a, Op::kN, w, Op::kT, accumulate, bias.data());
        REQUIRE(same_bits(separate, fused));
      }
    }
  }
}
