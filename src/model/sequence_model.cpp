#include "gyre/model/sequence_model.hpp"

#include <cmath>

#include "gyre/core/error.hpp"
#include "gyre/eval/tag_scheme.hpp"
#include "gyre/nn/loss.hpp"

namespace gyre::model {

namespace {
void gather_rows(const nn::Matrix& from, const std::vector<int>& rows, nn::Matrix& to) {
  to.resize(static_cast<Eigen::Index>(rows.size()), from.cols());
  for (std::size_t i = 0; i < rows.size(); ++i) to.row(static_cast<Eigen::Index>(i)) = from.row(rows[i]);
}
void scatter_rows(const nn::Matrix& from, const std::vector<int>& rows, nn::Matrix& to) {
  for (std::size_t i = 0; i < rows.size(); ++i) to.row(rows[i]) = from.row(static_cast<Eigen::Index>(i));
}
}  // namespace

SequenceModel::SequenceModel(const ModelSpec& spec)
    : spec_(spec),
      embedding_dropout_(spec.embedding_dropout),
      head_dropout_(spec.dropout),
      pooling_(spec.pooling, spec.directions()) {
  validate(spec_);
  embedding_ = std::make_unique<nn::Embedding>(params_, spec_.vocab_size, spec_.embedding_size);
  nn::RnnStackConfig rc;
  rc.cell = spec_.cell;
  rc.input_size = spec_.embedding_size;
  rc.hidden_size = spec_.hidden_size;
  rc.layers = spec_.layers;
  rc.bidirectional = spec_.bidirectional;
  rc.dropout = spec_.dropout;
  rnn_ = std::make_unique<nn::RnnStack>(rc, params_, "rnn");
  head_ = std::make_unique<nn::Linear>(params_, spec_.features(), spec_.num_labels(), "head");
  if (spec_.output == OutputKind::kCrf) {
    crf_ = std::make_unique<nn::Crf>(params_, static_cast<std::size_t>(spec_.num_labels()), "crf");
    // Only tag sequences valid in the scheme exist for the CRF: Viterbi never produces an
    // invalid one, and the partition function (loss, marginals) sums over valid paths only. The
    // trainer checks (or repairs) the gold sequences before training, so every gold path is valid.
    if (!spec_.tag_scheme.empty()) {
      const auto rules = eval::transition_rules(spec_.labels, eval::parse_tag_scheme(spec_.tag_scheme));
      crf_->set_constraints(rules.allowed, rules.start, rules.end, true);
    }
  }
}

SequenceModel::~SequenceModel() = default;

void SequenceModel::init_parameters(Rng& rng) {
  embedding_->init_parameters(rng);
  rnn_->init_parameters(rng);
  head_->init_parameters(rng);
  // The CRF's transition scores start at zero (constructor).
}

void SequenceModel::set_loss_options(LossOptions options) {
  GYRE_CHECK(
      options.class_weights.empty() || static_cast<int>(options.class_weights.size()) == spec_.num_labels(),
      "class weights must have one entry per label");
  loss_options_ = std::move(options);
}

void SequenceModel::copy_values_from(const SequenceModel& other) {
  GYRE_CHECK(other.params_.size() == params_.size(), "copy_values_from: replicas of different models");
  for (std::size_t i = 0; i < params_.size(); ++i) params_[i].value = other.params_[i].value;
}

double SequenceModel::loss_units(const data::Batch& batch) const {
  if (spec_.task == data::Task::kClassify) return batch.batch;
  if (spec_.output == OutputKind::kCrf) return batch.batch;
  return static_cast<double>(batch.tokens());
}

double SequenceModel::train_batch(const data::Batch& batch, std::span<const data::EncodedExample> examples,
                                  int bptt_window, double normalizer, Rng& dropout_rng) {
  GYRE_CHECK(normalizer > 0, "train_batch: normalizer must be positive");
  const auto windows = data::make_windows(batch, bptt_window);
  const int B = batch.batch;
  const int slots = spec_.layers * spec_.directions();
  const bool carry = windows.size() > 1;
  if (carry) {
    carry_.h.assign(static_cast<std::size_t>(slots), nn::Matrix::Zero(B, spec_.hidden_size));
    carry_.c.assign(spec_.cell == nn::CellType::kLstm ? static_cast<std::size_t>(slots) : 0,
                    nn::Matrix::Zero(B, spec_.hidden_size));
  }
  double loss_sum = 0.0;
  for (std::size_t w = 0; w < windows.size(); ++w) {
    const data::Window& win = windows[w];
    active_.clear();
    for (int b = 0; b < B; ++b)
      if (win.lengths[static_cast<std::size_t>(b)] > 0) active_.push_back(b);
    const int Bw = static_cast<int>(active_.size());
    const int Tw = win.max_len;
    ids_.assign(static_cast<std::size_t>(Tw) * static_cast<std::size_t>(Bw), 0);
    lengths_.resize(static_cast<std::size_t>(Bw));
    for (int i = 0; i < Bw; ++i) {
      const auto b = static_cast<std::size_t>(active_[static_cast<std::size_t>(i)]);
      const int len = win.lengths[b];
      lengths_[static_cast<std::size_t>(i)] = len;
      for (int t = 0; t < len; ++t)
        ids_[static_cast<std::size_t>(t * Bw + i)] =
            batch.ids[static_cast<std::size_t>(win.start[b] + t) * static_cast<std::size_t>(B) + b];
    }
    embedding_->forward(ids_, x_);
    embedding_dropout_.forward(x_, true, &dropout_rng);
    const nn::RnnState* init = nullptr;
    if (carry && w > 0) {
      init_.h.resize(carry_.h.size());
      init_.c.resize(carry_.c.size());
      for (std::size_t s = 0; s < carry_.h.size(); ++s) gather_rows(carry_.h[s], active_, init_.h[s]);
      for (std::size_t s = 0; s < carry_.c.size(); ++s) gather_rows(carry_.c[s], active_, init_.c[s]);
      init = &init_;
    }
    rnn_->forward(x_, Tw, lengths_, h_, true, &dropout_rng, init, carry ? &final_ : nullptr);
    if (carry) {
      for (std::size_t s = 0; s < carry_.h.size(); ++s) scatter_rows(final_.h[s], active_, carry_.h[s]);
      for (std::size_t s = 0; s < carry_.c.size() && s < final_.c.size(); ++s)
        scatter_rows(final_.c[s], active_, carry_.c[s]);
    }
    // A classifier's loss only sees the last window; earlier windows just carry the state.
    if (spec_.task == data::Task::kClassify && !win.last) continue;
    loss_sum += window_loss_and_grad(active_, batch, win, examples, Tw, normalizer, dropout_rng);
  }
  return loss_sum;
}

double SequenceModel::window_loss_and_grad(const std::vector<int>& active, const data::Batch& batch,
                                           const data::Window& win,
                                           std::span<const data::EncodedExample> examples, int Tw,
                                           double normalizer, Rng& dropout_rng) {
  const int Bw = static_cast<int>(active.size());
  nn::CrossEntropyOptions ce;
  ce.class_weights = loss_options_.class_weights;
  ce.label_smoothing = loss_options_.label_smoothing;
  double loss_sum = 0.0;
  if (spec_.task == data::Task::kClassify) {
    pooling_.forward(h_, Tw, lengths_, pooled_);
    head_dropout_.forward(pooled_, true, &dropout_rng);
    head_->forward(pooled_, logits_);
    if (spec_.output == OutputKind::kSigmoid) {
      multi_hot_.setZero(Bw, spec_.num_labels());
      for (int i = 0; i < Bw; ++i) {
        const auto& ex =
            examples[batch.examples[static_cast<std::size_t>(active[static_cast<std::size_t>(i)])]];
        for (const auto label : ex.targets) multi_hot_(i, label) = 1.0f;
      }
      loss_sum = nn::sigmoid_binary_cross_entropy(logits_, multi_hot_, d_logits_) * Bw;
    } else {
      targets_.resize(static_cast<std::size_t>(Bw));
      for (int i = 0; i < Bw; ++i) {
        const auto& ex =
            examples[batch.examples[static_cast<std::size_t>(active[static_cast<std::size_t>(i)])]];
        targets_[static_cast<std::size_t>(i)] = ex.targets.at(0);
      }
      loss_sum = nn::softmax_cross_entropy(logits_, targets_, d_logits_, ce) * Bw;
    }
    d_logits_ *= static_cast<float>(Bw / normalizer);
    head_->backward(d_logits_, &d_pooled_);
    head_dropout_.backward(d_pooled_);
    pooling_.backward(d_pooled_, d_h_);
  } else {
    head_dropout_.forward(h_, true, &dropout_rng);
    head_->forward(h_, logits_);
    targets_.assign(static_cast<std::size_t>(Tw) * static_cast<std::size_t>(Bw), 0);
    std::size_t tokens = 0;
    for (int i = 0; i < Bw; ++i) {
      const auto b = static_cast<std::size_t>(active[static_cast<std::size_t>(i)]);
      const auto& ex = examples[batch.examples[b]];
      for (int t = 0; t < lengths_[static_cast<std::size_t>(i)]; ++t)
        targets_[static_cast<std::size_t>(t * Bw + i)] =
            ex.targets.at(static_cast<std::size_t>(win.start[b] + t));
      tokens += static_cast<std::size_t>(lengths_[static_cast<std::size_t>(i)]);
    }
    if (crf_) {
      loss_sum = crf_->loss(logits_, lengths_, targets_, &d_logits_, static_cast<float>(1.0 / normalizer));
    } else {
      loss_sum = nn::token_cross_entropy(logits_, targets_, Tw, lengths_, d_logits_, ce) *
                 static_cast<double>(tokens);
      d_logits_ *= static_cast<float>(static_cast<double>(tokens) / normalizer);
    }
    head_->backward(d_logits_, &d_h_);
    head_dropout_.backward(d_h_);
  }
  if (!std::isfinite(loss_sum)) throw DivergenceError("the loss is not finite");
  if (embedding_->trainable()) {
    rnn_->backward(d_h_, d_x_);
    embedding_dropout_.backward(d_x_);
    embedding_->backward(d_x_);
  } else {
    rnn_->backward(d_h_);
  }
  return loss_sum;
}

void SequenceModel::predict(const data::Batch& batch, Prediction& out) {
  const int B = batch.batch;
  const int T = batch.max_len;
  embedding_->forward(batch.ids, x_);
  rnn_->forward(x_, T, batch.lengths, h_, false, nullptr);
  if (spec_.task == data::Task::kClassify) {
    pooling_.forward(h_, T, batch.lengths, pooled_);
    head_->forward(pooled_, logits_);
    if (spec_.output == OutputKind::kSigmoid) {
      out.probs = (1.0f + (-logits_.array()).exp()).inverse().matrix();
    } else {
      nn::softmax_rows(logits_, out.probs);
    }
    out.tags.clear();
    return;
  }
  head_->forward(h_, logits_);
  out.tags.assign(static_cast<std::size_t>(T) * static_cast<std::size_t>(B), -1);
  if (crf_) {
    crf_->decode(logits_, batch.lengths, out.tags);
    crf_->marginals(logits_, batch.lengths, out.probs);
    return;
  }
  nn::softmax_rows(logits_, out.probs);
  for (int b = 0; b < B; ++b) {
    for (int t = 0; t < batch.lengths[static_cast<std::size_t>(b)]; ++t) {
      Eigen::Index best = 0;
      out.probs.row(t * B + b).maxCoeff(&best);
      out.tags[static_cast<std::size_t>(t * B + b)] = static_cast<std::int32_t>(best);
    }
  }
}

}  // namespace gyre::model
