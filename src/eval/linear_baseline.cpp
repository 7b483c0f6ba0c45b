#include "gyre/eval/linear_baseline.hpp"

#include <algorithm>
#include <barrier>
#include <cmath>
#include <functional>
#include <limits>
#include <map>
#include <thread>
#include <type_traits>

#include "gyre/core/error.hpp"

namespace gyre::eval {

void SparseRows::add_row(std::span<const std::int32_t> cols, std::span<const double> vals) {
  GYRE_CHECK(cols.size() == vals.size(), "sparse row: columns and values differ in length");
  columns.insert(columns.end(), cols.begin(), cols.end());
  values.insert(values.end(), vals.begin(), vals.end());
  row_start.push_back(columns.size());
}

void CountRows::add_row(std::span<const std::pair<std::int32_t, std::int32_t>> column_counts) {
  double norm = 0;
  for (const auto& [col, count] : column_counts) {
    GYRE_CHECK(count >= 1, "count row: counts must be positive");
    const double v = 1.0 + std::log(static_cast<double>(count));  // sublinear tf, as sublinear_unit_row
    columns.push_back(col);
    if (count >= kLargeCount) {
      large_counts.emplace_back(counts.size(), static_cast<std::uint32_t>(count));
      counts.push_back(kLargeCount);
    } else {
      counts.push_back(static_cast<std::uint16_t>(count));
    }
    norm += v * v;
  }
  norms.push_back(norm > 0 ? std::sqrt(norm) : 0.0);
  row_start.push_back(columns.size());
}

std::uint32_t CountRows::count(std::size_t entry) const {
  if (counts[entry] != kLargeCount) return counts[entry];
  const auto it = std::lower_bound(large_counts.begin(), large_counts.end(),
                                   std::pair<std::size_t, std::uint32_t>{entry, 0});
  GYRE_CHECK(it != large_counts.end() && it->first == entry, "count row: a large count is missing");
  return it->second;
}

std::size_t CountRows::bytes() const noexcept {
  return row_start.capacity() * sizeof(std::size_t) + columns.capacity() * sizeof(std::int32_t) +
         counts.capacity() * sizeof(std::uint16_t) + norms.capacity() * sizeof(double) +
         large_counts.capacity() * sizeof(large_counts[0]);
}

void LinearModel::scores(std::span<const std::int32_t> cols, std::span<const double> vals,
                         std::span<double> out) const {
  const auto k = static_cast<std::size_t>(classes);
  std::copy(bias.begin(), bias.end(), out.begin());
  for (std::size_t e = 0; e < cols.size(); ++e) {
    if (cols[e] < 0 || cols[e] >= features) continue;
    const double* w = weights.data() + static_cast<std::size_t>(cols[e]) * k;
    for (std::size_t c = 0; c < k; ++c) out[c] += vals[e] * w[c];
  }
}

int LinearModel::predict(std::span<const std::int32_t> cols, std::span<const double> vals) const {
  std::vector<double> s(static_cast<std::size_t>(classes));
  scores(cols, vals, s);
  // First maximum wins (sklearn's argmax does the same).
  return static_cast<int>(std::max_element(s.begin(), s.end()) - s.begin());
}

namespace {

double dot(const std::vector<double>& a, const std::vector<double>& b) {
  double s = 0;
  for (std::size_t i = 0; i < a.size(); ++i) s += a[i] * b[i];
  return s;
}

// The same sum with a float vector (the L-BFGS history): each float widened, summed in order.
double dot(const std::vector<float>& a, const std::vector<double>& b) {
  double s = 0;
  for (std::size_t i = 0; i < a.size(); ++i) s += static_cast<double>(a[i]) * b[i];
  return s;
}

// Penalised multinomial log loss and its gradient at theta = [W (features x classes), b].
//
// The rows are visited in chunks (4096 rows; 16384 on several threads, so the threads meet at a
// barrier less often: a descheduled thread stalls the others at each one). Per chunk, phase 1 computes each
// row's values (CountRows: (1 + ln count) / norm), scores, softmax and loss term, and keeps the residual p -
// onehot per row; phase 2 adds value x residual into the gradient rows of the columns. With `threads` > 1,
// phase 1 splits the chunk's rows and phase 2 the feature columns (ranges holding about equal numbers of
// entries) across the threads; every gradient element still receives its terms in row order, and the loss and
// bias terms are summed in row order, so the value and gradient are the same bit for bit whatever the number
// of threads (the serial single-pass order: rows ascending, a row's entries in stored order).
template <class Rows>
struct Objective {
  const Rows& x;
  std::span<const std::int32_t> y;
  std::size_t features, classes;
  double inv_c;
  int threads;
  std::size_t chunk_rows;
  std::vector<double> residual;      // chunk_rows x classes: p - onehot of the chunk's rows
  std::vector<double> row_loss;      // chunk_rows: log(sum exp z) - z[label] of each row (shifted)
  std::vector<double> values;        // CountRows: the chunk's entry values
  std::vector<double> tf;            // 1 + ln(c) by count (CountRows)
  std::vector<std::int32_t> bounds;  // threads + 1 column bounds of phase 2
  long evaluations = 0;

