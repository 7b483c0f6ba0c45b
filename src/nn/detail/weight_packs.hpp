#pragma once
// The packed copies of a recurrent layer's weights that the AVX-512 path multiplies with
// (fast_kernels.hpp), for a layer with G gates (LSTM 4, GRU 3), hidden size H and input size D:
//   step:    U [G*H x H] by pack_gates, the right operand of the fused time step (H % 16 == 0);
//   back:    U as op(B) = U [G*H x H] by pack_b, the right operand of dh = dG U;
//   in_fwd:  W [G*H x D] read transposed by pack_b, the right operand of the input projection X W^T;
//   in_back: W as op(B) = W by pack_b, the right operand of dX = dG W.
// A layer packs them per call, or once per optimizer step for all the replicas of a model
// (RecurrentLayer::pack_weights / read_packs_from, issue 13). Either way the bytes are the same,
// so the products give the same bits.

#include <cstddef>

#include "fast_kernels.hpp"

namespace gyre::nn::detail {

struct WeightPacks {
  fast::AlignedBuffer step, back, in_fwd, in_back;

  static bool fused(std::ptrdiff_t hidden) { return hidden % fast::kCellUnits == 0; }

  /// Sizes the buffers for these shapes (allocates only when one grows).
  void reserve(int gates, std::ptrdiff_t hidden, std::ptrdiff_t input) {
    const std::ptrdiff_t gh = gates * hidden;
    if (fused(hidden)) step.reserve(fast::packed_size(hidden, gh, gates * fast::kCellUnits));
    back.reserve(fast::packed_size(gh, hidden));
    in_fwd.reserve(fast::packed_size(input, gh));
    in_back.reserve(fast::packed_size(gh, input));
  }

  /// Part `part` of `parts` of all four packs from U [G*H x H] and W [G*H x D] (row-major): each
  /// pack's panels are split evenly, so the parts do about the same work and never write the same
  /// bytes. reserve() first.
  void pack(const float* u, const float* w, int gates, std::ptrdiff_t hidden, std::ptrdiff_t input, int part,
            int parts) {
    const std::ptrdiff_t gh = gates * hidden;
    auto lo = [&](std::ptrdiff_t panels) { return panels * part / parts; };
    auto hi = [&](std::ptrdiff_t panels) { return panels * (part + 1) / parts; };
    if (fused(hidden)) {
      const std::ptrdiff_t p = hidden / fast::kCellUnits;
      fast::pack_gates_panels(u, gates, hidden, step.data(), lo(p), hi(p));
    }
    const std::ptrdiff_t pb = fast::b_panels(hidden), pf = fast::b_panels(gh), pi = fast::b_panels(input);
    fast::pack_b_panels(u, hidden, false, gh, hidden, back.data(), lo(pb), hi(pb));
    fast::pack_b_panels(w, input, true, input, gh, in_fwd.data(), lo(pf), hi(pf));
    fast::pack_b_panels(w, input, false, gh, input, in_back.data(), lo(pi), hi(pi));
  }

  std::size_t capacity_bytes() const noexcept {
    return step.capacity_bytes() + back.capacity_bytes() + in_fwd.capacity_bytes() + in_back.capacity_bytes();
  }
};

}  // namespace gyre::nn::detail
