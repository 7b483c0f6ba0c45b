#pragma once
// Linear baselines fitted beside every recurrent model (issue 12 item 2):
//  - NgramClassifier: bag of token n-grams of orders 1..order (runtime::ngram_keys: n >= 2
//    padded with begin/end markers, gyre/runtime/ngram_part.hpp), each feature weighted
//    1 + ln(count) and every example's vector scaled to unit L2 norm ("sublinear tf", Manning, Raghavan &
//    Schuetze 2008, section 6.4.1); n-grams kept if they occur in at least `min_df` training
//    examples. Model: multinomial logistic regression with an L2 penalty.
//  - WindowTagger: one multinomial logistic regression per token over one-hot features of the
//    previous, current and next token (as the model sees them, e.g. case-folded) and the word
//    shape of each of the three (from the un-folded token: capitals, digits and punctuation
//    survive case folding). Tags are predicted token by token (no transition model).
// Both are fitted by L-BFGS (Nocedal 1980; Liu & Nocedal 1989) on
//   sum_i -log softmax(W x_i + b)[y_i] + ||W||^2 / (2 C)        (the bias b is not penalised)
// in float64, except the L-BFGS curvature pairs, kept in float32 (they only shape the search
// direction; half the memory of a fit); the objective may be evaluated on several threads
// (LbfgsOptions::threads) in an order that gives the same bits for any thread count, so a fit is
// deterministic. This is the objective python3-sklearn's LogisticRegression(penalty="l2", C=C,
// solver="lbfgs") minimises; with two classes sklearn fits one weight vector w = w_1 - w_0 whose penalty
// ||w||^2/(2C) equals the softmax form's with C/2, so two-class fits use C/2 (same decision function).
// Fixtures: tools/datasets/baselines.py.

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <string_view>
#include <unordered_map>
#include <utility>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "gyre/runtime/ngram_part.hpp"

namespace gyre::eval {

/// Rows of a sparse matrix (compressed sparse rows), float64 values.
struct SparseRows {
  std::vector<std::size_t> row_start{0};  // row r spans [row_start[r], row_start[r+1])
  std::vector<std::int32_t> columns;
  std::vector<double> values;
  std::size_t rows() const noexcept { return row_start.size() - 1; }
  void add_row(std::span<const std::int32_t> cols, std::span<const double> vals);
};

/// Rows of the n-gram classifier's matrix, stored as counts: entry e of row r has the value
/// (1 + ln(count_e)) / norm_r, norm_r = sqrt(sum over the row's entries, in order, of
/// (1 + ln(count))^2) - the double the same arithmetic on stored values would give, in 6 bytes an
/// entry instead of 12. Columns ascend within a row.
struct CountRows {
  static constexpr std::uint16_t kLargeCount = 0xFFFF;  // counts >= this: in large_counts
  std::vector<std::size_t> row_start{0};                // row r spans [row_start[r], row_start[r+1])
  std::vector<std::int32_t> columns;
  std::vector<std::uint16_t> counts;                                // the count, or kLargeCount
  std::vector<double> norms;                                        // per row (0 for a row without entries)
  std::vector<std::pair<std::size_t, std::uint32_t>> large_counts;  // (entry, count), entries ascending
  std::size_t rows() const noexcept { return row_start.size() - 1; }
  /// Appends a row of (column, count) pairs, columns ascending, counts >= 1.
  void add_row(std::span<const std::pair<std::int32_t, std::int32_t>> column_counts);
  std::uint32_t count(std::size_t entry) const;
  std::size_t bytes() const noexcept;
};

struct LbfgsOptions {
  double c = 10.0;                   // inverse penalty strength (sklearn's C)
  int max_iterations = 1000;         // sklearn's max_iter
  int history = 10;                  // L-BFGS memory m (common practice, Nocedal & Wright 2006 ch. 7)
  double gradient_tolerance = 1e-6;  // stop when max |gradient| <= tol * max(1, |f|)
  int threads = 1;                   // threads evaluating the objective (same fit for any count)
  // NgramClassifier/WindowTagger::fit: start from the model of the previous fit (another C) instead
  // of zeros; the optimum is the same (the objective is strictly convex), reached in fewer steps.
  bool warm_start = false;
  // Asked once per L-BFGS iteration (nullptr: never): when it returns true the fit throws
  // gyre::Interrupted (a Ctrl-C during a long fit stops it within one iteration).
  bool (*stop_requested)() noexcept = nullptr;
};

/// A fitted multinomial logistic regression: scores = W x + b, W stored feature-major
/// ([features x classes]) so a sparse row touches contiguous memory.
struct LinearModel {
  int features = 0;
  int classes = 0;
  std::vector<double> weights;  // features * classes
  std::vector<double> bias;     // classes
  int iterations = 0;           // L-BFGS iterations used
  double objective = 0.0;       // final value of the penalised loss
  bool converged = false;

