#include "gyre/train/baseline.hpp"

#include <algorithm>
#include <cmath>
#include <iterator>
#include <memory>
#include <sstream>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/eval/classification.hpp"
#include "gyre/eval/linear_baseline.hpp"
#include "gyre/eval/span_metrics.hpp"
#include "gyre/train/interrupt.hpp"

namespace gyre::train {

using nlohmann::json;

namespace {

std::string example_key(const data::Example& ex) {
  std::string key = ex.text;
  for (const auto& l : ex.labels) key += "\t" + l;
  for (const auto& t : ex.tags) key += "\t" + t;
  return key;
}

std::uint64_t example_hash(const data::Example& ex) {
  const std::string key = example_key(ex);
  return stable_hash(key.data(), key.size());
}

// The seed of linear_fit_rank's hash: any constant other than the dev split's 0 (the ASCII bytes
// of "linfit"; no other meaning).
constexpr std::uint64_t kLinearFitSeed = 0x6c696e666974;

std::string format_c(double c) {
  std::ostringstream s;
  s << c;
  return s.str();
}

}  // namespace

bool in_dev_split(const data::Example& example, double dev_fraction) {
  return example_hash(example) % 1000000 < static_cast<std::uint64_t>(dev_fraction * 1e6);
}

void split_dev_by_hash(std::vector<data::Example>& examples, double dev_fraction,
                       std::vector<data::Example>& dev) {
  std::vector<data::Example> keep;
  for (auto& ex : examples) (in_dev_split(ex, dev_fraction) ? dev : keep).push_back(std::move(ex));
  examples = std::move(keep);
}

ExampleStream stream_of(std::span<const data::Example> examples) {
  return [examples](const ExampleVisitor& visit) {
    for (const auto& ex : examples) visit(ex);
  };
}

std::uint64_t linear_fit_rank(const data::Example& example) {
  const std::string key = example_key(example);
  return stable_hash(key.data(), key.size(), kLinearFitSeed);
}

std::vector<std::size_t> linear_fit_sample(const ExampleStream& train, std::size_t cap, std::size_t& total) {
  GYRE_CHECK(cap > 0, "linear fit sample: the cap must be positive");
  // A max-heap of the `cap` lowest (rank, position) pairs seen so far.
  std::vector<std::pair<std::uint64_t, std::size_t>> heap;
  heap.reserve(std::min<std::size_t>(cap, 1 << 20));
  total = 0;
  train([&](const data::Example& ex) {
    const std::pair<std::uint64_t, std::size_t> item{linear_fit_rank(ex), total++};
    if (heap.size() < cap) {
      heap.push_back(item);
      std::push_heap(heap.begin(), heap.end());
    } else if (item < heap.front()) {
      std::pop_heap(heap.begin(), heap.end());
      heap.back() = item;
      std::push_heap(heap.begin(), heap.end());
    }
  });
  std::vector<std::size_t> positions;
  positions.reserve(heap.size());
  for (const auto& [rank, position] : heap) positions.push_back(position);
  std::sort(positions.begin(), positions.end());
  return positions;
}

struct LinearBaseline::Impl {
  text::VocabFile vocab;
  data::Task task = data::Task::kClassify;
  std::unique_ptr<data::Encoder> encoder;
  eval::NgramClassifier classifier;
  eval::WindowTagger tagger;
  double c = 0;
  int ngram_order = 2;
  int threads = 1;
  LinearFitUse use;

  void tokens(const data::Example& ex, const std::string& path, std::vector<std::string>& out) const {
    encoder->tokens(ex, path, out);
  }

  // The examples of `all` a fit with use.caps uses (all of them without an examples cap).
  ExampleStream sample_of(const ExampleStream& all) {
    if (use.caps.examples == 0 ||
        (use.caps.known_examples > 0 && use.caps.known_examples <= use.caps.examples)) {
      return [&all, this](const ExampleVisitor& visit) {
        std::size_t total = 0;
        all([&](const data::Example& ex) {
          ++total;
          visit(ex);
        });
        use.train_examples = use.examples = total;
      };
    }
    auto positions = std::make_shared<std::vector<std::size_t>>(
        linear_fit_sample(all, use.caps.examples, use.train_examples));
    use.examples = positions->size();
    return [&all, positions](const ExampleVisitor& visit) {
      std::size_t position = 0;
      auto next = positions->begin();
      all([&](const data::Example& ex) {
        if (next != positions->end() && *next == position) {
          ++next;
          visit(ex);
        }
        ++position;
      });
    };
  }

