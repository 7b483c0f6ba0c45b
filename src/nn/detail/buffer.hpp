#pragma once
// Grow-only float storage viewed as row-major matrices. Eigen's own resize() frees and reallocates
// whenever the element count changes; layers instead keep one of these per cache so a smaller
// batch reuses the memory and a repeated shape never touches the heap.

#include <cstddef>
#include <cstring>
#include <span>
#include <vector>

#include "fast_kernels.hpp"
#include "gyre/core/error.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn::detail {

/// Row copies by memcpy (the C library's vectorised copy) rather than Eigen's assignment, which the
/// layers compile for baseline x86-64 (16-byte moves); the same bytes (issue 13).
inline void copy_floats(float* dst, const float* src, Eigen::Index count) {
  std::memcpy(dst, src, static_cast<std::size_t>(count) * sizeof(float));
}

class GrowBuffer {
 public:
  /// Views the first rows*cols floats as a [rows x cols] matrix, growing the storage if needed
  /// (contents are unspecified after a growth: nothing is copied or zeroed, see MatrixBuffer).
  MatrixMap view(Eigen::Index rows, Eigen::Index cols) {
    return MatrixMap(grow_storage(data_, rows * cols), rows, cols);
  }
  std::size_t capacity_bytes() const noexcept {
    return static_cast<std::size_t>(data_.size()) * sizeof(float);
  }
  const float* data() const noexcept { return data_.data(); }

 private:
  Eigen::Matrix<float, Eigen::Dynamic, 1> data_;
};

/// out[c] += the sum of column c of a (the bias gradients). Fast-kernel path: fast::add_column_sums,
/// which walks the rows in order and adds them in the order Eigen's vectorised colwise().sum()
/// uses; otherwise that Eigen expression itself (a row-major map is summed packet-wise too).
inline void add_column_sums(const Eigen::Ref<const Matrix>& a, float* out) {
  if (a.rows() == 0) return;
  if (fast::available()) {
    fast::add_column_sums(a.data(), a.rows(), a.cols(), a.outerStride(), out);
    return;
  }
  Eigen::Map<Eigen::Matrix<float, 1, Eigen::Dynamic>>(out, a.cols()).noalias() += a.colwise().sum();
}

/// Checks a time-major batch description; returns B. Throws gyre::Error naming `who`.
/// min_length is 1 for pooling and losses; recurrent layers accept 0 (a sequence with no step in
/// this truncated-BPTT window: its state is carried through unchanged).
inline Eigen::Index check_batch(const char* who, Eigen::Index rows, int T, std::span<const int> lengths,
                                int min_length = 1) {
  GYRE_CHECK(T > 0, std::string(who) + ": T must be positive");
  GYRE_CHECK(!lengths.empty(), std::string(who) + ": empty batch");
  const auto B = static_cast<Eigen::Index>(lengths.size());
  GYRE_CHECK(rows == T * B, std::string(who) + ": buffer has " + std::to_string(rows) +
                                " rows, expected T*B = " + std::to_string(T * B));
  for (const int len : lengths)
    GYRE_CHECK(len >= min_length && len <= T, std::string(who) + ": sequence length " + std::to_string(len) +
                                                  " outside " + std::to_string(min_length) + ".." +
                                                  std::to_string(T));
  return B;
}

}  // namespace gyre::nn::detail
