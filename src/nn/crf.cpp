#include "gyre/nn/crf.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <string>

#include "gyre/core/error.hpp"

namespace gyre::nn {
namespace {

constexpr double kNegInf = -std::numeric_limits<double>::infinity();
// A scaled sum below this may have lost terms to underflow: redo it with exact log-sum-exp.
constexpr double kScaledSumFloor = 1e-280;

// log(sum_k exp(v[k])) over n values, max subtracted first; -inf if every value is -inf.
inline double log_sum_exp(const double* v, std::size_t n) {
  double m = kNegInf;
  for (std::size_t k = 0; k < n; ++k) m = std::max(m, v[k]);
  if (m == kNegInf) return kNegInf;
  double s = 0.0;
  for (std::size_t k = 0; k < n; ++k) s += std::exp(v[k] - m);
  return m + std::log(s);
}

// Gold tags [steps x batch], time-major: one per step, each in [0, n) on the valid steps.
void check_gold(std::span<const std::int32_t> gold, std::span<const std::int32_t> lengths, std::size_t steps,
                std::size_t batch, std::size_t n) {
  GYRE_CHECK(gold.size() == steps * batch, "CRF: gold holds " + std::to_string(gold.size()) +
                                               " tags, expected " + std::to_string(steps * batch));
  for (std::size_t b = 0; b < batch; ++b)
    for (std::size_t t = 0; t < static_cast<std::size_t>(lengths[b]); ++t) {
      const std::int32_t g = gold[t * batch + b];
      GYRE_CHECK(g >= 0 && static_cast<std::size_t>(g) < n,
                 "CRF: gold tag " + std::to_string(g) + " of sequence " + std::to_string(b) + " at step " +
                     std::to_string(t) + " is outside [0, " + std::to_string(n) + ")");
    }
}

}  // namespace

Crf::Crf(ParameterStore& store, std::size_t num_tags, const std::string& prefix) : num_tags_(num_tags) {
  GYRE_CHECK(num_tags >= 1, "a CRF needs at least one tag");
  const auto t = static_cast<Eigen::Index>(num_tags);
  transitions_ = &store.add(prefix + ".transitions", t, t);
  start_ = &store.add(prefix + ".start", 1, t);
  end_ = &store.add(prefix + ".end", 1, t);
  trans_.resize(num_tags * num_tags);
  exp_col_t_.resize(num_tags * num_tags);
  exp_row_.resize(num_tags * num_tags);
  exp_all_.resize(num_tags * num_tags);
  col_max_.resize(num_tags);
  row_max_.resize(num_tags);
  start_scores_.resize(num_tags);
  end_scores_.resize(num_tags);
  scratch_.resize(3 * num_tags);
}

void Crf::set_constraints(std::span<const std::uint8_t> transitions, std::span<const std::uint8_t> start,
                          std::span<const std::uint8_t> end, bool in_training) {
  const std::size_t n = num_tags_;
  GYRE_CHECK(transitions.size() == n * n, "CRF constraints: transitions hold " +
                                              std::to_string(transitions.size()) + " flags, expected " +
                                              std::to_string(n * n));
  GYRE_CHECK(start.size() == n && end.size() == n,
             "CRF constraints: start/end hold " + std::to_string(start.size()) + "/" +
                 std::to_string(end.size()) + " flags, expected " + std::to_string(n));
  bool single_ok = false;
  for (std::size_t j = 0; j < n; ++j) single_ok = single_ok || (start[j] != 0 && end[j] != 0);
  GYRE_CHECK(single_ok, "CRF constraints allow no tag to both start and end a sequence");
  allowed_transitions_.assign(transitions.begin(), transitions.end());
  allowed_start_.assign(start.begin(), start.end());
  allowed_end_.assign(end.begin(), end.end());
  constrained_ = true;
  constrain_training_ = in_training;
}

void Crf::clear_constraints() noexcept {
  constrained_ = false;
  constrain_training_ = false;
}

void Crf::bake_constraints() {
  GYRE_CHECK(constrained_, "CRF: bake_constraints() without constraints");
  const std::size_t n = num_tags_;
  for (std::size_t i = 0; i < n; ++i) {
    const auto r = static_cast<Eigen::Index>(i);
    for (std::size_t j = 0; j < n; ++j)
      if (allowed_transitions_[i * n + j] == 0)
        transitions_->value(r, static_cast<Eigen::Index>(j)) = kForbiddenScore;
    if (allowed_start_[i] == 0) start_->value(0, r) = kForbiddenScore;
    if (allowed_end_[i] == 0) end_->value(0, r) = kForbiddenScore;
  }
}

Crf::Shape Crf::check_batch(const Eigen::Ref<const Matrix>& emissions,
                            std::span<const std::int32_t> lengths) const {
  GYRE_CHECK(!lengths.empty(), "CRF: empty batch");
  GYRE_CHECK(static_cast<std::size_t>(emissions.cols()) == num_tags_,
             "CRF: emissions have " + std::to_string(emissions.cols()) + " columns, expected " +
                 std::to_string(num_tags_) + " tags");
  const std::size_t batch = lengths.size();
  const auto rows = static_cast<std::size_t>(emissions.rows());
  GYRE_CHECK(rows % batch == 0 && rows > 0, "CRF: emissions have " + std::to_string(rows) +
                                                " rows, not a positive multiple of the batch size " +
                                                std::to_string(batch));
  const std::size_t steps = rows / batch;
  for (std::size_t b = 0; b < batch; ++b) {
    GYRE_CHECK(lengths[b] >= 1 && static_cast<std::size_t>(lengths[b]) <= steps,
               "CRF: length " + std::to_string(lengths[b]) + " of sequence " + std::to_string(b) +
                   " is outside [1, " + std::to_string(steps) + "]");
    // Padding rows may hold anything; valid rows must be finite or every score turns NaN.
    for (std::size_t t = 0; t < static_cast<std::size_t>(lengths[b]); ++t)
      if (!emissions.row(static_cast<Eigen::Index>(t * batch + b)).allFinite())
        throw DivergenceError("CRF: emission scores of sequence " + std::to_string(b) + " at step " +
                              std::to_string(t) + " are not finite");
  }
  return {steps, batch};
}

void Crf::load_scores(bool use_constraints) {
  const std::size_t n = num_tags_;
  const bool mask = use_constraints && constrained_;
  for (std::size_t i = 0; i < n; ++i) {
    for (std::size_t j = 0; j < n; ++j) {
      const bool ok = !mask || allowed_transitions_[i * n + j] != 0;
      trans_[i * n + j] = ok ? static_cast<double>(transitions_->value(static_cast<Eigen::Index>(i),
                                                                       static_cast<Eigen::Index>(j)))
                             : kNegInf;
    }
    const auto c = static_cast<Eigen::Index>(i);
    start_scores_[i] = (!mask || allowed_start_[i] != 0) ? static_cast<double>(start_->value(0, c)) : kNegInf;
    end_scores_[i] = (!mask || allowed_end_[i] != 0) ? static_cast<double>(end_->value(0, c)) : kNegInf;
  }
  // exp(trans) tables for the scaled recursions, each shifted by its column / row / overall max
  // so every entry is in [0, 1] (0 exactly for a forbidden move).
  trans_max_ = kNegInf;
  for (std::size_t i = 0; i < n; ++i) {
    row_max_[i] = kNegInf;
    col_max_[i] = kNegInf;
  }
  for (std::size_t i = 0; i < n; ++i)
    for (std::size_t j = 0; j < n; ++j) {
      const double v = trans_[i * n + j];
      row_max_[i] = std::max(row_max_[i], v);
      col_max_[j] = std::max(col_max_[j], v);
      trans_max_ = std::max(trans_max_, v);
    }
  for (std::size_t i = 0; i < n; ++i)
    for (std::size_t j = 0; j < n; ++j) {
      const double v = trans_[i * n + j];
      exp_col_t_[j * n + i] = col_max_[j] == kNegInf ? 0.0 : std::exp(v - col_max_[j]);
      exp_row_[i * n + j] = row_max_[i] == kNegInf ? 0.0 : std::exp(v - row_max_[i]);
      exp_all_[i * n + j] = trans_max_ == kNegInf ? 0.0 : std::exp(v - trans_max_);
    }
}

void Crf::reserve(Shape shape) {
  const std::size_t cells = shape.steps * shape.batch * num_tags_;
  // resize() keeps the capacity: after the largest batch shape nothing is allocated again.
  if (alpha_.size() < cells) {
    alpha_.resize(cells);
    beta_.resize(cells);
    backpointer_.resize(cells);
  }
  if (log_z_.size() < shape.batch) log_z_.resize(shape.batch);
  if (grad_acc_.size() < num_tags_ * num_tags_ + 2 * num_tags_)
    grad_acc_.resize(num_tags_ * num_tags_ + 2 * num_tags_);
}

void Crf::reserve_workspace(std::size_t max_steps, std::size_t max_batch) {
  GYRE_CHECK(max_steps > 0 && max_batch > 0, "CRF: workspace shape must be positive");
  reserve({max_steps, max_batch});
}

// alpha[t, b, j] = log sum over prefixes ending in j at t of exp(score); log_z_[b] at the end.
// Scaled form: with m = max_i alpha[t-1, i], alpha[t, j] = e[t, j] + m + colmax_j +
// log sum_i exp(alpha[t-1, i] - m) * exp(trans[i, j] - colmax_j): n exps per step instead of n^2.
// If the scaled sum is tiny (terms may have underflowed) the exact log-sum-exp is used.
void Crf::run_forward(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                      Shape shape) {
  const std::size_t n = num_tags_, batch = shape.batch;
  double* scaled = scratch_.data();
  double* exact = scratch_.data() + n;
  for (std::size_t b = 0; b < batch; ++b) {
    const auto len = static_cast<std::size_t>(lengths[b]);
    double* a0 = alpha_.data() + b * n;
    const auto r0 = static_cast<Eigen::Index>(b);
    for (std::size_t j = 0; j < n; ++j)
      a0[j] = start_scores_[j] + static_cast<double>(emissions(r0, static_cast<Eigen::Index>(j)));
    for (std::size_t t = 1; t < len; ++t) {
      const double* prev = alpha_.data() + ((t - 1) * batch + b) * n;
      double* cur = alpha_.data() + (t * batch + b) * n;
      const auto row = static_cast<Eigen::Index>(t * batch + b);
      double m = kNegInf;
      for (std::size_t i = 0; i < n; ++i) m = std::max(m, prev[i]);
      if (m == kNegInf) {  // no valid prefix (constraints): nothing continues
        for (std::size_t j = 0; j < n; ++j) cur[j] = kNegInf;
        continue;
      }
      for (std::size_t i = 0; i < n; ++i) scaled[i] = std::exp(prev[i] - m);
      for (std::size_t j = 0; j < n; ++j) {
        const double e = static_cast<double>(emissions(row, static_cast<Eigen::Index>(j)));
        if (col_max_[j] == kNegInf) {
          cur[j] = kNegInf;
          continue;
        }
        const double* col = exp_col_t_.data() + j * n;
        double sum = 0.0;
        for (std::size_t i = 0; i < n; ++i) sum += scaled[i] * col[i];
        if (sum > kScaledSumFloor) {
          cur[j] = e + m + col_max_[j] + std::log(sum);
        } else {
          for (std::size_t i = 0; i < n; ++i) exact[i] = prev[i] + trans_[i * n + j];
          cur[j] = e + log_sum_exp(exact, n);
        }
      }
    }
    const double* last = alpha_.data() + ((len - 1) * batch + b) * n;
    for (std::size_t j = 0; j < n; ++j) exact[j] = last[j] + end_scores_[j];
    log_z_[b] = log_sum_exp(exact, n);
  }
}

// beta[t, b, i] = log sum over suffixes after i at t (excluding emission t) of exp(score).
// Scaled like the forward pass: v_j = e[t+1, j] + beta[t+1, j], m = max_j v_j,
// beta[t, i] = m + rowmax_i + log sum_j exp(trans[i, j] - rowmax_i) * exp(v_j - m).
void Crf::run_backward(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                       Shape shape) {
  const std::size_t n = num_tags_, batch = shape.batch;
  double* v = scratch_.data();
  double* scaled = scratch_.data() + n;
  double* exact = scratch_.data() + 2 * n;
  for (std::size_t b = 0; b < batch; ++b) {
    const auto len = static_cast<std::size_t>(lengths[b]);
    double* bl = beta_.data() + ((len - 1) * batch + b) * n;
    for (std::size_t i = 0; i < n; ++i) bl[i] = end_scores_[i];
    for (std::size_t t = len - 1; t-- > 0;) {
      const double* next = beta_.data() + ((t + 1) * batch + b) * n;
      double* cur = beta_.data() + (t * batch + b) * n;
      const auto row = static_cast<Eigen::Index>((t + 1) * batch + b);
      double m = kNegInf;
      for (std::size_t j = 0; j < n; ++j) {
        v[j] = static_cast<double>(emissions(row, static_cast<Eigen::Index>(j))) + next[j];
        m = std::max(m, v[j]);
      }
      if (m == kNegInf) {
        for (std::size_t i = 0; i < n; ++i) cur[i] = kNegInf;
        continue;
      }
      for (std::size_t j = 0; j < n; ++j) scaled[j] = std::exp(v[j] - m);
      for (std::size_t i = 0; i < n; ++i) {
        if (row_max_[i] == kNegInf) {
          cur[i] = kNegInf;
          continue;
        }
        const double* r = exp_row_.data() + i * n;
        double sum = 0.0;
        for (std::size_t j = 0; j < n; ++j) sum += r[j] * scaled[j];
        if (sum > kScaledSumFloor) {
          cur[i] = m + row_max_[i] + std::log(sum);
        } else {
          for (std::size_t j = 0; j < n; ++j) exact[j] = trans_[i * n + j] + v[j];
          cur[i] = log_sum_exp(exact, n);
        }
      }
    }
  }
}

double Crf::loss(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                 std::span<const std::int32_t> gold, Matrix* d_emissions, float loss_scale) {
  if (d_emissions == nullptr) return loss_impl(emissions, lengths, gold, nullptr, loss_scale);
  if (d_emissions->rows() != emissions.rows() || d_emissions->cols() != emissions.cols())
    d_emissions->resize(emissions.rows(), emissions.cols());
  Eigen::Ref<Matrix> view(*d_emissions);
  return loss_impl(emissions, lengths, gold, &view, loss_scale);
}

double Crf::loss(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                 std::span<const std::int32_t> gold, Eigen::Ref<Matrix> d_emissions, float loss_scale) {
  GYRE_CHECK(d_emissions.rows() == emissions.rows() && d_emissions.cols() == emissions.cols(),
             "CRF: the gradient must be shaped like the emissions");
  return loss_impl(emissions, lengths, gold, &d_emissions, loss_scale);
}

double Crf::loss_impl(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                      std::span<const std::int32_t> gold, Eigen::Ref<Matrix>* d_emissions, float loss_scale) {
  const Shape shape = check_batch(emissions, lengths);
  const std::size_t n = num_tags_, batch = shape.batch;
  check_gold(gold, lengths, shape.steps, batch, n);
  reserve(shape);
  load_scores(constrain_training_);
  run_forward(emissions, lengths, shape);

  // Gold path scores with the same (possibly masked) scores.
  double total = 0.0;
  for (std::size_t b = 0; b < batch; ++b) {
    const auto len = static_cast<std::size_t>(lengths[b]);
    auto tag = [&](std::size_t t) { return static_cast<std::size_t>(gold[t * batch + b]); };
    double s = start_scores_[tag(0)];
    for (std::size_t t = 0; t < len; ++t) {
      s += static_cast<double>(
          emissions(static_cast<Eigen::Index>(t * batch + b), static_cast<Eigen::Index>(tag(t))));
      if (t > 0) s += trans_[tag(t - 1) * n + tag(t)];
    }
    s += end_scores_[tag(len - 1)];
    if (s == kNegInf)
      throw Error("CRF: the gold tags of sequence " + std::to_string(b) +
                  " use a transition, first or last tag that the constraints forbid");
    const double nll = log_z_[b] - s;
    if (!std::isfinite(nll))
      throw DivergenceError("CRF: loss of sequence " + std::to_string(b) + " is not finite");
    total += nll;
  }

  if (d_emissions == nullptr) return total;

  run_backward(emissions, lengths, shape);
  const double scale = static_cast<double>(loss_scale);
  double* g_trans = grad_acc_.data();
  double* g_start = g_trans + n * n;
  double* g_end = g_start + n;
  std::fill(grad_acc_.begin(), grad_acc_.begin() + static_cast<std::ptrdiff_t>(n * n + 2 * n), 0.0);
  for (std::size_t b = 0; b < batch; ++b) {
    const auto len = static_cast<std::size_t>(lengths[b]);
    const double lz = log_z_[b];
    for (std::size_t t = 0; t < shape.steps; ++t) {
      const auto row = static_cast<Eigen::Index>(t * batch + b);
      if (t >= len) {
        d_emissions->row(row).setZero();
        continue;
      }
      const double* a = alpha_.data() + (t * batch + b) * n;
      const double* be = beta_.data() + (t * batch + b) * n;
      const auto g = static_cast<std::size_t>(gold[t * batch + b]);
      for (std::size_t j = 0; j < n; ++j) {
        const double p = std::exp(a[j] + be[j] - lz);  // p(y_t = j | x)
        const double d = p - (j == g ? 1.0 : 0.0);
        (*d_emissions)(row, static_cast<Eigen::Index>(j)) = static_cast<float>(scale * d);
        if (t == 0) g_start[j] += d;
        if (t == len - 1) g_end[j] += d;
      }
      if (t + 1 < len) {
        add_pair_marginals(emissions, a, beta_.data() + ((t + 1) * batch + b) * n,
                           static_cast<Eigen::Index>((t + 1) * batch + b), lz, g_trans);
        g_trans[g * n + static_cast<std::size_t>(gold[(t + 1) * batch + b])] -= 1.0;  // observed count
      }
    }
  }
  for (std::size_t i = 0; i < n; ++i) {
    const auto r = static_cast<Eigen::Index>(i);
    for (std::size_t j = 0; j < n; ++j)
      transitions_->grad(r, static_cast<Eigen::Index>(j)) += static_cast<float>(scale * g_trans[i * n + j]);
    start_->grad(0, r) += static_cast<float>(scale * g_start[i]);
    end_->grad(0, r) += static_cast<float>(scale * g_end[i]);
  }
  return total;
}

// Adds p(y_t = i, y_{t+1} = j | x) to acc[i*n + j]. These sum to 1 over (i, j), so with
// A_i = exp(alpha_t(i) - max), Q_j = exp(e[t+1, j] + beta_{t+1}(j) - max) and
// E_ij = exp(trans[i, j] - max) they are A_i E_ij Q_j / sum(A E Q): 2n exps instead of n^2.
void Crf::add_pair_marginals(const Eigen::Ref<const Matrix>& emissions, const double* alpha_t,
                             const double* beta_next, Eigen::Index next_row, double log_z, double* acc) {
  const std::size_t n = num_tags_;
  double* q = scratch_.data();
  double* aa = scratch_.data() + n;
  double ma = kNegInf, mq = kNegInf;
  for (std::size_t j = 0; j < n; ++j) {
    q[j] = static_cast<double>(emissions(next_row, static_cast<Eigen::Index>(j))) + beta_next[j];
    mq = std::max(mq, q[j]);
    ma = std::max(ma, alpha_t[j]);
  }
  if (ma == kNegInf || mq == kNegInf || trans_max_ == kNegInf) return;  // no valid pair
  for (std::size_t j = 0; j < n; ++j) {
    aa[j] = std::exp(alpha_t[j] - ma);
    q[j] = std::exp(q[j] - mq);
  }
  double total = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double* e = exp_all_.data() + i * n;
    double row = 0.0;
    for (std::size_t j = 0; j < n; ++j) row += e[j] * q[j];
    total += aa[i] * row;
  }
  if (total > kScaledSumFloor) {
    const double inv = 1.0 / total;
    for (std::size_t i = 0; i < n; ++i) {
      const double ai = aa[i] * inv;
      const double* e = exp_all_.data() + i * n;
      for (std::size_t j = 0; j < n; ++j) acc[i * n + j] += ai * e[j] * q[j];
    }
    return;
  }
  // Underflow guard: exact exps from the log-domain quantities.
  for (std::size_t j = 0; j < n; ++j) {
    const double tail =
        static_cast<double>(emissions(next_row, static_cast<Eigen::Index>(j))) + beta_next[j] - log_z;
    for (std::size_t i = 0; i < n; ++i) acc[i * n + j] += std::exp(alpha_t[i] + trans_[i * n + j] + tail);
  }
}

