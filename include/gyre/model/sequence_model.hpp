#pragma once
// SequenceModel: embedding -> recurrent stack -> head, for both kinds of model gyre trains
// (with a character encoder, each token's input is [word embedding, CharCnn over its characters];
// the batch carries the characters, data::Batch::char_ids):
//   classifier: pooled state -> dropout -> Linear -> softmax (or sigmoid for multi-label)
//   tagger:     per-token state -> dropout -> Linear -> softmax, or a linear-chain CRF
// One object holds one replica of the parameters and all the buffers of its forward/backward
// passes (grown to the largest batch seen, then reused). Data-parallel training keeps one
// replica per worker thread; a replica is not thread-safe.

#include <cmath>
#include <cstdint>
#include <memory>
#include <span>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/data/batcher.hpp"
#include "gyre/data/encoded_corpus.hpp"
#include "gyre/model/spec.hpp"
#include "gyre/nn/char_cnn.hpp"
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
  /// The same rows before temperature scaling, as scores: classify: the output layer's logits
  /// [B x C]; tag: log of the token distribution [T*B x C] (logits minus their log-sum-exp for
  /// softmax, log CRF marginals). What a temperature is fitted on.
  nn::Matrix scores;
  /// classify only: the pooled representation the output layer reads [B x F].
  nn::Matrix features;
  /// tag only: time-major [T*B] decoded tag ids (argmax, or the Viterbi path for CRF), -1 on
  /// padding.
  std::vector<std::int32_t> tags;
};

/// Token rows (points x text length) per forward/backward batch of integrated gradients when the
/// caller does not choose the points per batch: about the rows of a training batch (32 texts of
/// 128 tokens), so explaining a long text needs no more memory than training did. Our choice.
inline constexpr int kIntegratedGradientsRows = 4096;

/// Per-token attributions of one classified text (SequenceModel::integrated_gradients).
struct TokenAttribution {
  std::vector<float> scores;     // one per token: its share of output - baseline_output
  double output = 0.0;           // F(x): the target label's probability for the text
  double baseline_output = 0.0;  // F(x'): the same with every embedding zero (the padding row)
  double sum = 0.0;              // sum of scores; completeness: sum = output - baseline_output
  int steps = 0;                 // Riemann steps along the path (trapezoid rule)
  /// |sum - (output - baseline_output)|: the completeness gap (Sundararajan et al. 2017, prop. 1).
  double completeness_gap() const { return std::abs(sum - (output - baseline_output)); }
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
  nn::RnnStack& rnn() noexcept { return *rnn_; }
  /// nullptr without a character encoder.
  nn::CharCnn* char_encoder() noexcept { return chars_.get(); }

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
  /// Same over an arena (batch filled from `examples` by data::fill_batch).
  double train_batch(const data::Batch& batch, const data::EncodedCorpus& examples, int bptt_window,
                     double normalizer, Rng& dropout_rng);

  /// Inference (no dropout, full sequences). probs are calibrated by spec().temperature when it
  /// is set and calibrated() is on (the default).
  void predict(const data::Batch& batch, Prediction& out);

  /// Integrated gradients (Sundararajan et al. 2017, "Axiomatic Attribution for Deep Networks",
  /// eq. 1 and section 5) of the target label's probability (calibrated when calibrated() is on)
  /// with respect to the token embeddings, from the all-zero embedding baseline (the padding
  /// row) along the straight path, integrated by the trapezoid rule over `steps` intervals: token
  /// t gets sum_e x_te * integral of dF/dx_te. The steps + 1 points of the path run in batches of
  /// `points_per_batch` points (0: as many as keep a batch within kIntegratedGradientsRows token
  /// rows, at least one), so the memory does not grow with steps * text length; the attributions
  /// do not depend on the batching beyond float rounding of the products. Classifiers only;
  /// throws gyre::Error for a tagger, an empty text, a bad id or target, steps < 1,
  /// points_per_batch < 0. Clears the
  /// parameter gradients (it uses the backward pass); not for a replica in the middle of a step.
  /// With a character encoder the path runs over the recurrent stack's whole input, [word
  /// embedding, character features] (the same zero baseline: the padding row and a token without
  /// characters); use the overload that takes the example, the ids-only one throws for such a model.
  TokenAttribution integrated_gradients(std::span<const std::int32_t> ids, int target, int steps = 64,
                                        int points_per_batch = 0);
  /// Same for an encoded text: its ids, and its characters for a model with a character encoder.
  TokenAttribution integrated_gradients(const data::EncodedExample& example, int target, int steps = 64,
                                        int points_per_batch = 0);