  Objective(const Rows& rows, std::span<const std::int32_t> labels, std::size_t f, std::size_t k, double inv,
            int thread_count)
      : x(rows), y(labels), features(f), classes(k), inv_c(inv), threads(std::max(1, thread_count)) {
    chunk_rows = threads > 1 ? 16384 : 4096;
    residual.resize(chunk_rows * k);
    row_loss.resize(chunk_rows);
    if constexpr (std::is_same_v<Rows, CountRows>) {
      tf.resize(256);
      for (std::size_t c = 1; c < tf.size(); ++c) tf[c] = 1.0 + std::log(static_cast<double>(c));
      std::size_t most = 0;
      for (std::size_t r0 = 0; r0 < x.rows(); r0 += chunk_rows) {
        const std::size_t r1 = std::min(x.rows(), r0 + chunk_rows);
        most = std::max(most, x.row_start[r1] - x.row_start[r0]);
      }
      values.resize(most);
    }
    // Column ranges with about equal numbers of entries (the work of phase 2).
    bounds.assign(1, 0);
    if (threads > 1) {
      std::vector<std::size_t> per_column(f + 1, 0);
      for (const auto c : x.columns) ++per_column[static_cast<std::size_t>(c)];
      const std::size_t total = x.columns.size();
      std::size_t seen = 0;
      for (std::size_t c = 0; c < f && bounds.size() < static_cast<std::size_t>(threads); ++c) {
        seen += per_column[c];
        if (seen * static_cast<std::size_t>(threads) >= total * bounds.size())
          bounds.push_back(static_cast<std::int32_t>(c + 1));
      }
    }
    while (bounds.size() < static_cast<std::size_t>(threads) + 1)
      bounds.push_back(static_cast<std::int32_t>(f));
    bounds.back() = static_cast<std::int32_t>(f);
  }

  // The values of row r's entries (r in the chunk starting at entry `chunk_entry`).
  const double* row_values(std::size_t r, std::size_t chunk_entry) const {
    if constexpr (std::is_same_v<Rows, CountRows>)
      return values.data() + (x.row_start[r] - chunk_entry);
    else
      return x.values.data() + x.row_start[r];
  }

  // Phase 1 for rows [r_lo, r_hi) of the chunk starting at row r0.
  void score_rows(std::size_t r0, std::size_t r_lo, std::size_t r_hi, const double* w, const double* b) {
    const std::size_t k = classes;
    const std::size_t chunk_entry = x.row_start[r0];
    for (std::size_t r = r_lo; r < r_hi; ++r) {
      const std::size_t begin = x.row_start[r], end = x.row_start[r + 1];
      if constexpr (std::is_same_v<Rows, CountRows>) {
        const double norm = x.norms[r];
        double* v = values.data() + (begin - chunk_entry);
        for (std::size_t e = begin; e < end; ++e) {
          const std::uint16_t c = x.counts[e];
          const double t = c < tf.size() ? tf[c] : 1.0 + std::log(static_cast<double>(x.count(e)));
          v[e - begin] = t / norm;
        }
      }
      const double* v = row_values(r, chunk_entry);
      double* z = residual.data() + (r - r0) * k;
      for (std::size_t c = 0; c < k; ++c) z[c] = b[c];
      for (std::size_t e = begin; e < end; ++e) {
        const double* wr = w + static_cast<std::size_t>(x.columns[e]) * k;
        const double ve = v[e - begin];
        for (std::size_t c = 0; c < k; ++c) z[c] += ve * wr[c];
      }
      const double m = *std::max_element(z, z + k);
      double sum = 0;
      for (std::size_t c = 0; c < k; ++c) {
        z[c] = std::exp(z[c] - m);
        sum += z[c];
      }
      const auto label = static_cast<std::size_t>(y[r]);
      row_loss[r - r0] = std::log(sum) - std::log(z[label]);
      for (std::size_t c = 0; c < k; ++c) z[c] = z[c] / sum - (c == label ? 1.0 : 0.0);
    }
  }

  // Phase 2: the chunk [r0, r1)'s terms of the gradient rows of columns [lo, hi).
  void add_gradient(std::size_t r0, std::size_t r1, std::int32_t lo, std::int32_t hi, double* gw) const {
    const std::size_t k = classes;
    const std::size_t chunk_entry = x.row_start[r0];
    for (std::size_t r = r0; r < r1; ++r) {
      const std::size_t begin = x.row_start[r], end = x.row_start[r + 1];
      const double* v = row_values(r, chunk_entry);
      const double* z = residual.data() + (r - r0) * k;
      for (std::size_t e = begin; e < end; ++e) {
        const std::int32_t col = x.columns[e];
        if (col < lo || col >= hi) continue;
        double* gr = gw + static_cast<std::size_t>(col) * k;
        const double ve = v[e - begin];
        for (std::size_t c = 0; c < k; ++c) gr[c] += ve * z[c];
      }
    }
  }

