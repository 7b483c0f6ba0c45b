#pragma once
// Packs the valid steps of a padded time-major batch in processing order, like a packed sequence:
// sequences sorted by length (longest first, ties by index), then processing step s = 0, 1, ...
// holds the n_s sequences still running, so the active rows of step s are ONE contiguous block
// [offset(s), offset(s) + n_s) and the state rows they read are the first n_s rows of the previous
// step's block. Padding is never computed, and per-step work is whole-block GEMMs and array ops.
// A reverse layer visits each sequence's own valid steps from its last to its first.

#include <algorithm>
#include <span>
#include <vector>

#include <Eigen/Core>

namespace gyre::nn::detail {

class SequenceLayout {
 public:
  /// Rebuilds the layout; allocates only when the batch grows beyond any earlier one.
  void build(std::span<const int> lengths, int T, bool reverse) {
    const auto B = static_cast<int>(lengths.size());
    B_ = B;
    T_ = T;
    order_.resize(static_cast<std::size_t>(B));
    for (int b = 0; b < B; ++b) order_[static_cast<std::size_t>(b)] = b;
    std::sort(order_.begin(), order_.end(), [&](int a, int b) {
      const int la = lengths[static_cast<std::size_t>(a)], lb = lengths[static_cast<std::size_t>(b)];
      return la != lb ? la > lb : a < b;
    });
    sorted_lengths_.resize(static_cast<std::size_t>(B));
    for (int j = 0; j < B; ++j)
      sorted_lengths_[static_cast<std::size_t>(j)] =
          lengths[static_cast<std::size_t>(order_[static_cast<std::size_t>(j)])];
    count_.assign(static_cast<std::size_t>(T), 0);
    offset_.resize(static_cast<std::size_t>(T) + 1);
    int total = 0;
    for (int s = 0; s < T; ++s) {
      int n = 0;
      while (n < B && sorted_lengths_[static_cast<std::size_t>(n)] > s) ++n;
      count_[static_cast<std::size_t>(s)] = n;
      offset_[static_cast<std::size_t>(s)] = total;
      total += n;
    }
    offset_[static_cast<std::size_t>(T)] = total;
    source_.resize(static_cast<std::size_t>(total));
    for (int s = 0; s < T; ++s)
      for (int j = 0; j < count_[static_cast<std::size_t>(s)]; ++j) {
        const int b = order_[static_cast<std::size_t>(j)];
        const int len = sorted_lengths_[static_cast<std::size_t>(j)];
        const int t = reverse ? len - 1 - s : s;
        source_[static_cast<std::size_t>(offset_[static_cast<std::size_t>(s)] + j)] = t * B + b;
      }
  }

  int batch() const noexcept { return B_; }
  int steps() const noexcept { return T_; }
  /// Number of packed rows (sum of lengths).
  Eigen::Index rows() const noexcept { return offset_.empty() ? 0 : offset_[static_cast<std::size_t>(T_)]; }
  /// Sequences active at processing step s (a prefix of the sorted order).
  Eigen::Index count(int s) const noexcept { return count_[static_cast<std::size_t>(s)]; }
  Eigen::Index offset(int s) const noexcept { return offset_[static_cast<std::size_t>(s)]; }
  /// Row of the padded [T*B] buffer that packed row p comes from.
  Eigen::Index source(Eigen::Index p) const noexcept { return source_[static_cast<std::size_t>(p)]; }
  /// The sources of packed rows p, p + 1, ... as a contiguous array.
  const int* sources(Eigen::Index p) const noexcept { return source_.data() + p; }
  /// Original batch index of sorted position j, and its length.
  int sequence(int j) const noexcept { return order_[static_cast<std::size_t>(j)]; }
  int length(int j) const noexcept { return sorted_lengths_[static_cast<std::size_t>(j)]; }
  /// Zeroes the padding rows (step t >= the sequence's length) of a time-major [T*B x F] buffer:
  /// the rows that no packed row is scattered to (issue 13: instead of zeroing the whole buffer
  /// and then overwriting most of it).
  template <class Rows>
  void zero_padding(Rows&& m) const {
    for (int j = 0; j < B_; ++j)
      for (int t = length(j); t < T_; ++t) m.row(static_cast<Eigen::Index>(t) * B_ + sequence(j)).setZero();
  }
  /// Writes packed row p of `packed` to row source(p) of the time-major `m` as 0 + value: the bits
  /// of adding it into a zeroed buffer (-0 becomes +0), without zeroing the buffer first.
  template <class Rows, class Packed>
  void scatter_into_zeros(const Packed& packed, Rows&& m) const {
    zero_padding(m);
    for (Eigen::Index p = 0; p < rows(); ++p) m.row(source(p)) = (packed.row(p).array() + 0.0f).matrix();
  }

 private:
  int B_ = 0, T_ = 0;
  std::vector<int> order_, sorted_lengths_, count_, offset_, source_;
};

}  // namespace gyre::nn::detail