  /// Sets the temperature scaling (see ModelSpec::temperature; empty removes it). Throws
  /// ConfigError on a wrong count or a value outside [0.01, 100].
  void set_temperature(std::vector<float> temperature);
  /// Sets the multi-label decision thresholds (ModelSpec::threshold and label_thresholds; an
  /// empty per-label list means every label uses `threshold`). Throws ConfigError when they do
  /// not fit the spec (a softmax model, a wrong count, a value outside (0, 1)).
  void set_thresholds(float threshold, std::vector<float> label_thresholds);
  /// predict() applies the temperature (on, the default) or gives the raw outputs (off).
  void set_calibrated(bool on) noexcept { calibrated_ = on; }
  /// The model has an n-gram part (io::TrainedModel::ngram_part): predict() adds each batch's
  /// data::Batch::ngram_scores to the logits and, when this is on, refuses a batch without them.
  /// integrated_gradients() explains the network alone.
  void set_ngram_part_expected(bool on) noexcept { ngram_part_expected_ = on; }
  bool ngram_part_expected() const noexcept { return ngram_part_expected_; }
  bool calibrated() const noexcept { return calibrated_; }

 private:
  /// x_ = embeddings of ids_ (and, with a character encoder, the characters of the cells in
  /// char_cells_, batch cell index or -1 for padding, joined as [word, chars]).
  void embed(const data::Batch& batch);
  /// Gradient of x_ (d_x_) into the embedding and the character encoder.
  void embed_backward();
  // The targets of example i of the batch's source: a vector of examples or an arena.
  struct Targets {
    std::span<const data::EncodedExample> vector;
    const data::EncodedCorpus* arena = nullptr;
    std::span<const std::int32_t> operator()(std::size_t i) const {
      return arena != nullptr ? arena->targets(i) : std::span<const std::int32_t>(vector[i].targets);
    }
  };
  double train_batch(const data::Batch& batch, const Targets& targets, int bptt_window, double normalizer,
                     Rng& dropout_rng);
  double window_loss_and_grad(const std::vector<int>& active, const data::Batch& batch,
                              const data::Window& win, const Targets& targets, int Tw, double normalizer,
                              Rng& dropout_rng);

  ModelSpec spec_;
  nn::ParameterStore params_;
  std::unique_ptr<nn::Embedding> embedding_;
  std::unique_ptr<nn::RnnStack> rnn_;
  std::unique_ptr<nn::Linear> head_;
  std::unique_ptr<nn::Crf> crf_;
  std::unique_ptr<nn::CharCnn> chars_;
  nn::Dropout embedding_dropout_;
  nn::Dropout head_dropout_;
  nn::Pooling pooling_;
  LossOptions loss_options_;
  bool calibrated_ = true;
  bool ngram_part_expected_ = false;

  // Reused buffers.
  std::vector<std::int32_t> ids_;
  std::vector<int> lengths_;
  std::vector<int> active_;
  std::vector<data::Window> windows_;
  std::vector<int> targets_;
  nn::Matrix text_embedding_;
  std::vector<int> char_cells_;
  std::vector<std::int32_t> char_ids_, char_offsets_;
  // The step's buffers, grown to the largest batch shape seen (T*B rows vary from batch to
  // batch): after that, a training step allocates nothing here.
  nn::MatrixBuffer x_, h_, pooled_, logits_, d_logits_, d_pooled_, d_h_, d_x_, multi_hot_;
  nn::RnnState carry_, init_, final_;
};

}  // namespace gyre::model
