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

namespace {
// Eigen's resize() reallocates on any size change; keep a buffer when it is big enough. Callers
// that need exact shapes get them; the storage only grows when the batch does.
void ensure_shape(Matrix& m, Eigen::Index rows, Eigen::Index cols) {
  if (m.rows() != rows || m.cols() != cols) m.resize(rows, cols);
}
}  // namespace

void RnnStack::forward(const Matrix& x, int T, std::span<const int> lengths, Matrix& out, bool training,
                       Rng* dropout_rng, const RnnState* init, RnnState* final) {
  GYRE_CHECK(x.cols() == config_.input_size, "RnnStack::forward: input has " + std::to_string(x.cols()) +
                                                 " columns, expected input_size " +
                                                 std::to_string(config_.input_size));
  const auto B = static_cast<Eigen::Index>(lengths.size());
  GYRE_CHECK(x.rows() == T * B, "RnnStack::forward: input rows must be T*B");
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
  const Matrix* in = &x;
  for (int k = 0; k < L; ++k) {
    Matrix& o = k == L - 1 ? out : outputs_[static_cast<std::size_t>(k)];
    ensure_shape(o, TB, H * dirs);
    for (int d = 0; d < dirs; ++d) {
      const auto idx = static_cast<std::size_t>(k * dirs + d);
      const bool carry = init != nullptr && d == 0;
      layers_[idx]->forward(*in, T, lengths, o.middleCols(d * H, H), carry ? &init->h[idx] : nullptr,
                            carry && lstm ? &init->c[idx] : nullptr,
                            final != nullptr ? &final->h[idx] : nullptr,
                            final != nullptr && lstm ? &final->c[idx] : nullptr);
    }
    if (k < L - 1 && dropout_applied_) {
      Matrix& mask = masks_[static_cast<std::size_t>(k)];
      ensure_shape(mask, TB, H * dirs);
      for (Eigen::Index i = 0; i < mask.size(); ++i)
        mask.data()[i] = dropout_rng->uniform() < keep ? scale : 0.0f;
      o.array() *= mask.array();
    }
    in = &o;
  }
}

void RnnStack::backward(const Matrix& d_out, Matrix& d_x) {
  backward_impl(d_out, &d_x);
}
void RnnStack::backward(const Matrix& d_out) {
  backward_impl(d_out, nullptr);
}

void RnnStack::backward_impl(const Matrix& d_out, Matrix* d_x) {
  GYRE_CHECK(ready_, "RnnStack::backward called before forward");
  const int dirs = directions(), L = config_.layers;
  const Eigen::Index H = config_.hidden_size, TB = rows_;
  GYRE_CHECK(d_out.rows() == TB && d_out.cols() == H * dirs,
             "RnnStack::backward: d_out must be [T*B x output_size]");
  // grads_[0/1] alternate as "gradient w.r.t. this layer's output" and "w.r.t. its input".
  const Matrix* d_cur = &d_out;
  for (int k = L - 1; k >= 0; --k) {
    Matrix* d_in = k == 0 ? d_x : &grads_[static_cast<std::size_t>(k % 2)];
    if (d_in != nullptr) ensure_shape(*d_in, TB, k == 0 ? config_.input_size : H * dirs);
    for (int d = 0; d < dirs; ++d)
      layers_[static_cast<std::size_t>(k * dirs + d)]->backward(d_cur->middleCols(d * H, H), d_in, d > 0);
    if (k > 0) {
      if (dropout_applied_) d_in->array() *= masks_[static_cast<std::size_t>(k - 1)].array();
      d_cur = d_in;
    }
  }
}

}  // namespace gyre::nn