void Crf::decode(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                 std::span<std::int32_t> tags_out, std::span<double> best_scores) {
  const Shape shape = check_batch(emissions, lengths);
  const std::size_t n = num_tags_, batch = shape.batch;
  GYRE_CHECK(tags_out.size() == shape.steps * batch,
             "CRF decode: output holds " + std::to_string(tags_out.size()) + " tags, expected " +
                 std::to_string(shape.steps * batch));
  GYRE_CHECK(best_scores.empty() || best_scores.size() == batch,
             "CRF decode: best_scores must hold one per sequence");
  reserve(shape);
  load_scores(true);
  // alpha_ holds Viterbi scores delta[t, b, j]; backpointer_ the argmax predecessor.
  for (std::size_t b = 0; b < batch; ++b) {
    const auto len = static_cast<std::size_t>(lengths[b]);
    double* d0 = alpha_.data() + b * n;
    for (std::size_t j = 0; j < n; ++j)
      d0[j] = start_scores_[j] +
              static_cast<double>(emissions(static_cast<Eigen::Index>(b), static_cast<Eigen::Index>(j)));
    for (std::size_t t = 1; t < len; ++t) {
      const double* prev = alpha_.data() + ((t - 1) * batch + b) * n;
      double* cur = alpha_.data() + (t * batch + b) * n;
      std::int32_t* bp = backpointer_.data() + (t * batch + b) * n;
      const auto row = static_cast<Eigen::Index>(t * batch + b);
      for (std::size_t j = 0; j < n; ++j) {
        std::size_t arg = 0;
        double best = prev[0] + trans_[j];
        for (std::size_t i = 1; i < n; ++i) {
          const double v = prev[i] + trans_[i * n + j];
          if (v > best) {  // strict: lowest index wins a tie
            best = v;
            arg = i;
          }
        }
        cur[j] = best + static_cast<double>(emissions(row, static_cast<Eigen::Index>(j)));
        bp[j] = static_cast<std::int32_t>(arg);
      }
    }
    const double* last = alpha_.data() + ((len - 1) * batch + b) * n;
    std::size_t arg = 0;
    double best = last[0] + end_scores_[0];
    for (std::size_t j = 1; j < n; ++j) {
      const double v = last[j] + end_scores_[j];
      if (v > best) {
        best = v;
        arg = j;
      }
    }
    if (best == kNegInf)
      throw Error("CRF decode: no tag path of length " + std::to_string(len) + " satisfies the constraints");
    if (!best_scores.empty()) best_scores[b] = best;
    for (std::size_t t = len; t < shape.steps; ++t) tags_out[t * batch + b] = -1;
    for (std::size_t t = len; t-- > 0;) {
      tags_out[t * batch + b] = static_cast<std::int32_t>(arg);
      if (t > 0) arg = static_cast<std::size_t>(backpointer_[(t * batch + b) * n + arg]);
    }
  }
}

