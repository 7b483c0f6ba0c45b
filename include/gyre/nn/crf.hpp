#pragma once
// Linear-chain conditional random field output layer (Lafferty, McCallum & Pereira 2001) over
// per-token emission scores.
//
// Score of a tag path y_0..y_{n-1} for one sequence of length n:
//   s(y) = start[y_0] + sum_t emit[t, y_t] + sum_{t>0} trans[y_{t-1}, y_t] + end[y_{n-1}]
// p(y | x) = exp(s(y)) / Z, log Z by the forward algorithm in log space (log-sum-exp with the
// max subtracted). The loss is -log p(gold | x); its gradient is (expected - observed) feature
// counts, with expectations from forward-backward marginals. Decoding is Viterbi.
//
// Parameters (DEVELOPERS.md "Tensor names"), zero-initialised (common practice, no source):
//   crf.transitions [T x T]  (i, j) = score of tag i followed by tag j
//   crf.start       [1 x T]  score of the first tag
//   crf.end         [1 x T]  score of the last tag
//
// Batches are time-major as in the rest of nn: emissions [Tmax*B x T], row t*B + b = sequence b
// at step t; lengths[b] >= 1 valid steps, rows past it are padding (ignored, zero gradient).
// Tag arrays (gold, decoded) are time-major [Tmax*B]; padding entries of gold are ignored,
// padding entries of decoded output are set to -1.
//
// The dynamic programmes run in double (T is small, so this costs little next to the RNN) and
// use workspace buffers that grow to the largest batch shape seen and are then reused: no
// allocation inside the time loop, none at all once the largest shape has been seen. A Crf
// object is therefore not safe to call from two threads at once.

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "gyre/nn/parameter.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

class Crf {
 public:
  /// Registers "<prefix>.transitions", "<prefix>.start", "<prefix>.end" in the store (zeros).
  /// Throws gyre::Error if num_tags < 1 or a name is taken.
  Crf(ParameterStore& store, std::size_t num_tags, const std::string& prefix = "crf");

  std::size_t num_tags() const noexcept { return num_tags_; }

  /// Sizes the workspace for batches up to [max_steps x max_batch] now (e.g. when the model is
  /// built) instead of on the first call with that shape.
  void reserve_workspace(std::size_t max_steps, std::size_t max_batch);

  /// Forbids transitions, first tags and last tags (1 = allowed, 0 = forbidden), e.g. from
  /// gyre::data::transition_rules(). Spans: transitions [T*T] row-major (i -> j), start [T],
  /// end [T]. Forbidden moves get score -inf in decoding; with in_training also in the loss (the
  /// partition then sums over valid paths only, and a gold path using a forbidden move throws
  /// gyre::Error). Throws gyre::Error on a size mismatch or if no path of length 1 is allowed.
  void set_constraints(std::span<const std::uint8_t> transitions, std::span<const std::uint8_t> start,
                       std::span<const std::uint8_t> end, bool in_training = false);
  void clear_constraints() noexcept;

  /// Score written by bake_constraints() for a forbidden move: exp(-1e4) is 0 in float and
  /// double, yet the value stays finite for optimizers and file formats.
  static constexpr float kForbiddenScore = -1.0e4f;
  /// Writes kForbiddenScore into the parameter values of every forbidden transition, first and
  /// last tag, so the tensors alone decode only valid paths (e.g. an exporter or an embedded
  /// runtime that decodes without a mask). Call after the parameters are initialised or loaded.
  /// With in_training constraints those entries get zero gradient and so keep the value.
  /// Throws gyre::Error if no constraints are set.
  void bake_constraints();
  bool constrained() const noexcept { return constrained_; }

  /// Negative log-likelihood of the gold paths summed over the batch (in double).
  /// If d_emissions is not null it is resized to [Tmax*B x T] and OVERWRITTEN with
  /// loss_scale * d(loss)/d(emissions) (zero on padding rows); the gradients of transitions,
  /// start and end, times loss_scale, are ADDED to the parameters' grad. Pass loss_scale = 1/B
  /// for a batch-mean loss. Throws gyre::Error on bad shapes, lengths, out-of-range gold tags, or
  /// a non-finite result.
  double loss(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
              std::span<const std::int32_t> gold, Matrix* d_emissions = nullptr, float loss_scale = 1.0f);
  /// Same with the gradient written into a view the caller has shaped like emissions (e.g. a
  /// MatrixBuffer's, so that batches of changing shape reuse its storage).
  double loss(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
              std::span<const std::int32_t> gold, Eigen::Ref<Matrix> d_emissions, float loss_scale);

  /// Best path per sequence. tags_out [Tmax*B] time-major (-1 on padding). best_scores (optional,
  /// [B]) receives each best path's score s(y*).
  void decode(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
              std::span<std::int32_t> tags_out, std::span<double> best_scores = {});

  /// log Z per sequence into out [B] (training-time constraints apply if set with in_training).
  void log_partition(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                     std::span<double> out);

  /// Per-token posterior marginals p(y_t = j | x), resized to [Tmax*B x T] (zero on padding rows).
  /// Useful as per-token confidences in prediction, so the decoding constraints apply if set.
  void marginals(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                 Matrix& out);

  /// s(y) of given paths (time-major [Tmax*B]) into out [B], without constraints.
  void path_score(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                  std::span<const std::int32_t> tags, std::span<double> out) const;

 private:
  struct Shape {
    std::size_t steps = 0;  // Tmax
    std::size_t batch = 0;  // B
  };
  double loss_impl(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                   std::span<const std::int32_t> gold, Eigen::Ref<Matrix>* d_emissions, float loss_scale);
  Shape check_batch(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths) const;
  void load_scores(bool use_constraints);  // copies parameters (+ -inf masks) into double buffers
  void reserve(Shape shape);
  void run_forward(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                   Shape shape);
  void run_backward(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                    Shape shape);
  void add_pair_marginals(const Eigen::Ref<const Matrix>& emissions, const double* alpha_t,
                          const double* beta_next, Eigen::Index next_row, double log_z, double* acc);

  std::size_t num_tags_;
  Parameter* transitions_;
  Parameter* start_;
  Parameter* end_;

  bool constrained_ = false;
  bool constrain_training_ = false;
  std::vector<std::uint8_t> allowed_transitions_, allowed_start_, allowed_end_;

  // Workspace (double): scores with masks applied, alpha/beta [Tmax*B x T], log Z [B],
  // backpointers [Tmax*B x T], scratch [3T]. Viterbi reuses alpha_ for its scores.
  std::vector<double> trans_, start_scores_, end_scores_;
  // exp(trans - column max) transposed, exp(trans - row max), exp(trans - overall max); [T x T].
  std::vector<double> exp_col_t_, exp_row_, exp_all_, col_max_, row_max_;
  double trans_max_ = 0.0;
  std::vector<double> alpha_, beta_, log_z_, scratch_;
  std::vector<double> grad_acc_;  // [T*T + 2T]: transition, start, end gradients of one batch
  std::vector<std::int32_t> backpointer_;
};

}  // namespace gyre::nn
