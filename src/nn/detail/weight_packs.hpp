#pragma once
// The packed copies of a recurrent layer's weights that the fast kernels (AVX-512 or AVX2) multiply with
// (fast_kernels.hpp), for a layer with G gates (LSTM 4, GRU 3), hidden size H and input size D:
//   step:    U [G*H x H] by pack_gates, the right operand of the fused time step (H % 16 == 0);
//   back:    U as op(B) = U [G*H x H] by pack_b, the right operand of dh = dG U;
//   in_fwd:  W [G*H x D] read transposed by pack_b, the right operand of the input projection X W^T;
//   in_back: W as op(B) = W by pack_b, the right operand of dX = dG W.
// A layer packs them per call, or once per optimizer step for all the replicas of a model
// (RecurrentLayer::pack_weights / read_packs_from, issue 13). Either way the bytes are the same,
// so the products give the same bits.

#include <cstddef>
#include <string>

#include "fast_kernels.hpp"
#include "gyre/core/error.hpp"
#include "gyre/nn/recurrent_layer.hpp"

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

/// A recurrent layer's packs with G gates (LSTM 4, GRU 3): its own, and the ones its forward and
/// backward read when set (RecurrentLayer::read_packs_from: this layer's after pack_weights, or
/// another replica's). Without the fast kernels nothing is packed.
struct LayerPacks {
  WeightPacks own;
  const WeightPacks* shared = nullptr;

  /// RecurrentLayer::reserve_packs / pack_weights for weights U [G*H x H] and W [G*H x D].
  void reserve(int gates, std::ptrdiff_t hidden, std::ptrdiff_t input) {
    if (fast::available()) own.reserve(gates, hidden, input);
  }
  void pack(const float* u, const float* w, int gates, std::ptrdiff_t hidden, std::ptrdiff_t input, int part,
            int parts) {
    if (fast::available()) own.pack(u, w, gates, hidden, input, part, parts);
  }
  std::size_t capacity_bytes() const noexcept { return own.capacity_bytes(); }
  /// The packs made for this step by pack_weights (fast-kernel path only), or null: pack per call.
  const WeightPacks* made() const noexcept { return fast::available() ? shared : nullptr; }
  /// U gate-interleaved for the fused time step: the made pack, or packed now into `own`; null when
  /// the fused step does not apply (no fast kernels, or H not a multiple of kCellUnits).
  const float* step(const float* u, int gates, std::ptrdiff_t hidden) {
    if (!fast::available() || !WeightPacks::fused(hidden)) return nullptr;
    if (shared != nullptr) return shared->step.data();
    own.step.reserve(fast::packed_size(hidden, gates * hidden, gates * fast::kCellUnits));
    fast::pack_gates(u, gates, hidden, own.step.data());
    return own.step.data();
  }
  /// U as the right operand of dG U: the made pack, or packed now into `own`; null without the
  /// fast kernels.
  const float* back(const float* u, int gates, std::ptrdiff_t hidden) {
    if (!fast::available()) return nullptr;
    if (shared != nullptr) return shared->back.data();
    own.back.reserve(fast::packed_size(gates * hidden, hidden));
    fast::pack_b(u, hidden, false, gates * hidden, hidden, own.back.data());
    return own.back.data();
  }
};

/// read_packs_from's source as a layer of `self`'s kind and shape; gyre::Error with `message`
/// otherwise.
template <class Layer>
const Layer& same_layer(const RecurrentLayer& source, const Layer& self, const char* message) {
  const auto* other = dynamic_cast<const Layer*>(&source);
  GYRE_CHECK(other != nullptr && other->input_size() == self.input_size() &&
                 other->hidden_size() == self.hidden_size(),
             message);
  return *other;
}

}  // namespace gyre::nn::detail
