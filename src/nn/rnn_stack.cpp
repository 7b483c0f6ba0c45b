#include "gyre/nn/rnn_stack.hpp"

#include <string>

#include "gyre/core/error.hpp"
#include "gyre/nn/gru_layer.hpp"
#include "gyre/nn/lstm_layer.hpp"

namespace gyre::nn {

RnnStack::RnnStack(const RnnStackConfig& config, ParameterStore& store, std::string prefix)
    : config_(config) {
  if (config.input_size <= 0) throw ConfigError("input_size", "must be positive");
  if (config.hidden_size <= 0) throw ConfigError("hidden_size", "must be positive");
  if (config.layers <= 0) throw ConfigError("layers", "must be positive");
  if (!(config.dropout >= 0.0f && config.dropout < 1.0f)) throw ConfigError("dropout", "must be in [0, 1)");
  const int dirs = directions();
  for (int k = 0; k < config.layers; ++k) {
    const int in = k == 0 ? config.input_size : config.hidden_size * dirs;
    for (int d = 0; d < dirs; ++d) {
      const std::string name = prefix + ".l" + std::to_string(k) + (d == 0 ? ".fwd" : ".bwd");
      if (config.cell == CellType::kLstm)
        layers_.push_back(std::make_unique<LstmLayer>(store, name, in, config.hidden_size, d == 1));
      else
        layers_.push_back(std::make_unique<GruLayer>(store, name, in, config.hidden_size, d == 1));
    }
  }
  const auto n = static_cast<std::size_t>(config.layers);
  outputs_.resize(n);
  masks_.resize(n);
  grads_.resize(2);
}

RnnStack::~RnnStack() = default;

void RnnStack::init_parameters(Rng& rng) {
  for (auto& l : layers_) l->init_parameters(rng);
}

void RnnStack::forward(const Matrix& x, int T, std::span<const int> lengths, Matrix& out, bool training,
                       Rng* dropout_rng, const RnnState* init, RnnState* final) {
  if (out.rows() != x.rows() || out.cols() != output_size()) out.resize(x.rows(), output_size());
  forward(Eigen::Ref<const Matrix>(x), T, lengths, Eigen::Ref<Matrix>(out), training, dropout_rng, init,
          final);
}

void RnnStack::forward(Eigen::Ref<const Matrix> x, int T, std::span<const int> lengths,
                       Eigen::Ref<Matrix> out, bool training, Rng* dropout_rng, const RnnState* init,
                       RnnState* final) {
  GYRE_CHECK(x.cols() == config_.input_size, "RnnStack::forward: input has " + std::to_string(x.cols()) +
                                                 " columns, expected input_size " +
                                                 std::to_string(config_.input_size));
  const auto B = static_cast<Eigen::Index>(lengths.size());
  GYRE_CHECK(x.rows() == T * B, "RnnStack::forward: input rows must be T*B");
  GYRE_CHECK(out.rows() == x.rows() && out.cols() == output_size(),
             "RnnStack::forward: output must be [T*B x output_size]");
  const int dirs = directions(), L = config_.layers;
  const std::size_t n_states = static_cast<std::size_t>(L * dirs);
  const bool lstm = config_.cell == CellType::kLstm;
  if (init != nullptr) {
    GYRE_CHECK(init->h.size() == n_states, "RnnStack::forward: init state needs layers*directions matrices");
    GYRE_CHECK(!lstm || init->c.size() == n_states, "RnnStack::forward: LSTM init state needs c");
  }
  if (final != nullptr) {
    final->h.resize(n_states);
    final->c.resize(lstm ? n_states : 0);
  }
  dropout_applied_ = training && config_.dropout > 0.0f && L > 1;
  GYRE_CHECK(!dropout_applied_ || dropout_rng != nullptr,
             "RnnStack::forward: dropout needs an Rng when training");
  ready_ = true;
  rows_ = x.rows();

  const Eigen::Index H = config_.hidden_size, TB = x.rows();
  const float keep = 1.0f - config_.dropout, scale = 1.0f / keep;
  for (int k = 0; k < L; ++k) {
    Eigen::Ref<Matrix> o =
        k == L - 1 ? out : Eigen::Ref<Matrix>(outputs_[static_cast<std::size_t>(k)].shape(TB, H * dirs));
    for (int d = 0; d < dirs; ++d) {
      const auto idx = static_cast<std::size_t>(k * dirs + d);
      const bool carry = init != nullptr && d == 0;
      // The input of layer k: x, then the previous layer's output (its buffer's view).
      layers_[idx]->forward(
          k == 0 ? x : Eigen::Ref<const Matrix>(outputs_[static_cast<std::size_t>(k - 1)].view()), T, lengths,
          o.middleCols(d * H, H), carry ? &init->h[idx] : nullptr, carry && lstm ? &init->c[idx] : nullptr,
          final != nullptr ? &final->h[idx] : nullptr, final != nullptr && lstm ? &final->c[idx] : nullptr);
    }
    if (k < L - 1 && dropout_applied_) {
      MatrixMap mask = masks_[static_cast<std::size_t>(k)].shape(TB, H * dirs);
      for (Eigen::Index i = 0; i < mask.size(); ++i)
        mask.data()[i] = dropout_rng->uniform() < keep ? scale : 0.0f;
      o.array() *= mask.array();
    }
  }
}

void RnnStack::backward(Eigen::Ref<const Matrix> d_out, Matrix& d_x) {
  if (d_x.rows() != rows_ || d_x.cols() != config_.input_size) d_x.resize(rows_, config_.input_size);
  MatrixMap view(d_x.data(), d_x.rows(), d_x.cols());
  backward_impl(d_out, &view);
}
void RnnStack::backward(Eigen::Ref<const Matrix> d_out, MatrixMap d_x) {
  GYRE_CHECK(d_x.rows() == rows_ && d_x.cols() == config_.input_size,
             "RnnStack::backward: d_x must be [T*B x input_size]");
  backward_impl(d_out, &d_x);
}
void RnnStack::backward(Eigen::Ref<const Matrix> d_out) {
  backward_impl(d_out, nullptr);
}

void RnnStack::backward_impl(const Eigen::Ref<const Matrix>& d_out, MatrixMap* d_x) {
  GYRE_CHECK(ready_, "RnnStack::backward called before forward");
  const int dirs = directions(), L = config_.layers;
  const Eigen::Index H = config_.hidden_size, TB = rows_;
  GYRE_CHECK(d_out.rows() == TB && d_out.cols() == H * dirs,
             "RnnStack::backward: d_out must be [T*B x output_size]");
  // grads_[0/1] alternate as "gradient w.r.t. this layer's output" and "w.r.t. its input".
  for (int k = L - 1; k >= 0; --k) {
    MatrixMap grad_in =
        k > 0 ? grads_[static_cast<std::size_t>(k % 2)].shape(TB, H * dirs) : MatrixMap(nullptr, 0, 0);
    MatrixMap* d_in = k > 0 ? &grad_in : d_x;
    for (int d = 0; d < dirs; ++d) {
      auto d_cur = k == L - 1
                       ? Eigen::Ref<const Matrix>(d_out.middleCols(d * H, H))
                       : Eigen::Ref<const Matrix>(
                             grads_[static_cast<std::size_t>((k + 1) % 2)].view().middleCols(d * H, H));
      layers_[static_cast<std::size_t>(k * dirs + d)]->backward_into(d_cur, d_in, d > 0, nullptr, nullptr);
    }
    if (k > 0 && dropout_applied_) d_in->array() *= masks_[static_cast<std::size_t>(k - 1)].view().array();
  }
}

}  // namespace gyre::nn
