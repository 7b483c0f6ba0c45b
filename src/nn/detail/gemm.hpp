#pragma once
// Single-threaded float GEMM that reuses its packing buffers. Eigen's product operator sizes the
// GEMM's packing blocks per call and takes them from the heap once they exceed
// EIGEN_STACK_ALLOCATION_LIMIT (128 KB), i.e. at hidden sizes we care about; a per-step GEMM would
// then allocate on every time step. This calls the same Eigen kernel
// (internal::general_matrix_matrix_product, Eigen 3.4), compiled for baseline x86-64 and for
// AVX2+FMA and chosen at run time (sgemm.hpp), with packing buffers owned by the caller, grown when
// a product first needs more and reused afterwards.
//
// Determinism: the blocking sizes (kc, mc, nc) decide the order in which the k terms of each
// output are summed, so they are computed from the current product's shape on every call, never
// from the largest shape seen before. Otherwise the same product gives different bits depending
// on history, and a resumed training run drifts from an uninterrupted one (issue 10, item 1).
//
// On CPUs with AVX-512 or AVX2+FMA the product runs on gyre's own kernel instead (fast_kernels.hpp: op(B)
// packed into panels per call, k summed in fixed blocks of kGemmKc); the Eigen path is the
// portable one. Either way the bits depend only on the operands and the shape.

#include <Eigen/Core>
#include <algorithm>
#include <cstddef>
#include <memory>
#include <new>

#include "fast_kernels.hpp"
#include "gyre/nn/tensor.hpp"
#include "nn/detail/sgemm.hpp"

namespace gyre::nn::detail {

enum class Op { kN, kT };

class Gemm {
 public:
  /// C = op(A) op(B), or C += op(A) op(B) when accumulate. All operands row-major with unit inner
  /// stride (whole matrices, maps or column blocks). bias [n], when given, is then added to every
  /// row of C (on the fast-kernel path in the product's epilogue; the same bits either way).
  void run(Eigen::Ref<Matrix> c, Eigen::Ref<const Matrix> a, Op op_a, Eigen::Ref<const Matrix> b, Op op_b,
           bool accumulate, const float* bias = nullptr) {
    const Eigen::Index m = c.rows(), n = c.cols();
    const Eigen::Index k = op_a == Op::kN ? a.cols() : a.rows();
    eigen_assert((op_a == Op::kN ? a.rows() : a.cols()) == m);
    eigen_assert((op_b == Op::kN ? b.rows() : b.cols()) == k);
    eigen_assert((op_b == Op::kN ? b.cols() : b.rows()) == n);
    if (fast::available()) {
      float* bp = packed_b_.grow(fast::packed_size(k, n));
      fast::pack_b(b.data(), b.outerStride(), op_b == Op::kT, k, n, bp);
      fast::gemm_packed(m, n, k, a.data(), a.outerStride(), op_a == Op::kT, bp, c.data(), c.outerStride(),
                        accumulate, nullptr, bias);
      return;
    }
    if (!accumulate) c.setZero();
    if (m == 0 || n == 0) return;
    if (k == 0) {
      if (bias != nullptr) c.rowwise() += Eigen::Map<const Eigen::Matrix<float, 1, Eigen::Dynamic>>(bias, n);
      return;
    }
    // A row-major destination is computed by Eigen as the transposed, column-major product: its
    // "rows" are our n and its "cols" our m (GeneralMatrixMatrix.h, RowMajor specialisation).
    // The kernel is the best variant for this CPU (sgemm.hpp); the blocking is its own for this
    // shape, so the summation order depends on the shape (and the CPU), never on history.
    const SgemmKernel& kernel = sgemm_kernel();
    std::ptrdiff_t kc = 0, mc = 0, nc = 0;
    kernel.blocking(n, m, k, kc, mc, nc);
    float* block_a = buffer_a_.reserve(mc * kc);
    float* block_b = buffer_b_.reserve(kc * nc);
    kernel.run(m, n, k, a.data(), a.outerStride(), op_a == Op::kT, b.data(), b.outerStride(), op_b == Op::kT,
               c.data(), c.outerStride(), kc, mc, nc, block_a, block_b);
    if (bias != nullptr) c.rowwise() += Eigen::Map<const Eigen::Matrix<float, 1, Eigen::Dynamic>>(bias, n);
  }

 private:
  /// A packing buffer that only grows (64-byte aligned: enough for every packet size Eigen's
  /// kernels load aligned; reused across calls).
  struct Buffer {
    struct Free {
      void operator()(float* p) const { ::operator delete[](p, std::align_val_t{64}); }
    };
    std::unique_ptr<float, Free> data;
    std::size_t size = 0;
    float* reserve(std::ptrdiff_t n) {
      const auto need = static_cast<std::size_t>(n);
      if (need > size) {
        data.reset(static_cast<float*>(::operator new[](need * sizeof(float), std::align_val_t{64})));
        size = need;
      }
      return data.get();
    }
  };

  Buffer buffer_a_, buffer_b_;
  fast::AlignedBuffer packed_b_;
};

}  // namespace gyre::nn::detail
