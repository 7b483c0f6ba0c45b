#include "gyre/eval/linear_baseline.hpp"

#include <algorithm>
#include <cmath>
#include <functional>
#include <limits>
#include <map>
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

// One row of a matrix as (columns, values) pointers: SparseRows holds both; CountRows computes
// the values into `scratch` (the division its definition gives, so the values are those a
// SparseRows would hold).
struct RowView {
  const std::int32_t* columns;
  const double* values;
  std::size_t size;
};

RowView row_of(const SparseRows& x, std::size_t r, std::vector<double>&, const std::vector<double>&) {
  const std::size_t begin = x.row_start[r], end = x.row_start[r + 1];
  return {x.columns.data() + begin, x.values.data() + begin, end - begin};
}

// tf[c] = 1 + ln(c) for the counts below tf.size() (a table: the objective is evaluated many times).
RowView row_of(const CountRows& x, std::size_t r, std::vector<double>& scratch,
               const std::vector<double>& tf) {
  const std::size_t begin = x.row_start[r], end = x.row_start[r + 1];
  scratch.resize(end - begin);
  const double norm = x.norms[r];
  for (std::size_t e = begin; e < end; ++e) {
    const std::uint16_t c = x.counts[e];
    const double v = c < tf.size() ? tf[c] : 1.0 + std::log(static_cast<double>(x.count(e)));
    scratch[e - begin] = v / norm;
  }
  return {x.columns.data() + begin, scratch.data(), end - begin};
}

// Penalised multinomial log loss and its gradient at theta = [W (features x classes), b].
template <class Rows>
struct Objective {
  const Rows& x;
  std::span<const std::int32_t> y;
  std::size_t features, classes;
  double inv_c;
  std::vector<double> z;       // per-row scratch
  std::vector<double> values;  // per-row scratch (CountRows)
  std::vector<double> tf;      // 1 + ln(c) by count (CountRows)

  Objective(const Rows& rows, std::span<const std::int32_t> labels, std::size_t f, std::size_t k, double inv)
      : x(rows), y(labels), features(f), classes(k), inv_c(inv) {
    if constexpr (std::is_same_v<Rows, CountRows>) {
      tf.resize(256);
      for (std::size_t c = 1; c < tf.size(); ++c) tf[c] = 1.0 + std::log(static_cast<double>(c));
    }
  }

