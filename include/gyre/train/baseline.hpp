#pragma once
// The linear baseline fitted beside every recurrent model (issue 12 item 2), on the run's own
// training split and tokens: a bag-of-n-grams logistic regression for single-label classifiers,
// a token-window logistic regression for taggers (gyre/eval/linear_baseline.hpp has the
// features and the solver). Its inverse penalty C is chosen on the dev split from
// kBaselinePenaltyGrid (accuracy for classifiers, span F1 for taggers; ties: the smaller C).
// Multi-label runs have none.

#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/data/example.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/data/tag_scheme.hpp"
#include "gyre/runtime/ngram_part.hpp"
#include "gyre/text/vocab.hpp"
#include "gyre/train/config.hpp"

namespace gyre::train {

inline constexpr double kBaselinePenaltyGrid[] = {1.0, 10.0, 100.0};

/// Whether `gyre train` without --dev puts the example in the dev split (independent of the
/// seed): when a hash of its text, labels and tags % 1e6 < fraction * 1e6.
bool in_dev_split(const data::Example& example, double dev_fraction);

/// Splits `examples` into (kept, dev) by in_dev_split, keeping the file order in both.
void split_dev_by_hash(std::vector<data::Example>& examples, double dev_fraction,
                       std::vector<data::Example>& dev);

/// Calls its argument once per example, in order: examples are read one at a time (from a file
/// read again, or from a vector) so a fit need not hold them all.
using ExampleVisitor = std::function<void(const data::Example&)>;
using ExampleStream = std::function<void(const ExampleVisitor&)>;
ExampleStream stream_of(std::span<const data::Example> examples);

/// Bounds on the linear fit (the baseline and the n-gram part), so its time and memory do not
/// grow with the corpus (README "N-gram part"); 0 = no bound.
struct LinearFitCaps {
  /// At most this many training examples: those of lowest linear_fit_rank() (ties: file order),
  /// chosen before any n-gram is counted, so counting, rows and fit all see only them.
  std::size_t examples = 0;
  /// Classifiers: at most this many n-gram features (eval::NgramClassifier's feature cap: the
  /// keys held by the most training examples, ties by key bytes).
  std::size_t features = 0;
  /// Not a cap: the number of training examples when the caller knows it (0 = unknown); when it
  /// is at most `examples`, the pass choosing the sample is skipped (the sample is every example).
  std::size_t known_examples = 0;
};

/// What a fit used: the training examples read and fitted on, the n-gram keys reaching the
/// document-frequency threshold and the features kept (classifiers; taggers: every feature).
struct LinearFitUse {
  std::size_t train_examples = 0, examples = 0;
  std::size_t candidate_features = 0, features = 0;
  LinearFitCaps caps;
  bool examples_capped() const noexcept { return examples < train_examples; }
  bool features_capped() const noexcept { return features < candidate_features; }
};

/// The rank of a training example for LinearFitCaps::examples: a 64-bit hash of its text, labels
/// and tags (the dev split's key, gyre/core/rng.hpp stable_hash with another seed, so the sample
/// is independent of the split and of the seed and thread count).
std::uint64_t linear_fit_rank(const data::Example& example);

/// The 0-based positions, ascending, of the examples of `train` that a fit capped at `cap`
/// examples uses (cap > 0): the `cap` of lowest (linear_fit_rank, position), or all of them when
/// there are at most `cap`. Reads the stream once; memory O(cap). `total` gets the number of
/// examples read.
std::vector<std::size_t> linear_fit_sample(const ExampleStream& train, std::size_t cap, std::size_t& total);

class LinearBaseline {
 public:
  ~LinearBaseline();
  LinearBaseline(LinearBaseline&&) noexcept;
  LinearBaseline& operator=(LinearBaseline&&) noexcept;

  /// Fits on `train` with the tokens the model sees (vocab's tokenizer settings; tagging tokens
  /// normalised, their raw form kept for shapes); with `c` > 0 uses that C, else picks C from
  /// kBaselinePenaltyGrid on `dev`. Labels/tags are those of `vocab`. Throws ConfigError for a
  /// multi-label task, ParseError naming path and line on bad text.
  /// The training examples are read once (tokenized and stored as interned n-gram or feature
  /// ids, gyre/eval/linear_baseline.hpp), whatever the number of C values tried; the dev
  /// examples once per C value; the best C's model is kept, not fitted again. `threads`: threads
  /// evaluating the fit's objective (eval::LbfgsOptions::threads; the same model for any count).
  /// `caps` bounds the examples and features fitted (LinearFitCaps; use() says what applied):
  /// with an examples cap the training stream is read once more first, to choose the sample.
  static LinearBaseline fit(const text::VocabFile& vocab, data::Task task, const ExampleStream& train,
                            const std::string& train_path, const ExampleStream& dev,
                            const std::string& dev_path, double c = 0, int ngram_order = 2, int threads = 1,
                            const LinearFitCaps& caps = {});
  static LinearBaseline fit(const text::VocabFile& vocab, data::Task task,
                            std::span<const data::Example> train, const std::string& train_path,
                            std::span<const data::Example> dev, const std::string& dev_path, double c = 0,
                            int ngram_order = 2, int threads = 1, const LinearFitCaps& caps = {});

  /// Scores labelled examples: classifiers {"accuracy", "macro_f1"}, taggers {"span_f1",
  /// "token_accuracy"} (the same keys as the model's dev summary).
  nlohmann::json score(const ExampleStream& examples, const std::string& path) const;
  nlohmann::json score(std::span<const data::Example> examples, const std::string& path) const;

  /// "bag of token 1-2-grams, L2 logistic regression (C=10)" or the tagger's equivalent.
  std::string description() const;
  /// Classifiers: the fitted model as an n-gram part with this mix (eval::NgramClassifier::part).
  /// Throws gyre::Error for a tagger.
  runtime::NgramPart ngram_part(float mix) const;
  double c() const noexcept;
  std::size_t feature_count() const noexcept;
  /// The examples and features the fit used, and its caps.
  const LinearFitUse& use() const noexcept;
  /// use() as JSON for metrics.json: {"train_examples", "examples", "examples_cap", "candidate_features",
  /// "features", "features_cap"} (caps 0 = none).
  nlohmann::json use_json() const;

 private:
  struct Impl;
  explicit LinearBaseline(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

/// The training and dev examples a run used, read again from the files in its config
/// (the same hash split when it had no dev file).
struct RunExamples {
  std::vector<data::Example> train, dev;
  std::string dev_path;
  data::Task task = data::Task::kClassify;
};
RunExamples read_run_examples(const TrainConfig& config);

/// The n-gram order of a run's linear baseline and n-gram part: config.ngram_order, or when it is
/// 0 (auto) 4 for the `chars` tokenizer and 2 for the others.
int ngram_order_for(const TrainConfig& config) noexcept;

/// The caps of a run's linear fit: config.linear_fit_examples and config.linear_fit_features.
LinearFitCaps linear_fit_caps_for(const TrainConfig& config) noexcept;

/// The training (`dev_split` false) or dev split of a run as `gyre train` prepared it, read again
/// from the files in its config one example at a time: the same hash split when it had no dev
/// file, and with `scheme` != kNone and config.repair_tags the tag sequences repaired as training
/// repaired them (the training split, and the dev file when one was given). Throws what reading
/// throws (ParseError naming file and line).
ExampleStream read_run_split(const TrainConfig& config, bool dev_split, data::TagScheme scheme);

}  // namespace gyre::train