  // The loss and bias terms of the chunk [r0, r1), in row order.
  void add_loss_and_bias(std::size_t r0, std::size_t r1, double& loss, double* gb) const {
    const std::size_t k = classes;
    for (std::size_t r = r0; r < r1; ++r) {
      loss += row_loss[r - r0];
      const double* z = residual.data() + (r - r0) * k;
      for (std::size_t c = 0; c < k; ++c) gb[c] += z[c];
    }
  }

  double operator()(const std::vector<double>& theta, std::vector<double>& grad) {
    ++evaluations;
    std::fill(grad.begin(), grad.end(), 0.0);
    const std::size_t k = classes;
    const double* w = theta.data();
    const double* b = theta.data() + features * k;
    double* gw = grad.data();
    double* gb = grad.data() + features * k;
    const std::size_t rows = x.rows();
    double loss = 0;
    const auto work = [&](int t, std::barrier<>* sync) {
      const auto tt = static_cast<std::size_t>(t), nt = static_cast<std::size_t>(threads);
      for (std::size_t r0 = 0; r0 < rows; r0 += chunk_rows) {
        const std::size_t r1 = std::min(rows, r0 + chunk_rows);
        const std::size_t n = r1 - r0;
        score_rows(r0, r0 + n * tt / nt, r0 + n * (tt + 1) / nt, w, b);
        if (sync != nullptr) sync->arrive_and_wait();
        if (t == 0) add_loss_and_bias(r0, r1, loss, gb);
        add_gradient(r0, r1, bounds[tt], bounds[tt + 1], gw);
        if (sync != nullptr) sync->arrive_and_wait();  // the chunk's buffers are reused next
      }
    };
    if (threads == 1) {
      work(0, nullptr);
    } else {
      std::barrier<> sync(threads);
      std::vector<std::jthread> helpers;
      helpers.reserve(static_cast<std::size_t>(threads - 1));
      for (int t = 1; t < threads; ++t) helpers.emplace_back(work, t, &sync);
      work(0, &sync);
    }
    double penalty = 0;
    for (std::size_t i = 0; i < features * k; ++i) {
      penalty += w[i] * w[i];
      gw[i] += inv_c * w[i];
    }
    return loss + 0.5 * inv_c * penalty;
  }
};

double max_abs(const std::vector<double>& v) {
  double m = 0;
  for (const double a : v) m = std::max(m, std::abs(a));
  return m;
}

// The last `capacity` curvature pairs (s, y) of L-BFGS in a ring buffer, and the two-loop recursion
// over them. The pairs are kept in float32: they only shape the search direction (the point,
// gradient and direction stay float64, and the line search and stopping tests use them), and
// float halves the history, the largest part of a fit's memory (2 x history vectors).
struct LbfgsHistory {
  explicit LbfgsHistory(std::size_t pairs) : capacity(pairs), alpha(pairs) {}

  std::size_t size() const { return rho.size(); }

  // direction = -H grad (Nocedal & Wright 2006, algorithm 7.4).
  void direction(const std::vector<double>& grad, std::vector<double>& d) {
    const std::size_t n = grad.size();
    d = grad;
    const std::size_t count = size();
    for (std::size_t j = 0; j < count; ++j) {
      const std::size_t i = (oldest + count - 1 - j) % count;
      alpha[i] = rho[i] * dot(s[i], d);
      const float* yi = y[i].data();
      for (std::size_t p = 0; p < n; ++p) d[p] -= alpha[i] * static_cast<double>(yi[p]);
    }
    double gamma = 1.0;
    if (count > 0) gamma = sy_last / yy_last;  // the newest pair's s.y / y.y
    for (auto& v : d) v *= gamma;
    for (std::size_t j = 0; j < count; ++j) {
      const std::size_t i = (oldest + j) % count;
      const double beta = rho[i] * dot(y[i], d);
      const float* si = s[i].data();
      for (std::size_t p = 0; p < n; ++p) d[p] += static_cast<double>(si[p]) * (alpha[i] - beta);
    }
    for (auto& v : d) v = -v;
  }

  void clear() {
    rho.clear();
    oldest = 0;
  }

