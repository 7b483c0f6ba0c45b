#pragma once
// SequenceModel: embedding -> recurrent stack -> head, for both kinds of model gyre trains:
//   classifier: pooled state -> dropout -> Linear -> softmax (or sigmoid for multi-label)
//   tagger:     per-token state -> dropout -> Linear -> softmax, or a linear-chain CRF
// One object holds one replica of the parameters and all the buffers of its forward/backward
// passes (grown to the largest batch seen, then reused). Data-parallel training keeps one
// replica per worker thread; a replica is not thread-safe.

#include <cstdint>
#include <memory>
#include <span>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/data/batcher.hpp"
#include "gyre/model/spec.hpp"
#include "gyre/nn/crf.hpp"
#include "gyre/nn/dropout.hpp"
#include "gyre/nn/embedding.hpp"
#include "gyre/nn/linear.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/nn/pooling.hpp"
#include "gyre/nn/rnn_stack.hpp"

namespace gyre::model {

struct LossOptions {
  std::vector<float> class_weights;  // empty = unweighted (softmax outputs only)
  float label_smoothing = 0.0f;      // softmax outputs only
};

/// What predict() produces for a batch.
struct Prediction {
  /// classify: [B x C] probabilities (softmax rows sum to 1; sigmoid: independent per label).
  /// tag: [T*B x C] time-major per-token probabilities (softmax, or CRF posterior marginals).
  nn::Matrix probs;
  /// tag only: time-major [T*B] decoded tag ids (argmax, or the Viterbi path for CRF), -1 on
  /// padding.
  std::vector<std::int32_t> tags;
};

class SequenceModel {
 public:
  explicit SequenceModel(const ModelSpec& spec);
  ~SequenceModel();
  SequenceModel(const SequenceModel&) = delete;
  SequenceModel& operator=(const SequenceModel&) = delete;

  const ModelSpec& spec() const noexcept { return spec_; }
  nn::ParameterStore& params() noexcept { return params_; }
  const nn::ParameterStore& params() const noexcept { return params_; }
  nn::Embedding& embedding() noexcept { return *embedding_; }
  nn::Crf* crf() noexcept { return crf_.get(); }

  void init_parameters(Rng& rng);
  void set_loss_options(LossOptions options);
  /// Copies every parameter value from another replica of the same spec.
  void copy_values_from(const SequenceModel& other);

  /// The unit the loss is averaged over: examples (classify), tokens (tag + softmax) or
  /// sentences (tag + CRF).
  double loss_units(const data::Batch& batch) const;

  /// Forward and backward over one batch (all its truncated-BPTT windows when bptt_window > 0,
  /// state carried across windows, gradient cut at their boundaries). Gradients of
  /// (sum of this batch's losses) / normalizer are ADDED to params(); returns the sum of the
  /// batch's losses (in loss_units). Throws gyre::DivergenceError if the loss is not finite.
  double train_batch(const data::Batch& batch, std::span<const data::EncodedExample> examples,
                     int bptt_window, double normalizer, Rng& dropout_rng);

  /// Inference (no dropout, full sequences).
  void predict(const data::Batch& batch, Prediction& out);

 private:
  double window_loss_and_grad(const std::vector<int>& active, const data::Batch& batch,
                              const data::Window& win, std::span<const data::EncodedExample> examples, int Tw,
                              double normalizer, Rng& dropout_rng);

  ModelSpec spec_;
  nn::ParameterStore params_;
  std::unique_ptr<nn::Embedding> embedding_;
  std::unique_ptr<nn::RnnStack> rnn_;
  std::unique_ptr<nn::Linear> head_;
  std::unique_ptr<nn::Crf> crf_;
  nn::Dropout embedding_dropout_;
  nn::Dropout head_dropout_;
  nn::Pooling pooling_;
  LossOptions loss_options_;

  // Reused buffers.
  std::vector<std::int32_t> ids_;
  std::vector<int> lengths_;
  std::vector<int> active_;
  std::vector<int> targets_;
  nn::Matrix x_, h_, pooled_, logits_, d_logits_, d_pooled_, d_h_, d_x_, multi_hot_;
  nn::RnnState carry_, init_, final_;
};

}  // namespace gyre::model
