#pragma once
// Character-level word encoder: a convolution over each token's characters with max-pooling over
// positions (Kim, Jernite, Sontag & Rush 2016, "Character-Aware Neural Language Models", eq. 1-2;
// Ma & Hovy 2016, "End-to-end Sequence Labeling via Bi-directional LSTM-CNNs-CRF", section 2.1).
//
//   e_p            = chars.vectors[c_p]                  (Ec values; zero outside the token)
//   window(p)      = [e_{p-h}, ..., e_{p+h}]                      (w = 2h + 1 positions, w*Ec values)
//   y_f            = tanh( max_{p < L} ( W_f . window(p) + b_f ) ) (= max_p tanh(...): tanh is monotonic)
//
// Tensors: "<name>.vectors" [Vc x Ec] (row 0 padding: never used inside a token, never
// updated; row 1 the unknown character), "<name>.w_filter" [F x w*Ec] with window slot k at
// columns [k*Ec, (k+1)*Ec) (torch's Conv1d weight [F x Ec x w] transposed per filter),
// "<name>.b_filter" [1 x F]. A token with no characters (the padding cells of a batch grid) gets
// the zero vector and passes no gradient. Max ties go to the first position.

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

/// Characters of N tokens, flattened: token n has ids[offsets[n] .. offsets[n+1]).
struct CharTokens {
  std::span<const std::int32_t> ids;
  std::span<const std::int32_t> offsets;  // N + 1 non-decreasing entries, offsets[0] == 0
  std::size_t size() const noexcept { return offsets.empty() ? 0 : offsets.size() - 1; }
};

class CharCnn {
 public:
  /// width must be odd (same number of zero positions on each side). Throws gyre::Error otherwise.
  CharCnn(ParameterStore& store, int char_vocab_size, int char_embedding_size, int filters, int width,
          const std::string& name = "chars");
  /// Embedding N(0, 1) * 0.1 (as the word embedding; common practice, no source) with row 0
  /// zero; convolution Glorot uniform over fan-in w*Ec and fan-out F; bias zero.
  void init_parameters(Rng& rng);

  int output_size() const noexcept { return static_cast<int>(conv_weight_.value.rows()); }
  int width() const noexcept { return width_; }
  int embedding_size() const noexcept { return static_cast<int>(embedding_.value.cols()); }
  int vocab_size() const noexcept { return static_cast<int>(embedding_.value.rows()); }

  /// out: [N x F] (resized). The ids and offsets are copied for backward. Throws gyre::Error on an
  /// id out of range or malformed offsets.
  void forward(const CharTokens& tokens, Matrix& out);
  /// Same into a view the caller has shaped [N x F] (e.g. the right columns of the recurrent
  /// stack's input). The workspaces grow only (nn::grow_storage): once the most characters a call
  /// has seen is reached, forward and backward allocate nothing (issue 13).
  void forward(const CharTokens& tokens, Eigen::Ref<Matrix> out);
  /// d_out: [N x F] for the tokens of the last forward. Adds into all three gradients.
  void backward(Eigen::Ref<const Matrix> d_out);
  /// The max-pooling winners of the last forward: entry n*F + f is the character position (index
  /// into the flattened ids) whose window won filter f of token n, -1 for a token without
  /// characters. The output is smooth in the parameters only while these stay the same, so
  /// finite-difference checks use them to see whether a step crossed a switch.
  std::span<const std::int32_t> winners() const noexcept { return argmax_; }

 private:
  Parameter& embedding_;
  Parameter& conv_weight_;
  Parameter& conv_bias_;
  int width_;
  std::vector<std::int32_t> ids_, offsets_;
  std::vector<std::int32_t> argmax_;  // [N x F] row of windows_ that won, -1 for empty tokens
  MatrixBuffer windows_;              // [P x w*Ec], P = total characters
  MatrixBuffer scores_;               // [P x F]
  MatrixBuffer d_scores_;             // [P x F]
  MatrixBuffer d_windows_;            // [P x w*Ec]
  MatrixBuffer out_;                  // copy of the last output (tanh values) for backward
};

}  // namespace gyre::nn