  void add_all(const ExampleStream& all, const std::string& path) {
    const ExampleStream train = sample_of(all);
    std::vector<std::string> toks;
    classifier = eval::NgramClassifier(2, ngram_order, use.caps.features);
    tagger = eval::WindowTagger();
    // Classifiers: a first pass counts n-gram fingerprints, so the n-grams of one example only
    // (most of a large corpus's) are never stored (gyre/eval/linear_baseline.hpp).
    if (task == data::Task::kClassify)
      train([&](const data::Example& ex) {
        tokens(ex, path, toks);
        classifier.count(toks);
      });
    train([&](const data::Example& ex) {
      if (task == data::Task::kClassify && ex.labels.size() != 1)
        throw ConfigError("baseline", "the linear baseline needs single-label examples (" + path + " line " +
                                          std::to_string(ex.line) + " has " +
                                          std::to_string(ex.labels.size()) + ")");
      tokens(ex, path, toks);
      if (task == data::Task::kClassify)
        classifier.add(toks, vocab.labels.id(ex.labels.front(), path, ex.line));
      else
        tagger.add(toks, ex.tokens, ex.tags);
    });
  }

  void fit_with(double penalty) {
    eval::LbfgsOptions options;
    options.c = penalty;
    options.threads = threads;
    options.warm_start = true;  // the grid's C values ascend: each fit starts at the previous one
    options.stop_requested = interrupt_requested;  // Ctrl-C stops a long fit within an iteration
    if (task == data::Task::kClassify) {
      classifier.fit(static_cast<int>(vocab.labels.size()), options);
      use.candidate_features = classifier.candidate_feature_count();
      use.features = classifier.feature_count();
    } else {
      tagger.fit(options);
      use.candidate_features = use.features = tagger.feature_count();
    }
    c = penalty;
  }

  const eval::LinearModel& model() const {
    return task == data::Task::kClassify ? classifier.model() : tagger.model();
  }

  void use_model(eval::LinearModel model, double penalty) {
    if (task == data::Task::kClassify)
      classifier.use_model(std::move(model), penalty);
    else
      tagger.use_model(std::move(model));
    c = penalty;
  }

  void release_examples() {
    classifier.release_examples();
    tagger.release_examples();
  }