  /// Class scores of one sparse row (entries with column >= features are ignored).
  void scores(std::span<const std::int32_t> cols, std::span<const double> vals, std::span<double> out) const;
  int predict(std::span<const std::int32_t> cols, std::span<const double> vals) const;
};

/// Fits by L-BFGS with a backtracking (Armijo) line search. labels[i] in [0, classes).
/// Throws gyre::Error if rows and labels differ in count, a label is out of range or classes < 2.
/// `start`: a model of this shape to start from (e.g. the fit at another C), else zeros.
LinearModel fit_logistic_regression(const SparseRows& x, std::span<const std::int32_t> labels, int classes,
                                    int features, const LbfgsOptions& options,
                                    const LinearModel* start = nullptr);
/// The same fit over count rows: the model a SparseRows holding their values gives, bit for bit.
LinearModel fit_logistic_regression(const CountRows& x, std::span<const std::int32_t> labels, int classes,
                                    int features, const LbfgsOptions& options,
                                    const LinearModel* start = nullptr);

/// Bag-of-n-grams classifier over token lists (single-label).
///
/// Training examples are stored compactly, not as strings: add() interns each n-gram key to an
/// id (one copy of every distinct key) and keeps the example as (key id, count) rows; the first
/// fit() prunes by min_df, numbers the kept keys in sorted order and turns the examples into the
/// matrix's count rows (CountRows, reserved exactly), freeing the interned keys and the entries,
/// so the fitted model is the one a fit over the examples' strings gives. fit() may be called
/// again (another C) on the same rows; add() after fit() is refused. release_examples() frees
/// the rows once no more fits are needed.
///
/// Most distinct n-grams of a large corpus occur in one example only and are pruned by min_df.
/// An optional first pass, count(), over the same examples before any add() counts the examples
/// holding each key by a 32-bit fingerprint of it; add() then stores only keys whose fingerprint
/// count reaches min_df. Examples sharing a fingerprint only raise its count, so those keys are a
/// superset of the keys fit() keeps, and the fit is the same with or without the pass.
///
/// Feature cap: with max_features > 0, when more than max_features keys reach min_df the first
/// fit() keeps the max_features keys held by the most examples (document frequency), ties broken
/// by the key's bytes (std::string's order, ascending), so the choice depends neither on the
/// order of the examples nor on the thread count. The fit's parameters (and its L-BFGS history)
/// then take at most max_features x classes numbers, whatever the corpus.
class NgramClassifier {
 public:
  /// order: highest n-gram order, in [1, runtime::kMaxNgramOrder] (throws gyre::Error otherwise).
  /// max_features: the feature cap above, 0 = none.
  explicit NgramClassifier(int min_df = 2, int order = 2, std::size_t max_features = 0);
  /// First pass (optional): one call per training example, in any order, all before add().
  /// Throws gyre::Error after add().
  void count(std::span<const std::string> tokens);
  /// Adds one training example; `label` is an index in [0, classes).
  void add(std::span<const std::string> tokens, std::int32_t label);
  /// Builds the feature index from the examples added and fits. Throws gyre::Error if fewer
  /// than two classes occur, or when no examples were added (or they were released).
  void fit(int classes, const LbfgsOptions& options);
  /// Puts back a model an earlier fit() of this classifier gave (model(), with its C), so a
  /// search over C need not fit the best one again. Throws gyre::Error for another shape.
  void use_model(LinearModel model, double c);
  /// Frees the training examples and the keys fit() did not keep; predict() still works.
  void release_examples();
  std::int32_t predict(std::span<const std::string> tokens) const;
  /// Softmax probabilities, one per class.
  std::vector<double> probabilities(std::span<const std::string> tokens) const;

  std::size_t feature_count() const noexcept { return index_.size(); }
  /// The keys reaching min_df before the feature cap (= feature_count() when it did not apply);
  /// set by the first fit().
  std::size_t candidate_feature_count() const noexcept { return candidate_features_; }
  const LinearModel& model() const noexcept { return model_; }
  double c() const noexcept { return c_; }
  int order() const noexcept { return order_; }

