#pragma once
// One direction of one recurrent layer over a time-major batch (DEVELOPERS.md "Numerical
// conventions"): x is [T*B x D], row t*B + b is sequence b at step t, lengths[b] in 0..T valid
// steps (0: the sequence has no step in this truncated-BPTT window; its state passes through). A forward
// layer visits t = 0 .. len_b-1; a reverse layer visits t = len_b-1 .. 0 (each sequence's own valid steps, so
// padding never feeds the state). Padded rows of the output are zero, padded steps leave the state unchanged
// and receive no gradient, so a sequence's outputs and gradients do not depend on its batch neighbours or on
// the amount of padding.
//
// Internally the valid steps are packed like a packed sequence (sequences sorted by length, step s
// = one contiguous block of the still-running ones), so padding costs no arithmetic.
// Buffers for backward are sized on the first call for a batch shape and only ever grow: a repeat
// call with the same or a smaller shape allocates nothing. One layer object is not thread-safe;
// data-parallel training uses one replica per thread.

#include <span>

#include "gyre/core/rng.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/nn/tensor.hpp"
#include "gyre/runtime/model_header.hpp"

namespace gyre::nn {

/// The runtime's enum (one set of enums, gyre/runtime/model_header.hpp).
using CellType = runtime::Cell;

class RecurrentLayer {
 public:
  virtual ~RecurrentLayer() = default;
  RecurrentLayer() = default;
  RecurrentLayer(const RecurrentLayer&) = delete;
  RecurrentLayer& operator=(const RecurrentLayer&) = delete;

  virtual CellType cell() const noexcept = 0;
  virtual int input_size() const noexcept = 0;
  virtual int hidden_size() const noexcept = 0;
  virtual bool reverse() const noexcept = 0;
  /// Glorot uniform w_input, orthogonal w_hidden (per gate), biases zero except the LSTM forget
  /// gate bias = 1 (DEVELOPERS.md).
  virtual void init_parameters(Rng& rng) = 0;

  /// x: [T*B x input_size]; its valid rows are copied (packed), so it may change after the call.
  /// out: [T*B x hidden_size] (may be a column block of a wider buffer), written completely.
  /// h0/c0: optional initial state [B x H] (nullptr = zeros; c0 ignored by GRU).
  /// h_final/c_final: optional, shaped [B x H] and given the state after each sequence's last
  /// processed step (for a reverse layer: after t = 0); grow-only buffers, so that a caller
  /// carrying states across batches of changing size allocates only when the largest grows.
  /// Throws gyre::Error on inconsistent shapes.
  virtual void forward(Eigen::Ref<const Matrix> x, int T, std::span<const int> lengths,
                       Eigen::Ref<Matrix> out, const MatrixBuffer* h0 = nullptr,
                       const MatrixBuffer* c0 = nullptr, MatrixBuffer* h_final = nullptr,
                       MatrixBuffer* c_final = nullptr) = 0;

  /// d_out: [T*B x H] gradient of the loss w.r.t. out (padded rows ignored). Adds parameter
  /// gradients into the store. d_x (optional): [T*B x D], overwritten, or added to when
  /// accumulate_dx. d_h0/d_c0 (optional): gradient w.r.t. the initial state. The gradient w.r.t.
  /// the final state is taken as zero (truncated BPTT cuts it at the window boundary).
  void backward(Eigen::Ref<const Matrix> d_out, Matrix* d_x, bool accumulate_dx = false,
                Matrix* d_h0 = nullptr, Matrix* d_c0 = nullptr) {
    if (d_x == nullptr) {
      backward_into(d_out, nullptr, accumulate_dx, d_h0, d_c0);
      return;
    }
    if (!accumulate_dx && (d_x->rows() != d_out.rows() || d_x->cols() != input_size()))
      d_x->resize(d_out.rows(), input_size());
    MatrixMap view(d_x->data(), d_x->rows(), d_x->cols());
    backward_into(d_out, &view, accumulate_dx, d_h0, d_c0);
  }
  /// Same with d_x (optional) a view the caller has shaped [T*B x input_size] (e.g. a
  /// MatrixBuffer's, so that batches of changing shape reuse its storage).
  virtual void backward_into(Eigen::Ref<const Matrix> d_out, MatrixMap* d_x, bool accumulate_dx, Matrix* d_h0,
                             Matrix* d_c0) = 0;

  /// Weight packs shared by data-parallel replicas (issue 13). With the AVX-512 kernels each
  /// forward and backward packs the layer's weight matrices into the panel layout its products
  /// read; replicas of one model hold the same weights, so one set of packs can serve them all.
  /// reserve_packs() sizes this layer's pack buffers (allocates only when they grow; call it
  /// before the parts); pack_weights(part, parts) then fills part `part` of `parts` from the
  /// current weights (the parts may run on different threads at once). read_packs_from(source):
  /// forward and backward read `source`'s packs instead of packing (source may be this layer;
  /// nullptr: pack per call again). The caller makes sure the packs were made from weights equal
  /// to this layer's, and that neither changes until it calls read_packs_from(nullptr); the
  /// source must be a layer of the same kind and shape (gyre::Error otherwise). The results are
  /// the same bits either way (the packs are copies). Without the AVX-512 kernels these do nothing.
  virtual void reserve_packs() {}
  virtual void pack_weights(int /*part*/, int /*parts*/) {}
  virtual void read_packs_from(const RecurrentLayer* /*source*/) {}
};

}  // namespace gyre::nn