  double operator()(const std::vector<double>& theta, std::vector<double>& grad) {
    std::fill(grad.begin(), grad.end(), 0.0);
    const std::size_t k = classes;
    const double* w = theta.data();
    const double* b = theta.data() + features * k;
    double* gw = grad.data();
    double* gb = grad.data() + features * k;
    z.resize(k);
    double loss = 0;
    for (std::size_t r = 0; r < x.rows(); ++r) {
      const RowView row = row_of(x, r, values, tf);
      for (std::size_t c = 0; c < k; ++c) z[c] = b[c];
      for (std::size_t e = 0; e < row.size; ++e) {
        const double* wr = w + static_cast<std::size_t>(row.columns[e]) * k;
        const double v = row.values[e];
        for (std::size_t c = 0; c < k; ++c) z[c] += v * wr[c];
      }
      const double m = *std::max_element(z.begin(), z.end());
      double sum = 0;
      for (std::size_t c = 0; c < k; ++c) {
        z[c] = std::exp(z[c] - m);
        sum += z[c];
      }
      const auto label = static_cast<std::size_t>(y[r]);
      loss += std::log(sum) - std::log(z[label]);
      for (std::size_t c = 0; c < k; ++c) z[c] = z[c] / sum - (c == label ? 1.0 : 0.0);
      for (std::size_t c = 0; c < k; ++c) gb[c] += z[c];
      for (std::size_t e = 0; e < row.size; ++e) {
        double* gr = gw + static_cast<std::size_t>(row.columns[e]) * k;
        const double v = row.values[e];
        for (std::size_t c = 0; c < k; ++c) gr[c] += v * z[c];
      }
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

// The last `capacity` curvature pairs (s, y) of L-BFGS in a ring buffer, and the two-loop recursion over
// them.
struct LbfgsHistory {
  explicit LbfgsHistory(std::size_t pairs) : capacity(pairs), alpha(pairs) {}

  std::size_t size() const { return s.size(); }

  // direction = -H grad (Nocedal & Wright 2006, algorithm 7.4).
  void direction(const std::vector<double>& grad, std::vector<double>& d) {
    const std::size_t n = grad.size();
    d = grad;
    const std::size_t count = s.size();
    for (std::size_t j = 0; j < count; ++j) {
      const std::size_t i = (oldest + count - 1 - j) % count;
      alpha[i] = rho[i] * dot(s[i], d);
      for (std::size_t p = 0; p < n; ++p) d[p] -= alpha[i] * y[i][p];
    }
    double gamma = 1.0;
    if (count > 0) {
      const std::size_t last = (oldest + count - 1) % count;
      gamma = dot(s[last], y[last]) / dot(y[last], y[last]);
    }
    for (auto& v : d) v *= gamma;
    for (std::size_t j = 0; j < count; ++j) {
      const std::size_t i = (oldest + j) % count;
      const double beta = rho[i] * dot(y[i], d);
      for (std::size_t p = 0; p < n; ++p) d[p] += s[i][p] * (alpha[i] - beta);
    }
    for (auto& v : d) v = -v;
  }

  void clear() {
    s.clear();
    y.clear();
    rho.clear();
    oldest = 0;
  }

  // Adds the pair when it satisfies the curvature condition (sy = s.y), else skips it.
  void add(std::vector<double>&& sv, std::vector<double>&& yv, double sy) {
    if (!(sy > 1e-12 * dot(yv, yv))) return;
    if (s.size() < capacity) {
      s.push_back(std::move(sv));
      y.push_back(std::move(yv));
      rho.push_back(1.0 / sy);
    } else {
      s[oldest] = std::move(sv);
      y[oldest] = std::move(yv);
      rho[oldest] = 1.0 / sy;
      oldest = (oldest + 1) % capacity;
    }
  }

  std::size_t capacity;
  std::vector<std::vector<double>> s, y;
  std::vector<double> rho, alpha;
  std::size_t oldest = 0;  // ring buffer start once full
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
                const LbfgsOptions& options) {
  check_problem(x, labels, classes, features, options);
  const auto k = static_cast<std::size_t>(classes);
  const auto f = static_cast<std::size_t>(features);
  const std::size_t n = f * k + k;
  // Two classes: the softmax form with C/2 has the decision function of the one-vector form with C.
  const double c = classes == 2 ? options.c / 2 : options.c;
  Objective<Rows> objective(x, labels, f, k, 1.0 / c);

  std::vector<double> theta(n, 0.0), grad(n), direction(n), next(n), next_grad(n);
  double value = objective(theta, grad);
  LbfgsHistory history(static_cast<std::size_t>(std::max(1, options.history)));

  LinearModel out;
  out.features = features;
  out.classes = classes;
  int iteration = 0;
  for (; iteration < options.max_iterations; ++iteration) {
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
    std::vector<double> s(n), yv(n);
    for (std::size_t p = 0; p < n; ++p) {
      s[p] = next[p] - theta[p];
      yv[p] = next_grad[p] - grad[p];
    }
    const double sy = dot(s, yv);
    const double decrease = value - next_value;
    theta.swap(next);
    grad.swap(next_grad);
    value = next_value;
    history.add(std::move(s), std::move(yv), sy);
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
                                    int features, const LbfgsOptions& options) {
  return fit(x, labels, classes, features, options);
}

LinearModel fit_logistic_regression(const CountRows& x, std::span<const std::int32_t> labels, int classes,
                                    int features, const LbfgsOptions& options) {
  GYRE_CHECK(x.counts.size() == x.columns.size() && x.norms.size() == x.rows(),
             "count rows: columns, counts and norms differ in length");
  return fit(x, labels, classes, features, options);
}

// ---------------------------------------------------------------- n-gram classifier

NgramClassifier::NgramClassifier(int min_df, int order) : min_df_(min_df), order_(order) {
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
  model_ = fit_logistic_regression(rows_, labels_, classes, static_cast<int>(index_.size()), options);
  c_ = options.c;
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
  model_ = fit_logistic_regression(x, labels, static_cast<int>(tag_names_.size()),
                                   static_cast<int>(index_.size()), options);
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