  /// The fitted model as the n-gram part of a classifier (gyre/runtime/ngram_part.hpp): the kept
  /// keys in sorted order (= the column order), weights and bias rounded to float, the given mix.
  /// Throws gyre::Error before fit(), runtime::Error for a mix that is not positive and finite.
  runtime::NgramPart part(float mix) const;
  /// Training examples held, their (key, count) entries (before the first fit; after it the
  /// matrix rows' entries) and the distinct keys interned for them (none after the first fit).
  std::size_t example_count() const noexcept { return labels_.size(); }
  std::size_t entry_count() const noexcept { return entry_keys_.size() + rows_.columns.size(); }
  std::size_t key_count() const noexcept { return key_ids_.size(); }

  /// The keys of a token list for orders 1..order (runtime::ngram_keys), replacing out's content.
  static void ngrams(std::span<const std::string> tokens, int order, std::vector<std::string>& out);

 private:
  void featurize(std::span<const std::string> tokens, std::vector<std::int32_t>& cols,
                 std::vector<double>& vals) const;
  int min_df_;
  int order_;
  std::size_t max_features_;
  std::size_t candidate_features_ = 0;
  // Training examples: example i's keys are entry_keys_[entry_start_[i] .. entry_start_[i+1])
  // (key ids ascending), each with its count in that example.
  std::unordered_map<std::string, std::int32_t> key_ids_;  // key -> id, in order of first sight
  std::vector<std::int32_t> key_df_;                       // per key id: examples holding it
  std::vector<std::size_t> entry_start_{0};
  std::vector<std::int32_t> entry_keys_, entry_counts_;
  std::vector<std::int32_t> labels_;
  std::unordered_map<std::string, std::int32_t> index_;  // kept key -> feature column
  CountRows rows_;                                       // the matrix, built by the first fit()
  bool built_ = false;                                   // rows_ and index_ hold the training examples
  LinearModel model_;
  double c_ = 0;
  // count(): one fingerprint per (example, distinct fingerprint); at the first add() reduced to
  // the sorted fingerprints counted in >= min_df examples.
  std::vector<std::uint32_t> counted_;
  std::vector<std::uint32_t> candidates_;
  bool filtered_ = false;
};

/// The word shape of a token: ASCII upper-case letters -> 'X', ASCII lower-case -> 'x', ASCII
/// digits -> 'd', every other byte kept; runs of one symbol longer than 2 cut to 2
/// ("Marrowby's" -> "Xxx'x", "12-B" -> "dd-X"). ASCII only on purpose: gyre_eval has no ICU,
/// and the rule is trivial to mirror in the sklearn fixture script.
std::string word_shape(std::string_view token);

/// Token-window linear tagger. Like NgramClassifier, it keeps each training token as the ids
/// of its six interned feature keys, may be fitted again, and release_examples() frees them.
class WindowTagger {
 public:
  /// `tokens`: as the model sees them (normalised); `raw`: the same tokens un-folded (for the
  /// shape features); tags as strings. Throws gyre::Error on length mismatch.
  void add(std::span<const std::string> tokens, std::span<const std::string> raw,
           std::span<const std::string> tags);
  void fit(const LbfgsOptions& options);
  /// Puts back a model an earlier fit() gave (model()); throws gyre::Error for another shape.
  void use_model(LinearModel model);
  void release_examples();
  std::vector<std::string> predict(std::span<const std::string> tokens,
                                   std::span<const std::string> raw) const;

  std::size_t feature_count() const noexcept { return index_.size(); }
  const std::vector<std::string>& tag_names() const noexcept { return tag_names_; }
  const LinearModel& model() const noexcept { return model_; }
  std::size_t token_count() const noexcept { return labels_.size(); }
  std::size_t key_count() const noexcept { return key_ids_.size(); }

  /// Feature keys of position t ("w-1=..", "w0=..", "w+1=..", "s-1=..", "s0=..", "s+1=..";
  /// "<s>"/"</s>" beyond the sentence).
  static void features(std::span<const std::string> tokens, std::span<const std::string> raw, std::size_t t,
                       std::vector<std::string>& out);

 private:
  static constexpr std::size_t kKeysPerToken = 6;
  std::unordered_map<std::string, std::int32_t> key_ids_;  // key -> id, in order of first sight
  std::vector<std::int32_t> token_keys_;                   // kKeysPerToken key ids per training token
  std::vector<std::int32_t> labels_;                       // per training token: index in seen_tags_
  std::vector<std::string> seen_tags_;                     // tags in order of first sight
  std::unordered_map<std::string, std::int32_t> seen_tag_ids_;
  std::vector<std::string> tag_names_;  // sorted; the model's classes (after fit)
  std::unordered_map<std::string, std::int32_t> index_;
  LinearModel model_;
};

}  // namespace gyre::eval
