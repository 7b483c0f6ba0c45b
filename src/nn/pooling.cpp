#include "gyre/nn/pooling.hpp"

#include <string>

#include "detail/buffer.hpp"
#include "gyre/core/error.hpp"

namespace gyre::nn {

Pooling::Pooling(PoolingKind kind, int directions) : kind_(kind), directions_(directions) {
  GYRE_CHECK(directions == 1 || directions == 2, "Pooling: directions must be 1 or 2");
}

void Pooling::forward(Eigen::Ref<const Matrix> seq, int T, std::span<const int> lengths, Matrix& pooled) {
  const auto B = static_cast<Eigen::Index>(lengths.size());
  if (pooled.rows() != B || pooled.cols() != seq.cols()) pooled.resize(B, seq.cols());
  forward(seq, T, lengths, Eigen::Ref<Matrix>(pooled));
}

void Pooling::forward(Eigen::Ref<const Matrix> seq, int T, std::span<const int> lengths,
                      Eigen::Ref<Matrix> pooled) {
  const Eigen::Index B = detail::check_batch("Pooling::forward", seq.rows(), T, lengths);
  const Eigen::Index F = seq.cols();
  GYRE_CHECK(F % directions_ == 0, "Pooling::forward: feature count must split into the directions");
  GYRE_CHECK(pooled.rows() == B && pooled.cols() == F, "Pooling::forward: output must be [B x F]");
  T_ = T;
  lengths_.assign(lengths.begin(), lengths.end());
  switch (kind_) {
    case PoolingKind::kLast: {
      const Eigen::Index H = F / directions_;
      for (Eigen::Index b = 0; b < B; ++b) {
        const Eigen::Index last = (lengths[static_cast<std::size_t>(b)] - 1) * B + b;
        pooled.row(b).segment(0, H) = seq.row(last).segment(0, H);
        if (directions_ == 2) pooled.row(b).segment(H, H) = seq.row(b).segment(H, H);  // bwd state at t = 0
      }
      break;
    }
    case PoolingKind::kMean:
      for (Eigen::Index b = 0; b < B; ++b) {
        const int len = lengths[static_cast<std::size_t>(b)];
        pooled.row(b).setZero();
        for (Eigen::Index t = 0; t < len; ++t) pooled.row(b) += seq.row(t * B + b);
        pooled.row(b) /= static_cast<float>(len);
      }
      break;
    case PoolingKind::kMax:
      argmax_.resize(static_cast<std::size_t>(B * F));
      for (Eigen::Index b = 0; b < B; ++b) {
        const int len = lengths[static_cast<std::size_t>(b)];
        for (Eigen::Index f = 0; f < F; ++f) {
          Eigen::Index best = b;  // t = 0
          for (Eigen::Index t = 1; t < len; ++t)
            if (seq(t * B + b, f) > seq(best, f)) best = t * B + b;  // first maximum wins ties
          pooled(b, f) = seq(best, f);
          argmax_[static_cast<std::size_t>(b * F + f)] = static_cast<int>(best);
        }
      }
      break;
  }
}

void Pooling::backward(Eigen::Ref<const Matrix> d_pooled, Matrix& d_seq) const {
  const auto rows = static_cast<Eigen::Index>(T_) * static_cast<Eigen::Index>(lengths_.size());
  if (d_seq.rows() != rows || d_seq.cols() != d_pooled.cols()) d_seq.resize(rows, d_pooled.cols());
  backward(d_pooled, Eigen::Ref<Matrix>(d_seq));
}

void Pooling::backward(Eigen::Ref<const Matrix> d_pooled, Eigen::Ref<Matrix> d_seq) const {
  GYRE_CHECK(!lengths_.empty(), "Pooling::backward called before forward");
  const auto B = static_cast<Eigen::Index>(lengths_.size());
  const Eigen::Index F = d_pooled.cols();
  GYRE_CHECK(d_pooled.rows() == B, "Pooling::backward: d_pooled must be [B x F]");
  GYRE_CHECK(d_seq.rows() == T_ * B && d_seq.cols() == F, "Pooling::backward: d_seq must be [T*B x F]");
  if (kind_ != PoolingKind::kMean) d_seq.setZero();  // mean writes every row below
  switch (kind_) {
    case PoolingKind::kLast: {
      const Eigen::Index H = F / directions_;
      for (Eigen::Index b = 0; b < B; ++b) {
        const Eigen::Index last = (lengths_[static_cast<std::size_t>(b)] - 1) * B + b;
        d_seq.row(last).segment(0, H) += d_pooled.row(b).segment(0, H);
        if (directions_ == 2) d_seq.row(b).segment(H, H) += d_pooled.row(b).segment(H, H);
      }
      break;
    }
    case PoolingKind::kMean:
      for (Eigen::Index b = 0; b < B; ++b) {
        const int len = lengths_[static_cast<std::size_t>(b)];
        const float inv = 1.0f / static_cast<float>(len);
        for (Eigen::Index t = 0; t < len; ++t) d_seq.row(t * B + b) = d_pooled.row(b) * inv;
        for (Eigen::Index t = len; t < T_; ++t) d_seq.row(t * B + b).setZero();  // padding
      }
      break;
    case PoolingKind::kMax:
      for (Eigen::Index b = 0; b < B; ++b)
        for (Eigen::Index f = 0; f < F; ++f)
          d_seq(argmax_[static_cast<std::size_t>(b * F + f)], f) += d_pooled(b, f);
      break;
  }
}

}  // namespace gyre::nn
