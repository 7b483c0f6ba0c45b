#pragma once
// GRU (Cho et al. 2014: reset gate r, update gate z, candidate h~) in the "reset after" form
// (DEVELOPERS.md): rows stacked [r z h~]; with W = w_input, U = w_hidden, v[g] = gate g's part of v,
//   r  = sig(W[r] x + b_input[r] + U[r] h + b_hidden[r]),  z = sig(W[z] x + b_input[z] + U[z] h +
//   b_hidden[z]) h~ = tanh(W[h~] x + b_input[h~] + r * (U[h~] h + b_hidden[h~])),  h' = (1 - z) * h~ + z * h
// so the three recurrent gates come from one U h GEMM per step. Cho et al. apply r to h before
// U[h~]; this variant is the one cuDNN-style implementations (and torch.nn.GRU) use.
// Parameters "<prefix>.w_input" [3H x D], "<prefix>.w_hidden" [3H x H], "<prefix>.b_input" [1 x 3H]
// (input side), "<prefix>.b_hidden" [1 x 3H] (hidden side).

#include <memory>
#include <string>

#include "gyre/nn/recurrent_layer.hpp"

namespace gyre::nn {

class GruLayer final : public RecurrentLayer {
 public:
  GruLayer(ParameterStore& store, const std::string& prefix, int input_size, int hidden_size,
           bool reverse = false);
  ~GruLayer() override;

  CellType cell() const noexcept override { return CellType::kGru; }
  int input_size() const noexcept override { return input_size_; }
  int hidden_size() const noexcept override { return hidden_size_; }
  bool reverse() const noexcept override { return reverse_; }
  void init_parameters(Rng& rng) override;
  void forward(Eigen::Ref<const Matrix> x, int T, std::span<const int> lengths, Eigen::Ref<Matrix> out,
               const MatrixBuffer* h0 = nullptr, const MatrixBuffer* c0 = nullptr,
               MatrixBuffer* h_final = nullptr, MatrixBuffer* c_final = nullptr) override;
  void backward_into(Eigen::Ref<const Matrix> d_out, MatrixMap* d_x, bool accumulate_dx, Matrix* d_h0,
                     Matrix* d_c0) override;

  void reserve_packs() override;
  void pack_weights(int part, int parts) override;
  void read_packs_from(const RecurrentLayer* source) override;

  std::size_t workspace_capacity() const noexcept;

 private:
  struct Workspace;
  int input_size_, hidden_size_;
  bool reverse_;
  Parameter& w_input_;
  Parameter& w_hidden_;
  Parameter& bias_;
  Parameter& bias_hidden_;
  std::unique_ptr<Workspace> ws_;
};

}  // namespace gyre::nn