  // Adds the pair s = next - theta, y = next_grad - grad (rounded to float) when it satisfies the
  // curvature condition s.y > 1e-12 y.y (on the rounded values), else skips it. The pair is
  // written straight into its ring slot: no vector is allocated once the history is full.
  void add(const std::vector<double>& theta, const std::vector<double>& next, const std::vector<double>& grad,
           const std::vector<double>& next_grad) {
    const std::size_t n = theta.size();
    double sy = 0, yy = 0;
    for (std::size_t p = 0; p < n; ++p) {
      const auto sp = static_cast<double>(static_cast<float>(next[p] - theta[p]));
      const auto yp = static_cast<double>(static_cast<float>(next_grad[p] - grad[p]));
      sy += sp * yp;
      yy += yp * yp;
    }
    if (!(sy > 1e-12 * yy)) return;
    std::size_t slot = 0;
    if (rho.size() < capacity) {
      slot = rho.size();
      rho.push_back(1.0 / sy);
    } else {
      slot = oldest;
      rho[slot] = 1.0 / sy;
      oldest = (oldest + 1) % capacity;
    }
    if (s.size() <= slot) {
      s.emplace_back();
      y.emplace_back();
    }
    s[slot].resize(n);
    y[slot].resize(n);
    for (std::size_t p = 0; p < n; ++p) {
      s[slot][p] = static_cast<float>(next[p] - theta[p]);
      y[slot][p] = static_cast<float>(next_grad[p] - grad[p]);
    }
    sy_last = sy;
    yy_last = yy;
  }

