#pragma once
// Stacked recurrent layers, unidirectional or bidirectional, with inverted dropout between layers
// (on every layer's output except the last; off at inference). Parameters are named
// "<prefix>.l{k}.{fwd,bwd}.{w_input,w_hidden,b_input[,b_hidden]}" (DEVELOPERS.md "Tensor names").
//
// Usage per batch (time-major, see recurrent_layer.hpp):
//   stack.forward(x, T, lengths, out, training, &rng);   // out [T*B x output_size()]
//   ... loss ... d_out
//   stack.backward(d_out, d_x);                           // grads added into the store
// x is copied (packed) by the first layer: the caller may reuse it after forward().
// All mutable state lives in the object (data-parallel training: one replica per thread).

#include <memory>
#include <span>
#include <string>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/nn/recurrent_layer.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

struct RnnStackConfig {
  CellType cell = CellType::kLstm;
  int input_size = 0;
  int hidden_size = 0;
  int layers = 1;
  bool bidirectional = false;
  float dropout = 0.0f;  // between layers, in [0, 1)
};

/// Recurrent state, one [B x H] matrix per (layer, direction) at index layer * directions + dir
/// (dir 0 = fwd, 1 = bwd). c is used by LSTM only (left empty for GRU). Grow-only buffers, so that
/// truncated BPTT, whose windows hold fewer or more sequences from one to the next, reuses their
/// storage (issue 13).
struct RnnState {
  std::vector<MatrixBuffer> h, c;
};

class RnnStack {
 public:
  /// Registers all parameters in `store` (zero-initialised; call init_parameters). Throws
  /// gyre::ConfigError on a bad config.
  RnnStack(const RnnStackConfig& config, ParameterStore& store, std::string prefix = "rnn");
  ~RnnStack();
  RnnStack(const RnnStack&) = delete;
  RnnStack& operator=(const RnnStack&) = delete;

  void init_parameters(Rng& rng);
  const RnnStackConfig& config() const noexcept { return config_; }
  int directions() const noexcept { return config_.bidirectional ? 2 : 1; }
  int output_size() const noexcept { return config_.hidden_size * directions(); }
  RecurrentLayer& layer(int k, int dir) { return *layers_[static_cast<std::size_t>(k * directions() + dir)]; }

  /// x: [T*B x input_size]; lengths.size() == B, each in 0..T (0 = no step in this window). out: [T*B x
  /// output_size()], padded rows zero. training && dropout > 0 needs dropout_rng. init: optional carried
  /// state for the forward direction of each layer (truncated BPTT; the backward direction always starts at
  /// zero; entries for bwd are ignored). final: optional, receives the state after each
  /// sequence's last valid step (bwd direction: after step 0).
  void forward(const Matrix& x, int T, std::span<const int> lengths, Matrix& out, bool training,
               Rng* dropout_rng, const RnnState* init = nullptr, RnnState* final = nullptr);
  /// Same with out a view the caller has shaped [T*B x output_size()] (e.g. a MatrixBuffer's:
  /// batches of changing shape then reuse its storage, as the stack's own buffers do).
  void forward(Eigen::Ref<const Matrix> x, int T, std::span<const int> lengths, Eigen::Ref<Matrix> out,
               bool training, Rng* dropout_rng, const RnnState* init = nullptr, RnnState* final = nullptr);

  /// d_out: [T*B x output_size()]. Adds parameter gradients into the store; d_x receives
  /// [T*B x input_size] (overwritten). The gradient w.r.t. `init` is not propagated (the window
  /// boundary of truncated BPTT).
  void backward(Eigen::Ref<const Matrix> d_out, Matrix& d_x);
  /// Same with d_x a contiguous view the caller has shaped [T*B x input_size].
  void backward(Eigen::Ref<const Matrix> d_out, MatrixMap d_x);
  /// Same, without computing the input gradient (e.g. frozen embeddings).
  void backward(Eigen::Ref<const Matrix> d_out);

 private:
  void backward_impl(const Eigen::Ref<const Matrix>& d_out, MatrixMap* d_x);

  RnnStackConfig config_;
  std::vector<std::unique_ptr<RecurrentLayer>> layers_;  // index k * directions + dir
  // Per layer k: its output [T*B x output_size] (after dropout for k < layers-1), dropout mask;
  // grown to the largest batch (MatrixBuffer), so a step of any smaller shape allocates nothing.
  std::vector<MatrixBuffer> outputs_, masks_, grads_;
  bool ready_ = false;
  Eigen::Index rows_ = 0;  // T*B of the last forward
  bool dropout_applied_ = false;
};

}  // namespace gyre::nn