void Crf::log_partition(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                        std::span<double> out) {
  const Shape shape = check_batch(emissions, lengths);
  GYRE_CHECK(out.size() == shape.batch, "CRF log_partition: output must hold one value per sequence");
  reserve(shape);
  load_scores(constrain_training_);
  run_forward(emissions, lengths, shape);
  std::copy(log_z_.begin(), log_z_.begin() + static_cast<std::ptrdiff_t>(shape.batch), out.begin());
}

void Crf::marginals(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                    Matrix& out) {
  const Shape shape = check_batch(emissions, lengths);
  const std::size_t n = num_tags_, batch = shape.batch;
  reserve(shape);
  load_scores(true);
  run_forward(emissions, lengths, shape);
  run_backward(emissions, lengths, shape);
  out.resize(static_cast<Eigen::Index>(shape.steps * batch), static_cast<Eigen::Index>(n));
  for (std::size_t t = 0; t < shape.steps; ++t)
    for (std::size_t b = 0; b < batch; ++b) {
      const auto row = static_cast<Eigen::Index>(t * batch + b);
      if (t >= static_cast<std::size_t>(lengths[b])) {
        out.row(row).setZero();
        continue;
      }
      if (log_z_[b] == kNegInf)
        throw Error("CRF marginals: no tag path of sequence " + std::to_string(b) +
                    " satisfies the constraints");
      const double* a = alpha_.data() + (t * batch + b) * n;
      const double* be = beta_.data() + (t * batch + b) * n;
      for (std::size_t j = 0; j < n; ++j)
        out(row, static_cast<Eigen::Index>(j)) = static_cast<float>(std::exp(a[j] + be[j] - log_z_[b]));
    }
}

