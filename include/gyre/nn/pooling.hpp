#pragma once
// Pooling of a time-major sequence buffer [T*B x F] over each sequence's valid steps into [B x F]
// (DEVELOPERS.md "Pooling"): kLast = forward direction's output at the last valid step and, when
// bidirectional, backward direction's output at step 0, concatenated [fwd, bwd]; kMean, kMax over
// the valid steps.

#include <span>
#include <string_view>
#include <vector>

#include "gyre/nn/tensor.hpp"
#include "gyre/runtime/model_header.hpp"

namespace gyre::nn {

/// The runtime's enum (one set of enums, gyre/runtime/model_header.hpp): runtime::to_string and
/// runtime::pooling_from_string convert it.
using PoolingKind = runtime::Pooling;

class Pooling {
 public:
  /// directions = 1 or 2; for kLast the feature columns are split [fwd H | bwd H].
  explicit Pooling(PoolingKind kind, int directions = 1);
  PoolingKind kind() const noexcept { return kind_; }

  void forward(Eigen::Ref<const Matrix> seq, int T, std::span<const int> lengths, Matrix& pooled);
  /// Same into a view the caller has shaped [B x F] (e.g. a MatrixBuffer's).
  void forward(Eigen::Ref<const Matrix> seq, int T, std::span<const int> lengths, Eigen::Ref<Matrix> pooled);
  /// d_pooled [B x F] -> d_seq [T*B x F] (overwritten; zero where nothing was pooled).
  void backward(Eigen::Ref<const Matrix> d_pooled, Matrix& d_seq) const;
  /// Same into a view the caller has shaped [T*B x F].
  void backward(Eigen::Ref<const Matrix> d_pooled, Eigen::Ref<Matrix> d_seq) const;

 private:
  PoolingKind kind_;
  int directions_;
  int T_ = 0;
  std::vector<int> lengths_;
  std::vector<int> argmax_;  // [B x F] row index of the max (kMax)
};

}  // namespace gyre::nn