  std::size_t capacity;
  std::vector<std::vector<float>> s, y;  // slots, kept when the history is cleared
  std::vector<double> rho, alpha;
  double sy_last = 0, yy_last = 1;  // s.y and y.y of the newest pair
  std::size_t oldest = 0;           // ring buffer start once full
};

// Backtracking line search from `theta` along `direction` (Armijo condition, c1 = 1e-4), starting
// at `step` and halving up to 60 times; the point, its value and gradient go to next, next_value,
// next_grad. False when no step decreases the objective.
template <class Rows>
bool armijo_search(Objective<Rows>& objective, const std::vector<double>& theta, double value,
                   const std::vector<double>& direction, double slope, double step, std::vector<double>& next,
                   double& next_value, std::vector<double>& next_grad) {
  const std::size_t n = theta.size();
  for (int ls = 0; ls < 60; ++ls) {
    for (std::size_t p = 0; p < n; ++p) next[p] = theta[p] + step * direction[p];
    next_value = objective(next, next_grad);
    if (std::isfinite(next_value) && next_value <= value + 1e-4 * step * slope) return true;
    step *= 0.5;
  }
  return false;
}

template <class Rows>
void check_problem(const Rows& x, std::span<const std::int32_t> labels, int classes, int features,
                   const LbfgsOptions& options) {
  GYRE_CHECK(classes >= 2, "logistic regression needs at least two classes");
  GYRE_CHECK(features >= 0, "negative feature count");
  GYRE_CHECK(x.rows() == labels.size(), "logistic regression: rows and labels differ in count");
  GYRE_CHECK(options.c > 0 && std::isfinite(options.c), "logistic regression: C must be positive");
  for (const auto l : labels) GYRE_CHECK(l >= 0 && l < classes, "logistic regression: label out of range");
  for (const auto c : x.columns)
    GYRE_CHECK(c >= 0 && c < features, "logistic regression: column out of range");
}

template <class Rows>
LinearModel fit(const Rows& x, std::span<const std::int32_t> labels, int classes, int features,
                const LbfgsOptions& options, const LinearModel* start) {
  check_problem(x, labels, classes, features, options);
  const auto k = static_cast<std::size_t>(classes);
  const auto f = static_cast<std::size_t>(features);
  const std::size_t n = f * k + k;
  // Two classes: the softmax form with C/2 has the decision function of the one-vector form with C.
  const double c = classes == 2 ? options.c / 2 : options.c;
  Objective<Rows> objective(x, labels, f, k, 1.0 / c, options.threads);

  std::vector<double> theta(n, 0.0), grad(n), direction(n), next(n), next_grad(n);
  if (start != nullptr) {
    GYRE_CHECK(start->features == features && start->classes == classes && start->weights.size() == f * k &&
                   start->bias.size() == k,
               "logistic regression: the starting model has another shape");
    std::copy(start->weights.begin(), start->weights.end(), theta.begin());
    std::copy(start->bias.begin(), start->bias.end(), theta.begin() + static_cast<std::ptrdiff_t>(f * k));
  }
  double value = objective(theta, grad);
  LbfgsHistory history(static_cast<std::size_t>(std::max(1, options.history)));

  LinearModel out;
  out.features = features;
  out.classes = classes;
  int iteration = 0;
  for (; iteration < options.max_iterations; ++iteration) {
    if (options.stop_requested != nullptr && options.stop_requested())
      throw Interrupted("the linear fit was interrupted at L-BFGS iteration " + std::to_string(iteration));
    if (max_abs(grad) <= options.gradient_tolerance * std::max(1.0, std::abs(value))) {
      out.converged = true;
      break;
    }
    const std::size_t count = history.size();
    history.direction(grad, direction);
    double slope = dot(grad, direction);
    if (!(slope < 0)) {  // not a descent direction: restart from steepest descent
      history.clear();
      for (std::size_t p = 0; p < n; ++p) direction[p] = -grad[p];
      slope = dot(grad, direction);
    }
    // First step: unit length; later: the quasi-Newton step itself.
    const double step = count == 0 ? 1.0 / std::sqrt(dot(grad, grad)) : 1.0;
    double next_value = 0;
    if (!armijo_search(objective, theta, value, direction, slope, step, next, next_value, next_grad))
      break;  // no decrease possible at float64 precision: at the optimum
    history.add(theta, next, grad, next_grad);
    const double decrease = value - next_value;
    theta.swap(next);
    grad.swap(next_grad);
    value = next_value;
    // Relative decrease at float64 resolution (scipy's L-BFGS-B uses ftol = 64 eps in sklearn).
    if (decrease <= 64 * std::numeric_limits<double>::epsilon() * std::max({std::abs(value), 1.0})) {
      out.converged = true;
      ++iteration;
      break;
    }
  }
  out.iterations = iteration;
  out.objective = value;
  out.weights.assign(theta.begin(), theta.begin() + static_cast<std::ptrdiff_t>(f * k));
  out.bias.assign(theta.begin() + static_cast<std::ptrdiff_t>(f * k), theta.end());
  return out;
}

}  // namespace

LinearModel fit_logistic_regression(const SparseRows& x, std::span<const std::int32_t> labels, int classes,
                                    int features, const LbfgsOptions& options, const LinearModel* start) {
  return fit(x, labels, classes, features, options, start);
}

LinearModel fit_logistic_regression(const CountRows& x, std::span<const std::int32_t> labels, int classes,
                                    int features, const LbfgsOptions& options, const LinearModel* start) {
  GYRE_CHECK(x.counts.size() == x.columns.size() && x.norms.size() == x.rows(),
             "count rows: columns, counts and norms differ in length");
  return fit(x, labels, classes, features, options, start);
}

// ---------------------------------------------------------------- n-gram classifier

NgramClassifier::NgramClassifier(int min_df, int order, std::size_t max_features)
    : min_df_(min_df), order_(order), max_features_(max_features) {
  GYRE_CHECK(order >= 1 && order <= runtime::kMaxNgramOrder, "linear baseline: n-gram order " +
                                                                 std::to_string(order) + " is outside 1.." +
                                                                 std::to_string(runtime::kMaxNgramOrder));
}

runtime::NgramPart NgramClassifier::part(float mix) const {
  GYRE_CHECK(model_.classes > 0, "linear baseline: part() before fit()");
  std::vector<std::string> keys(index_.size());
  for (const auto& [key, column] : index_) keys[static_cast<std::size_t>(column)] = key;
  std::vector<float> weights(model_.weights.size()), bias(model_.bias.size());
  for (std::size_t i = 0; i < weights.size(); ++i) weights[i] = static_cast<float>(model_.weights[i]);
  for (std::size_t i = 0; i < bias.size(); ++i) bias[i] = static_cast<float>(model_.bias[i]);
  return runtime::NgramPart(order_, std::move(keys), std::move(weights), std::move(bias), mix);
}

void NgramClassifier::ngrams(std::span<const std::string> tokens, int order, std::vector<std::string>& out) {
  out.clear();
  runtime::ngram_keys(std::vector<std::string>(tokens.begin(), tokens.end()), order, out);
}

namespace {
// Any 32-bit hash will do: fingerprints only decide which keys are stored, never the fit.
std::uint32_t fingerprint(std::string_view key) {
  const std::size_t h = std::hash<std::string_view>{}(key);
  return static_cast<std::uint32_t>(h ^ (h >> 32));
}
}  // namespace

void NgramClassifier::count(std::span<const std::string> tokens) {
  GYRE_CHECK(labels_.empty() && !filtered_, "NgramClassifier::count() after add()");
  std::vector<std::string> keys;
  ngrams(tokens, order_, keys);
  const std::size_t begin = counted_.size();
  for (const auto& key : keys) counted_.push_back(fingerprint(key));
  std::sort(counted_.begin() + static_cast<std::ptrdiff_t>(begin), counted_.end());
  counted_.erase(std::unique(counted_.begin() + static_cast<std::ptrdiff_t>(begin), counted_.end()),
                 counted_.end());
}

void NgramClassifier::add(std::span<const std::string> tokens, std::int32_t label) {
  GYRE_CHECK(label >= 0, "negative label");
  GYRE_CHECK(!built_, "NgramClassifier::add() after fit()");
  if (!counted_.empty()) {  // the counting pass is over: keep the fingerprints counted >= min_df times
    std::sort(counted_.begin(), counted_.end());
    for (std::size_t i = 0; i < counted_.size();) {
      std::size_t j = i + 1;
      while (j < counted_.size() && counted_[j] == counted_[i]) ++j;
      if (static_cast<std::ptrdiff_t>(j - i) >= min_df_) candidates_.push_back(counted_[i]);
      i = j;
    }
    std::vector<std::uint32_t>().swap(counted_);
    filtered_ = true;
  }
  std::vector<std::string> keys;
  ngrams(tokens, order_, keys);
  std::vector<std::int32_t> ids;
  ids.reserve(keys.size());
  for (auto& key : keys) {
    if (filtered_ && !std::binary_search(candidates_.begin(), candidates_.end(), fingerprint(key))) continue;
    const auto [it, fresh] = key_ids_.try_emplace(std::move(key), static_cast<std::int32_t>(key_ids_.size()));
    if (fresh) key_df_.push_back(0);
    ids.push_back(it->second);
  }
  std::sort(ids.begin(), ids.end());
  for (std::size_t i = 0; i < ids.size();) {
    std::size_t j = i + 1;
    while (j < ids.size() && ids[j] == ids[i]) ++j;
    entry_keys_.push_back(ids[i]);
    entry_counts_.push_back(static_cast<std::int32_t>(j - i));
    ++key_df_[static_cast<std::size_t>(ids[i])];
    i = j;
  }
  entry_start_.push_back(entry_keys_.size());
  labels_.push_back(label);
}

namespace {

// One row of the n-gram classifier's matrix from (column, count) pairs in ascending column order:
// value 1 + ln(count) ("sublinear tf"), then the row scaled to unit L2 norm, summed in that order.
// Used by featurize(); CountRows::add_row and the fit's row_of() do the same arithmetic, so
// training rows and prediction rows are computed alike.
template <class ColumnCounts>
void sublinear_unit_row(const ColumnCounts& counts, std::vector<std::int32_t>& cols,
                        std::vector<double>& vals) {
  cols.clear();
  vals.clear();
  double norm = 0;
  for (const auto& [col, count] : counts) {
    const double v = 1.0 + std::log(static_cast<double>(count));  // sublinear tf
    cols.push_back(col);
    vals.push_back(v);
    norm += v * v;
  }
  if (norm > 0) {
    norm = std::sqrt(norm);
    for (auto& v : vals) v /= norm;
  }
}

// Feature columns for the interned keys `ids` (ids of key_ids) in sorted key order, so a fit
// depends neither on hash-map iteration order nor on the order keys were first seen: fills index
// (key -> column) and returns id -> column, -1 for an id not in `ids`.
std::vector<std::int32_t> columns_in_key_order(const std::unordered_map<std::string, std::int32_t>& key_ids,
                                               std::vector<std::int32_t> ids,
                                               std::unordered_map<std::string, std::int32_t>& index) {
  std::vector<const std::string*> key_of(key_ids.size());
  for (const auto& [key, id] : key_ids) key_of[static_cast<std::size_t>(id)] = &key;
  std::sort(ids.begin(), ids.end(), [&](std::int32_t a, std::int32_t b) {
    return *key_of[static_cast<std::size_t>(a)] < *key_of[static_cast<std::size_t>(b)];
  });
  std::vector<std::int32_t> column(key_ids.size(), -1);
  index.clear();
  index.reserve(ids.size());
  for (std::size_t c = 0; c < ids.size(); ++c) {
    const auto id = static_cast<std::size_t>(ids[c]);
    column[id] = static_cast<std::int32_t>(c);
    index.emplace(*key_of[id], static_cast<std::int32_t>(c));
  }
  return column;
}

}  // namespace

void NgramClassifier::featurize(std::span<const std::string> tokens, std::vector<std::int32_t>& cols,
                                std::vector<double>& vals) const {
  std::vector<std::string> keys;
  ngrams(tokens, order_, keys);
  std::map<std::int32_t, int> counts;  // ordered: a row's columns ascending, deterministic sums
  for (const auto& key : keys) {
    const auto it = index_.find(key);
    if (it != index_.end()) ++counts[it->second];
  }
  sublinear_unit_row(counts, cols, vals);
}

void NgramClassifier::fit(int classes, const LbfgsOptions& options) {
  GYRE_CHECK(!labels_.empty(), "linear baseline: no training examples");
  if (!built_) {
    // Keep the keys held by >= min_df examples. Column ids follow the sorted key order, so the fit
    // depends neither on hash-map iteration order nor on the order keys were first seen.
    std::vector<std::int32_t> kept;
    for (std::size_t id = 0; id < key_df_.size(); ++id)
      if (key_df_[id] >= min_df_) kept.push_back(static_cast<std::int32_t>(id));
    candidate_features_ = kept.size();
    if (max_features_ > 0 && kept.size() > max_features_) {
      // The feature cap: the max_features keys of highest document frequency, ties by key bytes.
      std::vector<const std::string*> key_of(key_ids_.size());
      for (const auto& [key, id] : key_ids_) key_of[static_cast<std::size_t>(id)] = &key;
      const auto first = [&](std::int32_t a, std::int32_t b) {
        const auto da = key_df_[static_cast<std::size_t>(a)], db = key_df_[static_cast<std::size_t>(b)];
        return da != db ? da > db
                        : *key_of[static_cast<std::size_t>(a)] < *key_of[static_cast<std::size_t>(b)];
      };
      std::nth_element(kept.begin(), kept.begin() + static_cast<std::ptrdiff_t>(max_features_ - 1),
                       kept.end(), first);
      kept.resize(max_features_);
    }
    const std::vector<std::int32_t> column = columns_in_key_order(key_ids_, std::move(kept), index_);
    // The interned keys are no longer needed: index_ has the kept ones.
    std::unordered_map<std::string, std::int32_t>().swap(key_ids_);
    std::vector<std::int32_t>().swap(key_df_);
    std::vector<std::uint32_t>().swap(candidates_);

    // Rows as featurize() makes them: kept columns ascending, 1 + ln(count), unit L2 norm summed in
    // column order; stored as counts (CountRows), reserved exactly, then the entries are freed.
    rows_ = CountRows{};
    rows_.row_start.reserve(labels_.size() + 1);
    rows_.norms.reserve(labels_.size());
    std::size_t entries = 0;
    for (const auto k : entry_keys_) entries += column[static_cast<std::size_t>(k)] >= 0;
    rows_.columns.reserve(entries);
    rows_.counts.reserve(entries);
    std::vector<std::pair<std::int32_t, std::int32_t>> row;  // (column, count)
    for (std::size_t r = 0; r < labels_.size(); ++r) {
      row.clear();
      for (std::size_t e = entry_start_[r]; e < entry_start_[r + 1]; ++e) {
        const std::int32_t col = column[static_cast<std::size_t>(entry_keys_[e])];
        if (col >= 0) row.emplace_back(col, entry_counts_[e]);
      }
      std::sort(row.begin(), row.end());
      rows_.add_row(row);
    }
    std::vector<std::size_t>{0}.swap(entry_start_);
    std::vector<std::int32_t>().swap(entry_keys_);
    std::vector<std::int32_t>().swap(entry_counts_);
    built_ = true;
  }
  const bool warm =
      options.warm_start && model_.classes == classes && model_.features == static_cast<int>(index_.size());
  model_ = fit_logistic_regression(rows_, labels_, classes, static_cast<int>(index_.size()), options,
                                   warm ? &model_ : nullptr);
  c_ = options.c;
}

void NgramClassifier::use_model(LinearModel model, double c) {
  GYRE_CHECK(built_ && model.features == static_cast<int>(index_.size()) && model.classes > 0,
             "linear baseline: use_model() needs a model fitted on this classifier's features");
  model_ = std::move(model);
  c_ = c;
}

void NgramClassifier::release_examples() {
  // swap with empty containers: clear() keeps the capacity (and a hash map its buckets).
  std::unordered_map<std::string, std::int32_t>().swap(key_ids_);
  std::vector<std::int32_t>().swap(key_df_);
  std::vector<std::size_t>{0}.swap(entry_start_);
  std::vector<std::int32_t>().swap(entry_keys_);
  std::vector<std::int32_t>().swap(entry_counts_);
  std::vector<std::int32_t>().swap(labels_);
  std::vector<std::uint32_t>().swap(candidates_);
  rows_ = CountRows{};
  built_ = false;
}

std::int32_t NgramClassifier::predict(std::span<const std::string> tokens) const {
  std::vector<std::int32_t> cols;
  std::vector<double> vals;
  featurize(tokens, cols, vals);
  return model_.predict(cols, vals);
}

std::vector<double> NgramClassifier::probabilities(std::span<const std::string> tokens) const {
  std::vector<std::int32_t> cols;
  std::vector<double> vals;
  featurize(tokens, cols, vals);
  std::vector<double> s(static_cast<std::size_t>(model_.classes));
  model_.scores(cols, vals, s);
  const double m = *std::max_element(s.begin(), s.end());
  double sum = 0;
  for (auto& v : s) sum += (v = std::exp(v - m));
  for (auto& v : s) v /= sum;
  return s;
}

// ---------------------------------------------------------------- window tagger

std::string word_shape(std::string_view token) {
  std::string out;
  char last = 0;
  int run = 0;
  for (const char ch : token) {
    const char s = (ch >= 'A' && ch <= 'Z')   ? 'X'
                   : (ch >= 'a' && ch <= 'z') ? 'x'
                   : (ch >= '0' && ch <= '9') ? 'd'
                                              : ch;
    run = s == last ? run + 1 : 1;
    last = s;
    if (run <= 2) out.push_back(s);
  }
  return out;
}

void WindowTagger::features(std::span<const std::string> tokens, std::span<const std::string> raw,
                            std::size_t t, std::vector<std::string>& out) {
  out.clear();
  const auto word = [&](std::ptrdiff_t i) -> std::string {
    if (i < 0) return "<s>";
    if (static_cast<std::size_t>(i) >= tokens.size()) return "</s>";
    return tokens[static_cast<std::size_t>(i)];
  };
  const auto shape = [&](std::ptrdiff_t i) -> std::string {
    if (i < 0) return "<s>";
    if (static_cast<std::size_t>(i) >= raw.size()) return "</s>";
    return word_shape(raw[static_cast<std::size_t>(i)]);
  };
  const auto p = static_cast<std::ptrdiff_t>(t);
  out.push_back("w-1=" + word(p - 1));
  out.push_back("w0=" + word(p));
  out.push_back("w+1=" + word(p + 1));
  out.push_back("s-1=" + shape(p - 1));
  out.push_back("s0=" + shape(p));
  out.push_back("s+1=" + shape(p + 1));
}

void WindowTagger::add(std::span<const std::string> tokens, std::span<const std::string> raw,
                       std::span<const std::string> tags) {
  GYRE_CHECK(tokens.size() == raw.size() && tokens.size() == tags.size(),
             "window tagger: tokens, raw tokens and tags differ in length");
  std::vector<std::string> keys;
  for (std::size_t t = 0; t < tokens.size(); ++t) {
    features(tokens, raw, t, keys);
    GYRE_CHECK(keys.size() == kKeysPerToken, "window tagger: a token needs six feature keys");
    for (auto& key : keys)
      token_keys_.push_back(
          key_ids_.try_emplace(std::move(key), static_cast<std::int32_t>(key_ids_.size())).first->second);
    const auto [it, fresh] = seen_tag_ids_.try_emplace(tags[t], static_cast<std::int32_t>(seen_tags_.size()));
    if (fresh) seen_tags_.push_back(tags[t]);
    labels_.push_back(it->second);
  }
}

void WindowTagger::fit(const LbfgsOptions& options) {
  GYRE_CHECK(!labels_.empty(), "window tagger: no training tokens");
  GYRE_CHECK(seen_tags_.size() >= 2, "window tagger: the training data has fewer than two tags");
  // Tags and feature columns in sorted order (deterministic, independent of input order).
  tag_names_ = seen_tags_;
  std::sort(tag_names_.begin(), tag_names_.end());
  std::vector<std::int32_t> remap(seen_tags_.size());
  for (std::size_t i = 0; i < seen_tags_.size(); ++i)
    remap[i] = static_cast<std::int32_t>(
        std::lower_bound(tag_names_.begin(), tag_names_.end(), seen_tags_[i]) - tag_names_.begin());
  std::vector<std::int32_t> labels(labels_.size());
  for (std::size_t i = 0; i < labels_.size(); ++i) labels[i] = remap[static_cast<std::size_t>(labels_[i])];

  std::vector<std::int32_t> all(key_ids_.size());
  for (std::size_t i = 0; i < all.size(); ++i) all[i] = static_cast<std::int32_t>(i);
  const std::vector<std::int32_t> column = columns_in_key_order(key_ids_, std::move(all), index_);

  SparseRows x;
  x.row_start.reserve(labels_.size() + 1);
  x.columns.reserve(token_keys_.size());
  x.values.reserve(token_keys_.size());
  std::vector<std::int32_t> cols;
  const std::vector<double> ones(kKeysPerToken, 1.0);
  for (std::size_t t = 0; t < labels_.size(); ++t) {
    cols.clear();
    for (std::size_t k = 0; k < kKeysPerToken; ++k)
      cols.push_back(column[static_cast<std::size_t>(token_keys_[t * kKeysPerToken + k])]);
    std::sort(cols.begin(), cols.end());
    x.add_row(cols, std::span<const double>(ones.data(), cols.size()));
  }
  const bool warm = options.warm_start && model_.classes == static_cast<int>(tag_names_.size()) &&
                    model_.features == static_cast<int>(index_.size());
  model_ = fit_logistic_regression(x, labels, static_cast<int>(tag_names_.size()),
                                   static_cast<int>(index_.size()), options, warm ? &model_ : nullptr);
}

void WindowTagger::use_model(LinearModel model) {
  GYRE_CHECK(model.features == static_cast<int>(index_.size()) &&
                 model.classes == static_cast<int>(tag_names_.size()) && model.classes > 0,
             "window tagger: use_model() needs a model fitted on this tagger's features");
  model_ = std::move(model);
}

void WindowTagger::release_examples() {
  std::unordered_map<std::string, std::int32_t>().swap(key_ids_);
  std::vector<std::int32_t>().swap(token_keys_);
  std::vector<std::int32_t>().swap(labels_);
}

std::vector<std::string> WindowTagger::predict(std::span<const std::string> tokens,
                                               std::span<const std::string> raw) const {
  GYRE_CHECK(tokens.size() == raw.size(), "window tagger: tokens and raw tokens differ in length");
  GYRE_CHECK(model_.classes > 0, "window tagger: predict() before fit()");
  std::vector<std::string> out, keys;
  std::vector<std::int32_t> cols;
  const std::vector<double> ones(6, 1.0);
  for (std::size_t t = 0; t < tokens.size(); ++t) {
    features(tokens, raw, t, keys);
    cols.clear();
    for (const auto& k : keys) {
      const auto it = index_.find(k);
      if (it != index_.end()) cols.push_back(it->second);
    }
    std::sort(cols.begin(), cols.end());
    out.push_back(tag_names_[static_cast<std::size_t>(
        model_.predict(cols, std::span<const double>(ones.data(), cols.size())))]);
  }
  return out;
}

}  // namespace gyre::eval