  json score(const ExampleStream& examples, const std::string& path) const {
    std::vector<std::string> toks;
    if (task == data::Task::kClassify) {
      std::vector<std::int32_t> gold, predicted;
      examples([&](const data::Example& ex) {
        tokens(ex, path, toks);
        gold.push_back(vocab.labels.id(ex.labels.front(), path, ex.line));
        predicted.push_back(classifier.predict(toks));
      });
      const auto names = vocab.labels.names();
      const auto m = eval::classification_metrics(gold, predicted, names);
      return json{{"accuracy", m.accuracy}, {"macro_f1", m.macro.f1}};
    }
    std::vector<std::vector<std::string>> gold, predicted;
    examples([&](const data::Example& ex) {
      tokens(ex, path, toks);
      gold.push_back(ex.tags);
      predicted.push_back(tagger.predict(toks, ex.tokens));
    });
    const auto m = eval::tagging_metrics(gold, predicted);
    return json{{"span_f1", m.micro.f1}, {"token_accuracy", m.token_accuracy}};
  }
};

LinearBaseline::LinearBaseline(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}
LinearBaseline::~LinearBaseline() = default;
LinearBaseline::LinearBaseline(LinearBaseline&&) noexcept = default;
LinearBaseline& LinearBaseline::operator=(LinearBaseline&&) noexcept = default;

LinearBaseline LinearBaseline::fit(const text::VocabFile& vocab, data::Task task, const ExampleStream& train,
                                   const std::string& train_path, const ExampleStream& dev,
                                   const std::string& dev_path, double c, int ngram_order, int threads,
                                   const LinearFitCaps& caps) {
  auto impl = std::make_unique<Impl>();
  impl->threads = threads;
  impl->use.caps = caps;
  impl->vocab = vocab;
  impl->task = task;
  impl->ngram_order = ngram_order;
  impl->encoder = std::make_unique<data::Encoder>(impl->vocab, task);
  impl->add_all(train, train_path);
  if (c > 0) {
    impl->fit_with(c);
  } else {
    const char* metric = task == data::Task::kClassify ? "accuracy" : "span_f1";
    double best_score = -1, best_c = kBaselinePenaltyGrid[0];
    eval::LinearModel best;  // the best fit so far, kept rather than fitted again at the end
    for (const double candidate : kBaselinePenaltyGrid) {
      impl->fit_with(candidate);
      const double s = impl->score(dev, dev_path).at(metric).get<double>();
      if (s > best_score + 1e-12) {
        best_score = s;
        best_c = candidate;
        if (candidate != kBaselinePenaltyGrid[std::size(kBaselinePenaltyGrid) - 1]) best = impl->model();
      }
    }
    if (impl->c != best_c) impl->use_model(std::move(best), best_c);
  }
  impl->release_examples();
  return LinearBaseline(std::move(impl));
}

LinearBaseline LinearBaseline::fit(const text::VocabFile& vocab, data::Task task,
                                   std::span<const data::Example> train, const std::string& train_path,
                                   std::span<const data::Example> dev, const std::string& dev_path, double c,
                                   int ngram_order, int threads, const LinearFitCaps& caps) {
  for (const auto& ex : train)
    if (task == data::Task::kClassify && ex.labels.size() != 1)
      throw ConfigError("baseline", "the linear baseline needs single-label examples (" + train_path +
                                        " line " + std::to_string(ex.line) + " has " +
                                        std::to_string(ex.labels.size()) + ")");
  GYRE_CHECK(c > 0 || !dev.empty(), "linear baseline: choosing C needs dev examples");
  return fit(vocab, task, stream_of(train), train_path, stream_of(dev), dev_path, c, ngram_order, threads,
             caps);
}

json LinearBaseline::score(const ExampleStream& examples, const std::string& path) const {
  return impl_->score(examples, path);
}

json LinearBaseline::score(std::span<const data::Example> examples, const std::string& path) const {
  return impl_->score(stream_of(examples), path);
}

std::string LinearBaseline::description() const {
  if (impl_->task == data::Task::kClassify)
    return "bag of token 1-" + std::to_string(impl_->ngram_order) +
           "-grams, L2 logistic regression (C=" + format_c(impl_->c) + ")";
  return "token window (previous/current/next token + shapes), L2 logistic regression (C=" +
         format_c(impl_->c) + ")";
}

runtime::NgramPart LinearBaseline::ngram_part(float mix) const {
  GYRE_CHECK(impl_->task == data::Task::kClassify, "an n-gram part is for classifiers only");
  return impl_->classifier.part(mix);
}

double LinearBaseline::c() const noexcept {
  return impl_->c;
}

std::size_t LinearBaseline::feature_count() const noexcept {
  return impl_->task == data::Task::kClassify ? impl_->classifier.feature_count()
                                              : impl_->tagger.feature_count();
}

const LinearFitUse& LinearBaseline::use() const noexcept {
  return impl_->use;
}

json LinearBaseline::use_json() const {
  const LinearFitUse& u = impl_->use;
  return json{{"train_examples", u.train_examples},
              {"examples", u.examples},
              {"examples_cap", u.caps.examples},
              {"candidate_features", u.candidate_features},
              {"features", u.features},
              {"features_cap", u.caps.features}};
}

int ngram_order_for(const TrainConfig& config) noexcept {
  if (config.ngram_order > 0) return config.ngram_order;
  return config.tokenizer == text::TokenizerMode::kChars ? 4 : 2;
}

LinearFitCaps linear_fit_caps_for(const TrainConfig& config) noexcept {
  LinearFitCaps caps;
  caps.examples = static_cast<std::size_t>(std::max(0, config.linear_fit_examples));
  caps.features = static_cast<std::size_t>(std::max(0, config.linear_fit_features));
  return caps;
}

RunExamples read_run_examples(const TrainConfig& config) {
  RunExamples out;
  const data::ReadOptions options = read_options(config);
  data::ReadReport report;
  out.train = data::load_corpus(config.train, options, &report);
  out.task = report.task;
  if (!config.dev.empty()) {
    out.dev = data::load_corpus(config.dev, options);
    out.dev_path = config.dev;
  } else {
    split_dev_by_hash(out.train, config.dev_fraction, out.dev);
    out.dev_path = config.train;
  }
  return out;
}

ExampleStream read_run_split(const TrainConfig& config, bool dev_split, data::TagScheme scheme) {
  const data::ReadOptions options = read_options(config);
  const bool from_dev_file = dev_split && !config.dev.empty();
  const std::string path = from_dev_file ? config.dev : config.train;
  const bool split = config.dev.empty();
  const double fraction = config.dev_fraction;
  // Training repairs the training split, and the dev split only when it comes from its own file.
  const bool repair = config.repair_tags && scheme != data::TagScheme::kNone && (!dev_split || from_dev_file);
  return [=](const ExampleVisitor& visit) {
    data::read_corpus(path, options, [&](data::Example&& ex) {
      if (split && in_dev_split(ex, fraction) != dev_split) return;
      if (repair && !data::check_tags(ex.tags, scheme).empty()) ex.tags = data::repair_tags(ex.tags, scheme);
      visit(ex);
    });
  };
}

}  // namespace gyre::train
