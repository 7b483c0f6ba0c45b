#pragma once
// Single-threaded float GEMM that reuses its packing buffers. Eigen's product operator sizes the
// GEMM's packing blocks per call and takes them from the heap once they exceed
// EIGEN_STACK_ALLOCATION_LIMIT (128 KB), i.e. at hidden sizes we care about; a per-step GEMM would
// then allocate on every time step. This calls the same Eigen kernel
// (internal::general_matrix_matrix_product, Eigen 3.4) with a blocking space owned by the caller,
// allocated when the product first grows and reused afterwards.

#include <Eigen/Core>
#include <memory>

#include "gyre/nn/tensor.hpp"

namespace gyre::nn::detail {

enum class Op { kN, kT };

class Gemm {
 public:
  /// C = op(A) op(B), or C += op(A) op(B) when accumulate. All operands row-major with unit inner
  /// stride (whole matrices, maps or column blocks).
  void run(Eigen::Ref<Matrix> c, Eigen::Ref<const Matrix> a, Op op_a, Eigen::Ref<const Matrix> b, Op op_b,
           bool accumulate) {
    const Eigen::Index m = c.rows(), n = c.cols();
    const Eigen::Index k = op_a == Op::kN ? a.cols() : a.rows();
    eigen_assert((op_a == Op::kN ? a.rows() : a.cols()) == m);
    eigen_assert((op_b == Op::kN ? b.rows() : b.cols()) == k);
    eigen_assert((op_b == Op::kN ? b.cols() : b.rows()) == n);
    if (!accumulate) c.setZero();
    if (m == 0 || n == 0 || k == 0) return;
    if (!blocking_ || m > m_ || n > n_ || k > k_) {
      m_ = std::max(m, m_);
      n_ = std::max(n, n_);
      k_ = std::max(k, k_);
      blocking_ = std::make_unique<Blocking>(m_, n_, k_, 1, true);
      blocking_->allocateAll();
    }
    // A row-major [r x c] matrix read transposed is a column-major [c x r] one with the same stride.
    if (op_a == Op::kN) {
      if (op_b == Op::kN)
        call<Eigen::RowMajor, Eigen::RowMajor>(m, n, k, a, b, c);
      else
        call<Eigen::RowMajor, Eigen::ColMajor>(m, n, k, a, b, c);
    } else {
      if (op_b == Op::kN)
        call<Eigen::ColMajor, Eigen::RowMajor>(m, n, k, a, b, c);
      else
        call<Eigen::ColMajor, Eigen::ColMajor>(m, n, k, a, b, c);
    }
  }

 private:
  using Blocking = Eigen::internal::gemm_blocking_space<Eigen::RowMajor, float, float, Eigen::Dynamic,
                                                        Eigen::Dynamic, Eigen::Dynamic, 1, false>;

  template <int OrderA, int OrderB>
  void call(Eigen::Index m, Eigen::Index n, Eigen::Index k, const Eigen::Ref<const Matrix>& a,
            const Eigen::Ref<const Matrix>& b, Eigen::Ref<Matrix>& c) {
    Eigen::internal::general_matrix_matrix_product<Eigen::Index, float, OrderA, false, float, OrderB, false,
                                                   Eigen::RowMajor, 1>::run(m, n, k, a.data(),
                                                                            a.outerStride(), b.data(),
                                                                            b.outerStride(), c.data(), 1,
                                                                            c.outerStride(), 1.0f,
                                                                            *blocking_);
  }

  std::unique_ptr<Blocking> blocking_;
  Eigen::Index m_ = 0, n_ = 0, k_ = 0;
};

}  // namespace gyre::nn::detail
