#pragma once
// LSTM with forget gate (Hochreiter & Schmidhuber 1997; Gers et al. 2000), no peepholes:
//   [i f g o] = [sig sig tanh sig](W x + b + U h)     (rows of W, U, b stacked [i f g o])
//   c' = f * c + i * g,   h' = o * tanh(c')
// Parameters "<prefix>.w_input" [4H x D], "<prefix>.w_hidden" [4H x H], "<prefix>.b_input" [1 x 4H].

#include <memory>
#include <string>

#include "gyre/nn/recurrent_layer.hpp"

namespace gyre::nn {

class LstmLayer final : public RecurrentLayer {
 public:
  LstmLayer(ParameterStore& store, const std::string& prefix, int input_size, int hidden_size,
            bool reverse = false);
  ~LstmLayer() override;

  CellType cell() const noexcept override { return CellType::kLstm; }
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

  /// Bytes held by the forward/backward caches (for tests of the grow-only policy).
  std::size_t workspace_capacity() const noexcept;

 private:
  struct Workspace;
  int input_size_, hidden_size_;
  bool reverse_;
  Parameter& w_input_;
  Parameter& w_hidden_;
  Parameter& bias_;
  std::unique_ptr<Workspace> ws_;
};

}  // namespace gyre::nn
