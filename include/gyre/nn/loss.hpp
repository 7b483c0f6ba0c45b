#pragma once
// Losses on logits, all log-sum-exp stable. Each returns the mean loss (double) and writes the
// gradient of that mean w.r.t. the logits.

#include <span>

#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

struct CrossEntropyOptions {
  /// Optional per-class weights (size C). With weights the mean divides by the sum of the
  /// targets' weights (the convention of torch.nn.CrossEntropyLoss, reduction "mean").
  std::span<const float> class_weights{};
  /// Label smoothing eps in [0, 1): target distribution (1 - eps) one-hot + eps / C uniform
  /// (Szegedy et al. 2016); with weights, each class term carries its weight (as torch 1.13).
  float label_smoothing = 0.0f;
};

/// logits [N x C], targets[i] in [0, C) or < 0 to ignore row i (zero gradient, not counted).
/// Returns the (weighted) mean over counted rows; 0 with a zero gradient when none is counted.
/// Throws gyre::Error on a target >= C or shape mismatch.
double softmax_cross_entropy(const Matrix& logits, std::span<const int> targets, Matrix& d_logits,
                             const CrossEntropyOptions& options = {});
/// Same with d_logits a view the caller has shaped like logits (e.g. a MatrixBuffer's).
double softmax_cross_entropy(Eigen::Ref<const Matrix> logits, std::span<const int> targets,
                             Eigen::Ref<Matrix> d_logits, const CrossEntropyOptions& options = {});

/// Per-token version for taggers: logits [T*B x C] time-major, tags [T*B]; rows with
/// t >= lengths[b] are padding and ignored. Mean over valid tokens.
double token_cross_entropy(const Matrix& logits, std::span<const int> tags, int T,
                           std::span<const int> lengths, Matrix& d_logits,
                           const CrossEntropyOptions& options = {});
/// Same with d_logits a view the caller has shaped like logits.
double token_cross_entropy(Eigen::Ref<const Matrix> logits, std::span<const int> tags, int T,
                           std::span<const int> lengths, Eigen::Ref<Matrix> d_logits,
                           const CrossEntropyOptions& options = {});

/// Multi-label: logits and targets [N x C], targets 0 or 1 (any value in [0, 1] is accepted).
/// Mean of the binary cross-entropy over all N*C entries, computed stably as
/// max(x, 0) - x*y + log(1 + exp(-|x|)).
double sigmoid_binary_cross_entropy(const Matrix& logits, const Matrix& targets, Matrix& d_logits);
/// Same with d_logits a view the caller has shaped like logits.
double sigmoid_binary_cross_entropy(Eigen::Ref<const Matrix> logits, Eigen::Ref<const Matrix> targets,
                                    Eigen::Ref<Matrix> d_logits);

/// Row-wise softmax (stable), probs [N x C].
void softmax_rows(Eigen::Ref<const Matrix> logits, Matrix& probs);

}  // namespace gyre::nn
