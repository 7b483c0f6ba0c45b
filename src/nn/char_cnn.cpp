#include "gyre/nn/char_cnn.hpp"

#include <cmath>
#include <utility>

#include "gyre/core/error.hpp"
#include "gyre/nn/init.hpp"

namespace gyre::nn {

CharCnn::CharCnn(ParameterStore& store, int char_vocab_size, int char_embedding_size, int filters, int width,
                 const std::string& name)
    : embedding_(store.add(name + ".vectors", char_vocab_size, char_embedding_size)),
      conv_weight_(store.add(name + ".w_filter", filters, width * char_embedding_size)),
      conv_bias_(store.add(name + ".b_filter", 1, filters)),
      width_(width) {
  GYRE_CHECK(width >= 1 && width % 2 == 1, "CharCnn: the convolution width must be odd");
  GYRE_CHECK(char_vocab_size >= 2 && char_embedding_size >= 1 && filters >= 1,
             "CharCnn: sizes must be positive");
}

void CharCnn::init_parameters(Rng& rng) {
  for (Eigen::Index i = 0; i < embedding_.value.size(); ++i) embedding_.value.data()[i] = rng.normal() * 0.1f;
  embedding_.value.row(0).setZero();
  glorot_uniform(conv_weight_.value, rng);
  conv_bias_.value.setZero();
}

void CharCnn::forward(const CharTokens& tokens, Matrix& out) {
  const auto n_tokens = static_cast<Eigen::Index>(tokens.size());
  const Eigen::Index f = conv_weight_.value.rows();
  if (out.rows() != n_tokens || out.cols() != f) out.resize(n_tokens, f);
  forward(tokens, Eigen::Ref<Matrix>(out));
}

void CharCnn::forward(const CharTokens& tokens, Eigen::Ref<Matrix> out) {
  const auto n_tokens = static_cast<Eigen::Index>(tokens.size());
  GYRE_CHECK(!tokens.offsets.empty() && tokens.offsets.front() == 0 &&
                 static_cast<std::size_t>(tokens.offsets.back()) == tokens.ids.size(),
             "CharCnn::forward: offsets must start at 0 and end at the number of ids");
  ids_.assign(tokens.ids.begin(), tokens.ids.end());
  offsets_.assign(tokens.offsets.begin(), tokens.offsets.end());
  const Eigen::Index ec = embedding_.value.cols();
  const Eigen::Index f = conv_weight_.value.rows();
  const Eigen::Index vc = embedding_.value.rows();
  const auto positions = static_cast<Eigen::Index>(ids_.size());
  const int half = width_ / 2;
  GYRE_CHECK(out.rows() == n_tokens && out.cols() == f,
             "CharCnn::forward: output must be [tokens x filters]");
  for (const auto id : ids_) GYRE_CHECK(id >= 0 && id < vc, "CharCnn::forward: character id out of range");

  // im2col: one row of w*Ec values per character position (zeros beyond the token).
  MatrixMap windows = windows_.shape(positions, width_ * ec);
  for (Eigen::Index n = 0; n < n_tokens; ++n) {
    const auto begin = offsets_[static_cast<std::size_t>(n)], end = offsets_[static_cast<std::size_t>(n) + 1];
    GYRE_CHECK(begin <= end, "CharCnn::forward: offsets must not decrease");
    const int len = end - begin;
    for (int p = 0; p < len; ++p)
      for (int k = 0; k < width_; ++k) {
        const int q = p - half + k;
        auto slot = windows.block(begin + p, k * ec, 1, ec);
        if (q < 0 || q >= len)
          slot.setZero();
        else
          slot = embedding_.value.row(ids_[static_cast<std::size_t>(begin + q)]);
      }
  }
  MatrixMap scores = scores_.shape(positions, f);
  if (positions > 0) {
    scores.noalias() = windows * conv_weight_.value.transpose();
    scores.rowwise() += conv_bias_.value.row(0);
  }
  argmax_.assign(static_cast<std::size_t>(n_tokens * f), -1);
  for (Eigen::Index n = 0; n < n_tokens; ++n) {
    const auto begin = offsets_[static_cast<std::size_t>(n)], end = offsets_[static_cast<std::size_t>(n) + 1];
    for (Eigen::Index j = 0; j < f; ++j) {
      if (begin == end) {
        out(n, j) = 0.0f;
        continue;
      }
      int best = begin;
      for (int r = begin + 1; r < end; ++r)
        if (scores(r, j) > scores(best, j)) best = r;
      argmax_[static_cast<std::size_t>(n * f + j)] = best;
      out(n, j) = std::tanh(scores(best, j));
    }
  }
  out_.shape(n_tokens, f) = out;
}

void CharCnn::backward(Eigen::Ref<const Matrix> d_out) {
  const Eigen::Index f = conv_weight_.value.rows();
  const Eigen::Index ec = embedding_.value.cols();
  const auto n_tokens = static_cast<Eigen::Index>(offsets_.empty() ? 0 : offsets_.size() - 1);
  GYRE_CHECK(d_out.rows() == n_tokens && d_out.cols() == f, "CharCnn::backward: d_out has the wrong shape");
  const auto positions = static_cast<Eigen::Index>(ids_.size());
  if (positions == 0) return;
  const ConstMatrixMap out = std::as_const(out_).view();
  MatrixMap ds = d_scores_.shape(positions, f);
  ds.setZero();
  for (Eigen::Index n = 0; n < n_tokens; ++n)
    for (Eigen::Index j = 0; j < f; ++j) {
      const auto r = argmax_[static_cast<std::size_t>(n * f + j)];
      if (r < 0) continue;
      const float y = out(n, j);
      ds(r, j) += d_out(n, j) * (1.0f - y * y);
    }
  conv_weight_.grad.noalias() += ds.transpose() * windows_.view();
  conv_bias_.grad.row(0).noalias() += ds.colwise().sum();
  MatrixMap d_windows = d_windows_.shape(positions, width_ * ec);
  d_windows.noalias() = ds * conv_weight_.value;
  // Scatter the window gradients back to the characters they were copied from.
  const int half = width_ / 2;
  for (Eigen::Index n = 0; n < n_tokens; ++n) {
    const auto begin = offsets_[static_cast<std::size_t>(n)], end = offsets_[static_cast<std::size_t>(n) + 1];
    const int len = end - begin;
    for (int p = 0; p < len; ++p)
      for (int k = 0; k < width_; ++k) {
        const int q = p - half + k;
        if (q < 0 || q >= len) continue;
        const auto id = ids_[static_cast<std::size_t>(begin + q)];
        if (id == 0) continue;  // padding row: never updated
        embedding_.grad.row(id) += d_windows.block(begin + p, k * ec, 1, ec);
      }
  }
}

}  // namespace gyre::nn