void Crf::path_score(const Eigen::Ref<const Matrix>& emissions, std::span<const std::int32_t> lengths,
                     std::span<const std::int32_t> tags, std::span<double> out) const {
  const Shape shape = check_batch(emissions, lengths);
  const std::size_t n = num_tags_, batch = shape.batch;
  GYRE_CHECK(tags.size() == shape.steps * batch, "CRF path_score: tags must be [Tmax*B]");
  GYRE_CHECK(out.size() == batch, "CRF path_score: output must hold one value per sequence");
  for (std::size_t b = 0; b < batch; ++b) {
    const auto len = static_cast<std::size_t>(lengths[b]);
    double s = 0.0;
    std::int32_t prev = -1;
    for (std::size_t t = 0; t < len; ++t) {
      const std::int32_t y = tags[t * batch + b];
      GYRE_CHECK(y >= 0 && static_cast<std::size_t>(y) < n, "CRF path_score: tag out of range");
      s += static_cast<double>(emissions(static_cast<Eigen::Index>(t * batch + b), y));
      s += prev < 0 ? static_cast<double>(start_->value(0, y))
                    : static_cast<double>(transitions_->value(prev, y));
      prev = y;
    }
    s += static_cast<double>(end_->value(0, prev));
    out[b] = s;
  }
}

}  // namespace gyre::nn
