#include "gyre/model/sequence_model.hpp"

#include <cmath>
#include <limits>

#include "gyre/core/error.hpp"
#include "gyre/data/tag_scheme.hpp"
#include "gyre/nn/loss.hpp"
#include "gyre/runtime/calibration.hpp"

namespace gyre::model {

namespace {
void gather_rows(const nn::MatrixBuffer& from, const std::vector<int>& rows, nn::MatrixBuffer& to) {
  nn::MatrixMap out = to.shape(static_cast<Eigen::Index>(rows.size()), from.cols());
  for (std::size_t i = 0; i < rows.size(); ++i)
    out.row(static_cast<Eigen::Index>(i)) = from.view().row(rows[i]);
}
void scatter_rows(const nn::MatrixBuffer& from, const std::vector<int>& rows, nn::MatrixBuffer& to) {
  nn::MatrixMap out = to.view();
  for (std::size_t i = 0; i < rows.size(); ++i)
    out.row(rows[i]) = from.view().row(static_cast<Eigen::Index>(i));
}
}  // namespace

SequenceModel::SequenceModel(const ModelSpec& spec)
    : spec_(spec),
      embedding_dropout_(spec.embedding_dropout),
      head_dropout_(spec.dropout),
      pooling_(spec.pooling, spec.directions()) {
  validate(spec_);
  embedding_ = std::make_unique<nn::Embedding>(params_, spec_.vocab_size, spec_.embedding_size);
  if (spec_.has_char_encoder())
    chars_ = std::make_unique<nn::CharCnn>(params_, spec_.char_vocab_size, spec_.char_embedding_size,
                                           spec_.char_filters, spec_.char_width, "chars");
  nn::RnnStackConfig rc;
  rc.cell = spec_.cell;
  rc.input_size = spec_.input_size();
  rc.hidden_size = spec_.hidden_size;
  rc.layers = spec_.layers;
  rc.bidirectional = spec_.bidirectional;
  rc.dropout = spec_.dropout;
  rnn_ = std::make_unique<nn::RnnStack>(rc, params_, "rnn");
  head_ = std::make_unique<nn::Linear>(params_, spec_.features(), spec_.num_labels(), "readout");
  if (spec_.output == OutputKind::kCrf) {
    crf_ = std::make_unique<nn::Crf>(params_, static_cast<std::size_t>(spec_.num_labels()), "crf");
    // Only tag sequences valid in the scheme exist for the CRF: Viterbi never produces an
    // invalid one, and the partition function (loss, marginals) sums over valid paths only. The
    // trainer checks (or repairs) the gold sequences before training, so every gold path is valid.
    if (spec_.tag_scheme != data::TagScheme::kNone) {
      const auto rules = data::transition_rules(spec_.labels, spec_.tag_scheme);
      crf_->set_constraints(rules.allowed, rules.start, rules.end, true);
    }
  }
}

SequenceModel::~SequenceModel() = default;

void SequenceModel::init_parameters(Rng& rng) {
  embedding_->init_parameters(rng);
  rnn_->init_parameters(rng);
  head_->init_parameters(rng);
  if (chars_) chars_->init_parameters(rng);  // last: models without it draw exactly as before
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
  return train_batch(batch, Targets{examples, nullptr}, bptt_window, normalizer, dropout_rng);
}

double SequenceModel::train_batch(const data::Batch& batch, const data::EncodedCorpus& examples,
                                  int bptt_window, double normalizer, Rng& dropout_rng) {
  return train_batch(batch, Targets{{}, &examples}, bptt_window, normalizer, dropout_rng);
}

double SequenceModel::train_batch(const data::Batch& batch, const Targets& targets, int bptt_window,
                                  double normalizer, Rng& dropout_rng) {
  GYRE_CHECK(normalizer > 0, "train_batch: normalizer must be positive");
  const std::span<const data::Window> windows(windows_.data(),
                                              data::make_windows(batch, bptt_window, windows_));
  const int B = batch.batch;
  const int slots = spec_.layers * spec_.directions();
  const bool carry = windows.size() > 1;
  if (carry) {
    // [B x H] zeros per (layer, direction); the buffers keep their storage from batch to batch.
    carry_.h.resize(static_cast<std::size_t>(slots));
    carry_.c.resize(spec_.cell == nn::CellType::kLstm ? static_cast<std::size_t>(slots) : 0);
    for (nn::MatrixBuffer& s : carry_.h) s.shape(B, spec_.hidden_size).setZero();
    for (nn::MatrixBuffer& s : carry_.c) s.shape(B, spec_.hidden_size).setZero();
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
    char_cells_.assign(chars_ ? ids_.size() : 0, -1);
    lengths_.resize(static_cast<std::size_t>(Bw));
    for (int i = 0; i < Bw; ++i) {
      const auto b = static_cast<std::size_t>(active_[static_cast<std::size_t>(i)]);
      const int len = win.lengths[b];
      lengths_[static_cast<std::size_t>(i)] = len;
      for (int t = 0; t < len; ++t) {
        const auto cell = static_cast<std::size_t>(win.start[b] + t) * static_cast<std::size_t>(B) + b;
        ids_[static_cast<std::size_t>(t * Bw + i)] = batch.ids[cell];
        if (chars_) char_cells_[static_cast<std::size_t>(t * Bw + i)] = static_cast<int>(cell);
      }
    }
    embed(batch);
    nn::MatrixMap x = x_.view();
    embedding_dropout_.forward(x, true, &dropout_rng);
    const nn::RnnState* init = nullptr;
    if (carry && w > 0) {
      init_.h.resize(carry_.h.size());
      init_.c.resize(carry_.c.size());
      for (std::size_t s = 0; s < carry_.h.size(); ++s) gather_rows(carry_.h[s], active_, init_.h[s]);
      for (std::size_t s = 0; s < carry_.c.size(); ++s) gather_rows(carry_.c[s], active_, init_.c[s]);
      init = &init_;
    }
    rnn_->forward(x, Tw, lengths_, h_.shape(x.rows(), rnn_->output_size()), true, &dropout_rng, init,
                  carry ? &final_ : nullptr);
    if (carry) {
      for (std::size_t s = 0; s < carry_.h.size(); ++s) scatter_rows(final_.h[s], active_, carry_.h[s]);
      for (std::size_t s = 0; s < carry_.c.size() && s < final_.c.size(); ++s)
        scatter_rows(final_.c[s], active_, carry_.c[s]);
    }
    // A classifier's loss only sees the last window; earlier windows just carry the state.
    if (spec_.task == data::Task::kClassify && !win.last) continue;
    loss_sum += window_loss_and_grad(active_, batch, win, targets, Tw, normalizer, dropout_rng);
  }
  return loss_sum;
}

double SequenceModel::window_loss_and_grad(const std::vector<int>& active, const data::Batch& batch,
                                           const data::Window& win, const Targets& targets_of, int Tw,
                                           double normalizer, Rng& dropout_rng) {
  const int Bw = static_cast<int>(active.size());
  nn::CrossEntropyOptions ce;
  ce.class_weights = loss_options_.class_weights;
  ce.label_smoothing = loss_options_.label_smoothing;
  double loss_sum = 0.0;
  nn::MatrixMap h = h_.view();
  const Eigen::Index F = h.cols(), C = spec_.num_labels();
  if (spec_.task == data::Task::kClassify) {
    nn::MatrixMap pooled = pooled_.shape(Bw, F);
    pooling_.forward(h, Tw, lengths_, pooled);
    head_dropout_.forward(pooled, true, &dropout_rng);
    nn::MatrixMap logits = logits_.shape(Bw, C);
    head_->forward(pooled, logits);
    nn::MatrixMap d_logits = d_logits_.shape(Bw, C);
    if (spec_.output == OutputKind::kSigmoid) {
      nn::MatrixMap multi_hot = multi_hot_.shape(Bw, C);
      multi_hot.setZero();
      for (int i = 0; i < Bw; ++i) {
        for (const auto label :
             targets_of(batch.examples[static_cast<std::size_t>(active[static_cast<std::size_t>(i)])]))
          multi_hot(i, label) = 1.0f;
      }
      loss_sum = nn::sigmoid_binary_cross_entropy(logits, multi_hot, d_logits) * Bw;
    } else {
      targets_.resize(static_cast<std::size_t>(Bw));
      for (int i = 0; i < Bw; ++i) {
        const auto labels =
            targets_of(batch.examples[static_cast<std::size_t>(active[static_cast<std::size_t>(i)])]);
        GYRE_CHECK(!labels.empty(), "an encoded example has no label");
        targets_[static_cast<std::size_t>(i)] = labels[0];
      }
      loss_sum = nn::softmax_cross_entropy(logits, targets_, d_logits, ce) * Bw;
    }
    d_logits *= static_cast<float>(Bw / normalizer);
    nn::MatrixMap d_pooled = d_pooled_.shape(Bw, F);
    head_->backward(d_logits, d_pooled);
    head_dropout_.backward(d_pooled);
    pooling_.backward(d_pooled, d_h_.shape(h.rows(), F));
  } else {
    head_dropout_.forward(h, true, &dropout_rng);
    nn::MatrixMap logits = logits_.shape(h.rows(), C);
    head_->forward(h, logits);
    targets_.assign(static_cast<std::size_t>(Tw) * static_cast<std::size_t>(Bw), 0);
    std::size_t tokens = 0;
    for (int i = 0; i < Bw; ++i) {
      const auto b = static_cast<std::size_t>(active[static_cast<std::size_t>(i)]);
      const auto tags = targets_of(batch.examples[b]);
      GYRE_CHECK(
          static_cast<std::size_t>(win.start[b] + lengths_[static_cast<std::size_t>(i)]) <= tags.size(),
          "an encoded example has fewer tags than tokens");
      for (int t = 0; t < lengths_[static_cast<std::size_t>(i)]; ++t)
        targets_[static_cast<std::size_t>(t * Bw + i)] = tags[static_cast<std::size_t>(win.start[b] + t)];
      tokens += static_cast<std::size_t>(lengths_[static_cast<std::size_t>(i)]);
    }
    nn::MatrixMap d_logits = d_logits_.shape(h.rows(), C);
    if (crf_) {
      loss_sum = crf_->loss(logits, lengths_, targets_, d_logits, static_cast<float>(1.0 / normalizer));
    } else {
      loss_sum =
          nn::token_cross_entropy(logits, targets_, Tw, lengths_, d_logits, ce) * static_cast<double>(tokens);
      d_logits *= static_cast<float>(static_cast<double>(tokens) / normalizer);
    }
    nn::MatrixMap d_h = d_h_.shape(h.rows(), F);
    head_->backward(d_logits, d_h);
    head_dropout_.backward(d_h);
  }
  if (!std::isfinite(loss_sum)) throw DivergenceError("the loss is not finite");
  if (embedding_->trainable() || chars_) {
    nn::MatrixMap d_x = d_x_.shape(x_.rows(), x_.cols());
    rnn_->backward(d_h_.view(), d_x);
    embedding_dropout_.backward(d_x);
    embed_backward();
  } else {
    rnn_->backward(d_h_.view());
  }
  return loss_sum;
}

TokenAttribution SequenceModel::integrated_gradients(std::span<const std::int32_t> ids, int target, int steps,
                                                     int points_per_batch) {
  GYRE_CHECK(!chars_,
             "integrated gradients: this model has a character encoder; pass the encoded example with its "
             "characters");
  data::EncodedExample example;
  example.ids.assign(ids.begin(), ids.end());
  return integrated_gradients(example, target, steps, points_per_batch);
}

TokenAttribution SequenceModel::integrated_gradients(const data::EncodedExample& example, int target,
                                                     int steps, int points_per_batch) {
  const std::span<const std::int32_t> ids = example.ids;
  GYRE_CHECK(spec_.task == data::Task::kClassify, "integrated gradients: only for classifiers");
  GYRE_CHECK(!chars_ || example.char_offsets.size() == ids.size() + 1,
             "integrated gradients: a model with a character encoder needs the text's characters");
  GYRE_CHECK(!ids.empty(), "integrated gradients: the text has no tokens");
  GYRE_CHECK(target >= 0 && target < spec_.num_labels(), "integrated gradients: target label out of range");
  GYRE_CHECK(steps >= 1, "integrated gradients: at least one step");
  GYRE_CHECK(points_per_batch >= 0, "integrated gradients: points per batch must be >= 0 (0 = automatic)");
  for (const auto id : ids)
    GYRE_CHECK(id >= 0 && id < spec_.vocab_size, "integrated gradients: token id out of range");
  const int T = static_cast<int>(ids.size());
  const int points = steps + 1;  // alpha = 0, 1/steps, ..., 1
  // Points per forward/backward batch: the caches grow with T * batch rows, so a long text runs its
  // path in several batches (one point at least) instead of T * (steps + 1) rows at once.
  const int per_batch =
      std::min(points, points_per_batch > 0 ? points_per_batch : std::max(1, kIntegratedGradientsRows / T));
  const auto C = static_cast<std::size_t>(spec_.num_labels());
  const Eigen::Index E = spec_.input_size();
  if (chars_) {
    // [word, chars] of each token: the recurrent stack's input, the path's end point.
    text_embedding_.resize(T, E);
    embedding_->forward(ids, text_embedding_.leftCols(spec_.embedding_size));
    chars_->forward(nn::CharTokens{example.char_ids, example.char_offsets},
                    text_embedding_.rightCols(spec_.char_filters));
  } else {
    embedding_->forward(ids, text_embedding_);  // [T x E]
  }
  // F = p_target of the (tempered) output; dF/dz by hand:
  //   softmax: dp_k/dz_c = p_k (delta_kc - p_c) / T;  sigmoid: dp_k/dz_k = p_k (1 - p_k) / T_k.
  const bool tempered = calibrated_ && !spec_.temperature.empty();
  const auto k = static_cast<std::size_t>(target);
  std::vector<float> p(C);
  std::vector<double> f(static_cast<std::size_t>(points));
  // Per token: sum over the points of w_b * (dF/dx_t at point b) . x_t, added point by point in
  // order whatever the batches (trapezoid weights w_b: 1/2 at both ends).
  std::vector<double> integral_dot(static_cast<std::size_t>(T), 0.0);
  for (int first = 0; first < points; first += per_batch) {
    const int B = std::min(per_batch, points - first);
    const Eigen::Index TB = static_cast<Eigen::Index>(T) * B;
    nn::MatrixMap x = x_.shape(TB, E);
    for (int t = 0; t < T; ++t)
      for (int b = 0; b < B; ++b)
        x.row(t * B + b) =
            text_embedding_.row(t) * (static_cast<float>(first + b) / static_cast<float>(steps));
    lengths_.assign(static_cast<std::size_t>(B), T);
    nn::MatrixMap h = h_.shape(TB, rnn_->output_size());
    rnn_->forward(x, T, lengths_, h, false, nullptr);
    nn::MatrixMap pooled = pooled_.shape(B, h.cols());
    pooling_.forward(h, T, lengths_, pooled);
    nn::MatrixMap logits = logits_.shape(B, static_cast<Eigen::Index>(C));
    head_->forward(pooled, logits);
    nn::MatrixMap d_logits = d_logits_.shape(B, static_cast<Eigen::Index>(C));
    d_logits.setZero();
    for (int b = 0; b < B; ++b) {
      const float* z = &logits(b, 0);
      double& fb = f[static_cast<std::size_t>(first + b)];
      if (spec_.output == OutputKind::kSigmoid) {
        const float temp = tempered ? spec_.temperature[k] : 1.0f;
        const float pk = runtime::tempered_sigmoid(z[k], temp);
        fb = pk;
        d_logits(b, static_cast<Eigen::Index>(k)) = pk * (1.0f - pk) / temp;
      } else {
        const float temp = tempered ? spec_.temperature[0] : 1.0f;
        runtime::tempered_softmax(z, C, temp, p.data());
        fb = p[k];
        for (std::size_t c = 0; c < C; ++c)
          d_logits(b, static_cast<Eigen::Index>(c)) = p[k] * ((c == k ? 1.0f : 0.0f) - p[c]) / temp;
      }
    }
    nn::MatrixMap d_pooled = d_pooled_.shape(B, h.cols());
    head_->backward(d_logits, d_pooled);
    nn::MatrixMap d_h = d_h_.shape(TB, h.cols());
    pooling_.backward(d_pooled, d_h);
    nn::MatrixMap d_x = d_x_.shape(TB, E);
    rnn_->backward(d_h, d_x);
    for (int t = 0; t < T; ++t)
      for (int b = 0; b < B; ++b) {
        const int point = first + b;
        const double w = (point == 0 || point == steps) ? 0.5 : 1.0;
        integral_dot[static_cast<std::size_t>(t)] +=
            w * static_cast<double>(d_x.row(t * B + b).dot(text_embedding_.row(t)));
      }
  }
  params_.zero_grad();  // the layers added parameter gradients nobody asked for
  TokenAttribution out;
  out.steps = steps;
  out.output = f.back();
  out.baseline_output = f.front();
  out.scores.assign(static_cast<std::size_t>(T), 0.0f);
  for (int t = 0; t < T; ++t) {
    out.scores[static_cast<std::size_t>(t)] =
        static_cast<float>(integral_dot[static_cast<std::size_t>(t)] / steps);
    out.sum += out.scores[static_cast<std::size_t>(t)];
  }
  return out;
}

void SequenceModel::set_temperature(std::vector<float> temperature) {
  ModelSpec s = spec_;
  s.temperature = std::move(temperature);
  validate(s);
  spec_.temperature = std::move(s.temperature);
}

void SequenceModel::set_thresholds(float threshold, std::vector<float> label_thresholds) {
  ModelSpec s = spec_;
  s.threshold = threshold;
  s.label_thresholds = std::move(label_thresholds);
  validate(s);
  spec_.threshold = s.threshold;
  spec_.label_thresholds = std::move(s.label_thresholds);
}

void SequenceModel::embed(const data::Batch& batch) {
  if (!chars_) {
    embedding_->forward(ids_, x_.shape(static_cast<Eigen::Index>(ids_.size()), embedding_->dim()));
    return;
  }
  GYRE_CHECK(batch.char_offsets.size() == batch.ids.size() + 1,
             "a model with a character encoder needs batches with characters");
  char_ids_.clear();
  char_offsets_.assign(1, 0);
  for (const int cell : char_cells_) {
    if (cell >= 0) {
      const auto from = batch.char_offsets[static_cast<std::size_t>(cell)];
      const auto to = batch.char_offsets[static_cast<std::size_t>(cell) + 1];
      char_ids_.insert(char_ids_.end(), batch.char_ids.begin() + from, batch.char_ids.begin() + to);
    }
    char_offsets_.push_back(static_cast<std::int32_t>(char_ids_.size()));
  }
  // [word, chars] written in place: each part into its columns of the recurrent stack's input.
  const Eigen::Index E = spec_.embedding_size, F = spec_.char_filters;
  nn::MatrixMap x = x_.shape(static_cast<Eigen::Index>(ids_.size()), E + F);
  embedding_->forward(ids_, x.leftCols(E));
  chars_->forward(nn::CharTokens{char_ids_, char_offsets_}, x.rightCols(F));
}

void SequenceModel::embed_backward() {
  nn::MatrixMap d_x = d_x_.view();
  if (!chars_) {
    embedding_->backward(d_x);
    return;
  }
  const Eigen::Index E = spec_.embedding_size, F = spec_.char_filters;
  if (embedding_->trainable()) embedding_->backward(d_x.leftCols(E));
  chars_->backward(d_x.rightCols(F));
}

void SequenceModel::predict(const data::Batch& batch, Prediction& out) {
  const int B = batch.batch;
  const int T = batch.max_len;
  const bool tempered = calibrated_ && !spec_.temperature.empty();
  const auto C = static_cast<std::size_t>(spec_.num_labels());
  ids_.assign(batch.ids.begin(), batch.ids.end());
  char_cells_.clear();
  if (chars_)
    for (std::size_t cell = 0; cell < batch.ids.size(); ++cell) {
      const auto t = static_cast<int>(cell / static_cast<std::size_t>(B));
      const auto b = cell % static_cast<std::size_t>(B);
      char_cells_.push_back(t < batch.lengths[b] ? static_cast<int>(cell) : -1);
    }
  embed(batch);
  nn::MatrixMap h = h_.shape(x_.rows(), rnn_->output_size());
  rnn_->forward(x_.view(), T, batch.lengths, h, false, nullptr);
  if (spec_.task == data::Task::kClassify) {
    nn::MatrixMap pooled = pooled_.shape(B, h.cols());
    pooling_.forward(h, T, batch.lengths, pooled);
    nn::MatrixMap logits = logits_.shape(B, static_cast<Eigen::Index>(C));
    head_->forward(pooled, logits);
    if (!batch.ngram_scores.empty()) {
      // The n-gram part's share of each logit (data::EncodedExample::ngram_scores), added before
      // the softmax and the temperature as runtime::NgramPart::add_scores does.
      GYRE_CHECK(batch.ngram_scores.size() == static_cast<std::size_t>(B) * C,
                 "a batch's n-gram scores do not match its rows and the model's labels");
      for (Eigen::Index r = 0; r < logits.rows(); ++r)
        for (std::size_t c = 0; c < C; ++c)
          logits(r, static_cast<Eigen::Index>(c)) += batch.ngram_scores[static_cast<std::size_t>(r) * C + c];
    } else if (ngram_part_expected_) {
      throw Error(
          "this model has an n-gram part, which reads the words: its examples must be encoded with "
          "it (data::Encoder::set_ngram_part)");
    }
    out.scores = logits;
    out.features = pooled;
    out.probs.resize(logits.rows(), logits.cols());
    if (spec_.output == OutputKind::kSigmoid) {
      for (Eigen::Index r = 0; r < logits.rows(); ++r)
        for (std::size_t c = 0; c < C; ++c)
          out.probs(r, static_cast<Eigen::Index>(c)) = runtime::tempered_sigmoid(
              logits(r, static_cast<Eigen::Index>(c)), tempered ? spec_.temperature[c] : 1.0f);
    } else if (tempered) {
      for (Eigen::Index r = 0; r < logits.rows(); ++r)
        runtime::tempered_softmax(&logits(r, 0), C, spec_.temperature[0], &out.probs(r, 0));
    } else {
      nn::softmax_rows(logits, out.probs);
    }
    out.tags.clear();
    return;
  }
  nn::MatrixMap logits = logits_.shape(h.rows(), static_cast<Eigen::Index>(C));
  head_->forward(h, logits);
  out.tags.assign(static_cast<std::size_t>(T) * static_cast<std::size_t>(B), -1);
  if (crf_) {
    crf_->decode(logits, batch.lengths, out.tags);
    crf_->marginals(logits, batch.lengths, out.probs);
  } else {
    nn::softmax_rows(logits, out.probs);
    for (int b = 0; b < B; ++b) {
      for (int t = 0; t < batch.lengths[static_cast<std::size_t>(b)]; ++t) {
        Eigen::Index best = 0;
        out.probs.row(t * B + b).maxCoeff(&best);
        out.tags[static_cast<std::size_t>(t * B + b)] = static_cast<std::int32_t>(best);
      }
    }
  }
  // Scores of a tagger: log of its token distribution, floored at the smallest normal float so
  // that a zero marginal (a tag the scheme forbids here) stays finite.
  out.scores = out.probs.array().max(std::numeric_limits<float>::min()).log().matrix();
  if (tempered) {
    for (int b = 0; b < B; ++b)
      for (int t = 0; t < batch.lengths[static_cast<std::size_t>(b)]; ++t)
        if (crf_)
          runtime::temper_distribution(&out.probs(t * B + b, 0), C, spec_.temperature[0]);
        else
          runtime::tempered_softmax(&logits(t * B + b, 0), C, spec_.temperature[0], &out.probs(t * B + b, 0));
  }
}

}  // namespace gyre::model
