// Every Eigen GEMM kernel variant this CPU can run (src/nn/detail/sgemm.hpp) computes the product,
// for every operand layout, and the dispatcher picks one the CPU supports.

#include <catch2/catch.hpp>

#include <Eigen/Core>
#include <cstdlib>
#include <new>
#include <string_view>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/nn/tensor.hpp"
#include "nn/detail/sgemm.hpp"

using gyre::nn::Matrix;
using gyre::nn::detail::SgemmKernel;

namespace {

std::vector<const SgemmKernel*> runnable_kernels() {
  std::vector<const SgemmKernel*> out{&gyre::nn::detail::kSgemmPortable};
#if (defined(__x86_64__) || defined(_M_X64)) && (defined(__GNUC__) || defined(__clang__))
  __builtin_cpu_init();
  if (__builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma"))
    out.push_back(&gyre::nn::detail::kSgemmAvx2);
#endif
  return out;
}

Matrix random_matrix(Eigen::Index rows, Eigen::Index cols, gyre::Rng& rng) {
  Matrix m(rows, cols);
  for (Eigen::Index i = 0; i < m.size(); ++i) m.data()[i] = rng.uniform(-1.0f, 1.0f);
  return m;
}

}  // namespace

TEST_CASE("every GEMM kernel variant the CPU runs computes the product", "[nn][gemm]") {
  gyre::Rng rng(7);
  const auto kernels = runnable_kernels();
  for (const SgemmKernel* kernel : kernels) {
    for (const bool a_trans : {false, true}) {
      for (const bool b_trans : {false, true}) {
        DYNAMIC_SECTION(kernel->name << (a_trans ? " A^T" : " A") << (b_trans ? " B^T" : " B")) {
          // Odd sizes exercise the kernels' edge handling; k spans several kc panels.
          const Eigen::Index m = 37, n = 53, k = 700;
          const Matrix a = a_trans ? random_matrix(k, m, rng) : random_matrix(m, k, rng);
          const Matrix b = b_trans ? random_matrix(n, k, rng) : random_matrix(k, n, rng);
          Matrix c = random_matrix(m, n, rng);
          const Matrix c0 = c;
          std::ptrdiff_t kc = 0, mc = 0, nc = 0;
          kernel->blocking(n, m, k, kc, mc, nc);
          REQUIRE(kc > 0);
          REQUIRE(mc > 0);
          REQUIRE(nc > 0);
          auto* block_a = static_cast<float*>(
              ::operator new[](static_cast<std::size_t>(mc * kc) * sizeof(float), std::align_val_t{64}));
          auto* block_b = static_cast<float*>(
              ::operator new[](static_cast<std::size_t>(kc * nc) * sizeof(float), std::align_val_t{64}));
          kernel->run(m, n, k, a.data(), a.cols(), a_trans, b.data(), b.cols(), b_trans, c.data(), c.cols(),
                      kc, mc, nc, block_a, block_b);
          ::operator delete[](block_a, std::align_val_t{64});
          ::operator delete[](block_b, std::align_val_t{64});
          const Matrix opa = a_trans ? Matrix(a.transpose()) : a;
          const Matrix opb = b_trans ? Matrix(b.transpose()) : b;
          const Matrix reference = c0 + opa * opb;  // the kernel accumulates into C
          // float sums of k terms of size <= 1: relative 1e-5 per term is common practice, no source.
          REQUIRE((c - reference).cwiseAbs().maxCoeff() <= 1e-5f * static_cast<float>(k));
        }
      }
    }
  }
}

TEST_CASE("the dispatcher picks a variant this CPU runs and honours GYRE_NN_KERNELS", "[nn][gemm]") {
  const auto kernels = runnable_kernels();
  const std::string_view chosen = gyre::nn::detail::sgemm_kernel().name;
  const char* cap = std::getenv("GYRE_NN_KERNELS");
  INFO("chosen " << chosen << ", GYRE_NN_KERNELS " << (cap ? cap : "(unset)"));
  if (cap != nullptr && std::string_view(cap) == "portable") {
    REQUIRE(chosen == "portable");
  } else {
    REQUIRE(chosen == kernels.back()->name);  // the best one this CPU runs
  }
}
