#pragma once
// The Eigen GEMM kernel behind detail::Gemm's portable path (CPUs without AVX-512, where
// fast_kernels.hpp is not used), chosen once at run time by the CPU's features, so a portable
// build (and an installed library) still multiplies with AVX2+FMA where the CPU has it. Each
// variant is Eigen 3.4's own kernel (internal::general_matrix_matrix_product) compiled for one
// instruction set in its own translation unit (src/nn/sgemm_*.cpp), with Eigen's namespace renamed
// there so the variants' template instances never merge (sgemm_kernel.inc). No Eigen in this
// header: the variants see raw pointers only.

#include <cstddef>

namespace gyre::nn::detail {

struct SgemmKernel {
  const char* name;  // "portable", "avx2"
  /// Eigen's level-3 blocking for this instruction set and the product's shape: rows x cols of
  /// the column-major result Eigen computes (our n x m, see Gemm::run) and depth k.
  void (*blocking)(std::ptrdiff_t rows, std::ptrdiff_t cols, std::ptrdiff_t depth, std::ptrdiff_t& kc,
                   std::ptrdiff_t& mc, std::ptrdiff_t& nc);
  /// c[m x n] (row-major, stride ldc) += op(a) op(b); a, b row-major with strides lda, ldb, read
  /// transposed when a_trans / b_trans. block_a holds mc * kc floats, block_b kc * nc, both
  /// aligned to 64 bytes.
  void (*run)(std::ptrdiff_t m, std::ptrdiff_t n, std::ptrdiff_t k, const float* a, std::ptrdiff_t lda,
              bool a_trans, const float* b, std::ptrdiff_t ldb, bool b_trans, float* c, std::ptrdiff_t ldc,
              std::ptrdiff_t kc, std::ptrdiff_t mc, std::ptrdiff_t nc, float* block_a, float* block_b);
};

/// The variants compiled into this build (x86-64: portable, avx2; elsewhere: portable).
extern const SgemmKernel kSgemmPortable;
#if defined(__x86_64__) || defined(_M_X64)
extern const SgemmKernel kSgemmAvx2;
#endif

/// The best variant this CPU runs, chosen on first use; GYRE_NN_KERNELS=portable selects the
/// baseline one (the tests run both this way; the same variable turns fast_kernels.hpp off).
const SgemmKernel& sgemm_kernel();

}  // namespace gyre::nn::detail
