#pragma once
// Dense float32 buffers used throughout the training library. Row-major so that a sequence
// buffer [T*B x F] is T contiguous [B x F] blocks, one per time step (row t*B + b is sequence b at
// time t), and a weight [rows x cols] is laid out as the model file stores it.

#include <Eigen/Core>
#include <cstddef>

namespace gyre::nn {

using Matrix = Eigen::Matrix<float, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
using Vector = Eigen::Matrix<float, 1, Eigen::Dynamic, Eigen::RowMajor>;  // a row
using MatrixMap = Eigen::Map<Matrix>;
using ConstMatrixMap = Eigen::Map<const Matrix>;
using MatrixD = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

/// Grow-only storage for a matrix whose shape changes from batch to batch (the time-major buffers
/// of a training step: T*B rows, T and B varying). Eigen's resize() frees and allocates on every
/// change of size; shape() keeps the storage whenever the new shape fits in it, so once the
/// largest shape has been seen a step touches the heap no more. The storage is Eigen's own
/// (aligned like a Matrix's data), so the same products and sums give the same bits on a view as
/// on a Matrix.
/// The storage behind MatrixBuffer and the layers' workspaces: at least `count` floats. A growth
/// neither copies nor zeroes (the old contents are dropped; callers write before they read), and
/// it takes half as much again as asked, so a run whose batches grow a little at a time (length
/// buckets met in random order) reallocates a few times instead of at every new longest batch;
/// pages of a freshly mapped block that are never written cost no fault and no resident memory.
inline float* grow_storage(Eigen::Matrix<float, Eigen::Dynamic, 1>& storage, Eigen::Index count) {
  if (count > storage.size()) {
    storage.resize(0);  // free first: the new block may reuse the old one's memory
    storage.resize(count + count / 2);
  }
  return storage.data();
}

class MatrixBuffer {
 public:
  /// Views the first rows*cols floats as a [rows x cols] matrix, growing the storage when it is
  /// too small. The contents are unspecified after a call that changes the shape.
  MatrixMap shape(Eigen::Index rows, Eigen::Index cols) {
    grow_storage(storage_, rows * cols);
    rows_ = rows;
    cols_ = cols;
    return view();
  }
  /// Shapes the buffer like `m` and copies it in.
  MatrixMap assign(const Eigen::Ref<const Matrix>& m) {
    MatrixMap v = shape(m.rows(), m.cols());
    v = m;
    return v;
  }
  /// The current shape's view.
  MatrixMap view() noexcept { return MatrixMap(storage_.data(), rows_, cols_); }
  ConstMatrixMap view() const noexcept { return ConstMatrixMap(storage_.data(), rows_, cols_); }
  Eigen::Index rows() const noexcept { return rows_; }
  Eigen::Index cols() const noexcept { return cols_; }
  std::size_t capacity_bytes() const noexcept {
    return static_cast<std::size_t>(storage_.size()) * sizeof(float);
  }

 private:
  Eigen::Matrix<float, Eigen::Dynamic, 1> storage_;
  Eigen::Index rows_ = 0, cols_ = 0;
};

}  // namespace gyre::nn
