#include "gyre/train/trainer.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <fstream>
#include <map>
#include <memory>
#include <sstream>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/eval/tag_scheme.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/model/encoder.hpp"
#include "gyre/model/sequence_model.hpp"
#include "gyre/optim/grad_clip.hpp"
#include "gyre/optim/lr_schedule.hpp"
#include "gyre/optim/optimizer.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/interrupt.hpp"
#include "gyre/train/progress.hpp"
#include "gyre/train/reducer.hpp"
#include "gyre/train/worker_pool.hpp"

namespace gyre::train {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

constexpr const char* kDevSplitName = "(dev split of the training file)";

// ---------------------------------------------------------------- data preparation

struct PreparedData {
  text::VocabFile vocab;
  data::Task task = data::Task::kClassify;
  bool multi_label = false;
  std::string tag_scheme;
  std::vector<data::EncodedExample> train, dev;
  std::uint64_t fingerprint = 0;  // of the encoded training data (resume checks it)
  std::size_t repaired = 0;
};

std::vector<data::Example> read_examples(const std::string& path, const TrainConfig& config,
                                         ProgressLine& progress, data::ReadReport& report) {
  std::vector<data::Example> examples;
  data::ReadOptions options;
  options.skip_bad_lines = config.skip_bad_lines;
  report = data::read_corpus(path, options, [&](data::Example&& ex) { examples.push_back(std::move(ex)); });
  if (report.skipped > 0) {
    std::string lines;
    for (const auto line : report.first_skipped_lines)
      lines += (lines.empty() ? "" : ", ") + std::to_string(line);
    progress.note("warning: " + path + ": skipped " + std::to_string(report.skipped) +
                  " bad record(s) (lines " + lines +
                  (report.skipped > report.first_skipped_lines.size() ? ", ..." : "") + ")");
  }
  if (examples.empty()) throw ParseError(path, 0, "no examples in the file");
  return examples;
}

std::uint64_t example_hash(const data::Example& ex) {
  std::string key = ex.text;
  for (const auto& l : ex.labels) key += "\t" + l;
  for (const auto& t : ex.tags) key += "\t" + t;
  return stable_hash(key.data(), key.size());
}

// Checks (and with repair_tags fixes) BIO/BIOES sequences; reports file:line of the token.
std::size_t check_tag_sequences(std::vector<data::Example>& examples, const std::string& path,
                                eval::TagScheme scheme, bool repair, bool columns_format) {
  std::size_t repaired = 0;
  for (auto& ex : examples) {
    const auto issues = eval::check_tags(ex.tags, scheme);
    if (issues.empty()) continue;
    if (!repair) {
      const std::size_t line = columns_format ? ex.line + issues.front().position : ex.line;
      throw ParseError(path, line, issues.front().message + " (--repair-tags fixes such sequences)");
    }
    ex.tags = eval::repair_tags(ex.tags, scheme);
    ++repaired;
  }
  return repaired;
}

PreparedData prepare_data(TrainConfig& config, ProgressLine& progress, const text::VocabFile* saved_vocab) {
  PreparedData out;
  data::ReadReport train_report;
  auto train_examples = read_examples(config.train, config, progress, train_report);
  out.task = train_report.task;
  const std::string resolved_task = data::to_string(out.task);
  if (config.task != "auto" && config.task != resolved_task)
    throw ConfigError("task", "'" + config.task + "' does not fit " + config.train + ", which is a " +
                                  resolved_task + " corpus (" + data::to_string(train_report.format) + ")");
  config.task = resolved_task;

  std::vector<data::Example> dev_examples;
  std::string dev_path = config.dev;
  data::ReadReport dev_report;
  if (!config.dev.empty()) {
    dev_examples = read_examples(config.dev, config, progress, dev_report);
    if (dev_report.task != out.task)
      throw ConfigError("dev", config.dev + " is a " + std::string(data::to_string(dev_report.task)) +
                                   " corpus but the training file is a " + resolved_task + " corpus");
  } else {
    // Deterministic split by a hash of each example (independent of --seed, so runs with
    // different seeds share it).
    const auto threshold = static_cast<std::uint64_t>(config.dev_fraction * 1e6);
    std::vector<data::Example> keep;
    for (auto& ex : train_examples)
      (example_hash(ex) % 1000000 < threshold ? dev_examples : keep).push_back(std::move(ex));
    train_examples = std::move(keep);
    dev_path = kDevSplitName;
    if (dev_examples.empty() || train_examples.empty())
      throw ConfigError("dev_fraction",
                        "splitting " + config.train + " left an empty train or dev part; give --dev FILE");
  }

  for (const auto& ex : train_examples)
    if (ex.labels.size() != 1 && out.task == data::Task::kClassify) out.multi_label = true;

  if (out.task == data::Task::kTag) {
    bool bioes = false;
    for (const auto& ex : train_examples)
      for (const auto& tag : ex.tags) {
        const auto parts = eval::split_tag(tag);
        bioes = bioes || parts.prefix == 'E' || parts.prefix == 'S';
      }
    const auto scheme = bioes ? eval::TagScheme::bioes : eval::TagScheme::bio;
    out.tag_scheme = std::string(eval::to_string(scheme));
    const bool columns = train_report.format == data::CorpusFormat::kColumns;
    out.repaired = check_tag_sequences(train_examples, config.train, scheme, config.repair_tags, columns);
    if (!config.dev.empty())
      out.repaired += check_tag_sequences(dev_examples, config.dev, scheme, config.repair_tags,
                                          dev_report.format == data::CorpusFormat::kColumns);
    if (out.repaired > 0)
      progress.note("repaired invalid tag transitions in " + std::to_string(out.repaired) + " sentence(s)");
  }

  if (saved_vocab != nullptr) {
    out.vocab = *saved_vocab;
  } else {
    out.vocab.tokenizer.mode = text::tokenizer_mode_from_string(config.tokenizer);
    out.vocab.tokenizer.nfkc = config.nfkc;
    out.vocab.tokenizer.case_fold = config.case_fold;
    out.vocab.tokenizer.fold_digits = config.fold_digits;
    out.vocab.tokenizer.keep_punctuation = config.keep_punctuation;
    out.vocab.tokenizer.max_tokens = static_cast<std::size_t>(config.max_tokens);
    model::Encoder tokenizing(out.vocab, out.task);
    text::VocabBuilder builder;
    text::LabelCounts labels;
    std::vector<std::string> tokens;
    for (const auto& ex : train_examples) {
      tokenizing.tokens(ex, config.train, tokens);
      builder.add(tokens);
      for (const auto& l : out.task == data::Task::kClassify ? ex.labels : ex.tags) ++labels[l];
    }
    out.vocab.vocab = builder.build(static_cast<std::uint64_t>(config.min_count),
                                    static_cast<std::size_t>(config.max_vocab_size));
    out.vocab.labels = text::LabelSet(labels);
  }
  const model::Encoder encoder(out.vocab, out.task);
  out.train.reserve(train_examples.size());
  for (const auto& ex : train_examples) out.train.push_back(encoder.encode(ex, config.train));
  out.dev.reserve(dev_examples.size());
  for (const auto& ex : dev_examples)
    out.dev.push_back(encoder.encode(ex, config.dev.empty() ? config.train : config.dev));

  std::uint64_t h = 0;
  for (const auto& ex : out.train) {
    h = stable_hash(ex.ids.data(), ex.ids.size() * sizeof(std::int32_t), h);
    h = stable_hash(ex.targets.data(), ex.targets.size() * sizeof(std::int32_t), h);
  }
  out.fingerprint = h;
  return out;
}

model::ModelSpec make_spec(TrainConfig& config, const PreparedData& data) {
  model::ModelSpec spec;
  spec.task = data.task;
  spec.cell = model::parse_cell(config.cell);
  spec.vocab_size = static_cast<int>(data.vocab.vocab.size());
  spec.embedding_size = config.embedding_size;
  spec.hidden_size = config.hidden_size;
  spec.layers = config.layers;
  if (config.bidirectional == "auto") config.bidirectional = data.task == data::Task::kTag ? "yes" : "no";
  spec.bidirectional = config.bidirectional == "yes";
  spec.dropout = static_cast<float>(config.dropout);
  spec.embedding_dropout = static_cast<float>(config.embedding_dropout);
  spec.pooling = nn::parse_pooling(config.pooling);
  if (config.output == "auto")
    config.output = data.task == data::Task::kTag ? "softmax" : (data.multi_label ? "sigmoid" : "softmax");
  if (data.multi_label && config.output != "sigmoid")
    throw ConfigError("output", "the training file has multi-label examples; they need --output sigmoid");
  spec.output = config.output == "crf"       ? model::OutputKind::kCrf
                : config.output == "sigmoid" ? model::OutputKind::kSigmoid
                                             : model::OutputKind::kSoftmax;
  spec.labels = data.vocab.labels.names();
  spec.tag_scheme = data.tag_scheme;
  if (config.early_stop_metric == "auto")
    config.early_stop_metric = data.task == data::Task::kTag ? "span_f1" : "macro_f1";
  if (data.task == data::Task::kTag && (config.early_stop_metric == "macro_f1"))
    throw ConfigError("early_stop_metric", "taggers stop on span_f1, accuracy or loss");
  if (data.task == data::Task::kClassify && config.early_stop_metric == "span_f1")
    throw ConfigError("early_stop_metric", "span_f1 needs a tagging corpus");
  model::validate(spec);
  return spec;
}

model::LossOptions make_loss_options(const TrainConfig& config, const PreparedData& data,
                                     const model::ModelSpec& spec) {
  model::LossOptions loss;
  loss.label_smoothing = static_cast<float>(config.label_smoothing);
  if (config.class_weights == "balanced") {
    if (spec.output != model::OutputKind::kSoftmax)
      throw ConfigError("class_weights", "balanced class weights need a softmax output");
    // w_c = N / (C * n_c), the "balanced" heuristic of King & Zeng (2001) as sklearn's
    // compute_class_weight documents it; n_c counts training labels (tags for taggers).
    std::vector<double> counts(static_cast<std::size_t>(spec.num_labels()), 0.0);
    double total = 0;
    for (const auto& ex : data.train)
      for (const auto t : ex.targets) {
        counts[static_cast<std::size_t>(t)] += 1;
        total += 1;
      }
    for (const double n : counts)
      loss.class_weights.push_back(
          n > 0 ? static_cast<float>(total / (static_cast<double>(counts.size()) * n)) : 1.0f);
  }
  return loss;
}

// ---------------------------------------------------------------- run state

struct RunState {
  int epoch = 0;                 // 0-based epoch in progress (== epochs completed at an epoch end)
  std::size_t step = 0;          // next step within the epoch
  std::int64_t global_step = 0;  // optimizer steps taken
  double best_metric = NAN;
  int best_epoch = 0;
  int epochs_without_improvement = 0;
  double epoch_loss_sum = 0, epoch_loss_units = 0;
  std::size_t epoch_tokens = 0;
  double epoch_seconds = 0;  // seconds spent in the epoch before an interruption
  double total_seconds = 0;
  std::size_t total_tokens = 0;
  bool finished = false;
};

json state_to_json(const RunState& s, const optim::LearningRateSchedule& schedule,
                   std::uint64_t fingerprint) {
  json sched = json::object();
  for (const auto& [k, v] : schedule.state()) sched[k] = v;
  return json{{"epoch", s.epoch},
              {"step", s.step},
              {"global_step", s.global_step},
              {"best_metric", std::isnan(s.best_metric) ? json(nullptr) : json(s.best_metric)},
              {"best_epoch", s.best_epoch},
              {"epochs_without_improvement", s.epochs_without_improvement},
              {"epoch_loss_sum", s.epoch_loss_sum},
              {"epoch_loss_units", s.epoch_loss_units},
              {"epoch_tokens", s.epoch_tokens},
              {"epoch_seconds", s.epoch_seconds},
              {"total_seconds", s.total_seconds},
              {"total_tokens", s.total_tokens},
              {"finished", s.finished},
              {"schedule", sched},
              {"data_fingerprint", std::to_string(fingerprint)}};
}

RunState state_from_json(const json& j) {
  RunState s;
  s.epoch = j.at("epoch").get<int>();
  s.step = j.at("step").get<std::size_t>();
  s.global_step = j.at("global_step").get<std::int64_t>();
  s.best_metric = j.at("best_metric").is_null() ? NAN : j.at("best_metric").get<double>();
  s.best_epoch = j.at("best_epoch").get<int>();
  s.epochs_without_improvement = j.at("epochs_without_improvement").get<int>();
  s.epoch_loss_sum = j.at("epoch_loss_sum").get<double>();
  s.epoch_loss_units = j.at("epoch_loss_units").get<double>();
  s.epoch_tokens = j.at("epoch_tokens").get<std::size_t>();
  s.epoch_seconds = j.at("epoch_seconds").get<double>();
  s.total_seconds = j.at("total_seconds").get<double>();
  s.total_tokens = j.at("total_tokens").get<std::size_t>();
  s.finished = j.at("finished").get<bool>();
  return s;
}

std::uint64_t mix_seed(std::uint64_t seed, std::uint64_t a, std::uint64_t b, std::uint64_t c) {
  std::uint64_t words[4] = {seed, a, b, c};
  return stable_hash(words, sizeof words, 0x5EEDULL);
}

std::string fmt(double v, int decimals = 4) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

// ---------------------------------------------------------------- the run

class Run {
 public:
  Run(TrainConfig config, const TrainOptions& options, bool resuming)
      : config_(std::move(config)),
        options_(options),
        resuming_(resuming),
        progress_(options.progress, options.interactive, options.quiet) {}

  TrainResult execute();

 private:
  void setup_model();
  void load_resume_state();
  void run_epoch();
  void end_epoch();
  void save_last();
  void finish(TrainOutcome outcome, TrainResult& result);
  [[noreturn]] void diverged(const std::string& what) const;

  TrainConfig config_;
  TrainOptions options_;
  bool resuming_;
  ProgressLine progress_;
  fs::path dir_;
  PreparedData data_;
  model::ModelSpec spec_;
  std::vector<std::unique_ptr<model::SequenceModel>> replicas_;  // [0] is the master
  std::unique_ptr<optim::Optimizer> optimizer_;
  std::unique_ptr<optim::LearningRateSchedule> schedule_;
  std::unique_ptr<WorkerPool> pool_;
  InProcessReducer reducer_;
  RunState state_;
  std::size_t steps_per_epoch_ = 0;
  long long steps_this_run_ = 0;
  bool interrupted_ = false;
  bool early_stopped_ = false;
  json last_dev_ = json::object();
  json best_dev_ = json::object();
  std::chrono::steady_clock::time_point epoch_start_;
};

void Run::setup_model() {
  spec_ = make_spec(config_, data_);
  validate(config_);  // again, now that task/bidirectional/output are resolved
  const auto loss = make_loss_options(config_, data_, spec_);
  for (int w = 0; w < config_.threads; ++w) {
    replicas_.push_back(std::make_unique<model::SequenceModel>(spec_));
    replicas_.back()->set_loss_options(loss);
  }
  model::SequenceModel& master = *replicas_[0];
  Rng init_rng(config_.seed);
  master.init_parameters(init_rng);
  if (!config_.pretrained_embeddings.empty()) {
    const auto stats =
        master.embedding().load_pretrained(config_.pretrained_embeddings, [&](std::string_view token) {
          const auto id = data_.vocab.vocab.id(token);
          return id == text::Vocab::kUnk && token != text::Vocab::kUnkToken ? -1 : static_cast<int>(id);
        });
    progress_.note("pretrained vectors: " + std::to_string(stats.matched) + " of " +
                   std::to_string(data_.vocab.vocab.size()) + " vocabulary rows set from " +
                   std::to_string(stats.lines) + " lines of " + config_.pretrained_embeddings);
  }
  for (auto& r : replicas_) r->embedding().set_trainable(!config_.freeze_embeddings);
  for (std::size_t w = 1; w < replicas_.size(); ++w) replicas_[w]->copy_values_from(master);

  optim::OptimizerConfig oc;
  oc.momentum = config_.optimizer == "sgd" ? static_cast<float>(config_.momentum) : 0.0f;
  oc.nesterov = config_.nesterov;
  oc.weight_decay = static_cast<float>(config_.weight_decay);
  optimizer_ = optim::make_optimizer(config_.optimizer, oc);
  optimizer_->bind(master.params());

  data::BatchPlanOptions plan;
  plan.batch_size = config_.batch_size;
  steps_per_epoch_ = (data_.train.size() + static_cast<std::size_t>(config_.batch_size) - 1) /
                     static_cast<std::size_t>(config_.batch_size);
  optim::ScheduleConfig sc;
  sc.base_rate = static_cast<float>(config_.learning_rate);
  sc.warmup_steps = config_.warmup_steps;
  sc.total_steps = static_cast<std::int64_t>(steps_per_epoch_) * config_.epochs;
  sc.plateau_goal =
      config_.early_stop_metric == "loss" ? optim::PlateauGoal::kLower : optim::PlateauGoal::kHigher;
  schedule_ = optim::make_schedule(config_.schedule, sc);
  pool_ = std::make_unique<WorkerPool>(config_.threads);
}

void Run::save_last() {
  io::write_checkpoint(dir_ / "checkpoint-last.bin", *replicas_[0], data_.vocab, optimizer_.get(),
                       state_to_json(state_, *schedule_, data_.fingerprint), config_to_json(config_));
}

void Run::diverged(const std::string& what) const {
  throw DivergenceError(what + " at epoch " + std::to_string(state_.epoch + 1) + ", step " +
                        std::to_string(state_.step + 1) +
                        ". Training stopped; checkpoint-best.bin is intact. Likely fixes: a lower "
                        "--learning-rate (now " +
                        fmt(config_.learning_rate, 6) +
                        "), gradient clipping "
                        "(--clip-norm, now " +
                        fmt(config_.clip_norm, 2) + "), or --warmup-steps.");
}

void Run::run_epoch() {
  data::BatchPlanOptions plan_options;
  plan_options.batch_size = config_.batch_size;
  const auto plan =
      data::plan_batches(data_.train, plan_options, config_.seed, static_cast<std::uint64_t>(state_.epoch));
  progress_.start_epoch(state_.epoch + 1, config_.epochs, plan.size());
  epoch_start_ = std::chrono::steady_clock::now();
  const int workers = config_.threads;
  data::Batch batch;
  std::vector<data::Batch> sub(static_cast<std::size_t>(workers));
  std::vector<double> losses(static_cast<std::size_t>(workers));
  std::vector<nn::ParameterStore*> others;
  for (std::size_t w = 1; w < replicas_.size(); ++w) others.push_back(&replicas_[w]->params());
  std::size_t padded = 0, tokens = 0;
  for (; state_.step < plan.size(); ++state_.step) {
    const auto& indices = plan[state_.step];
    data::fill_batch(data_.train, indices, batch, config_.max_length);
    const double normalizer = replicas_[0]->loss_units(batch);
    // Contiguous slices of the batch, one per worker (the last ones may be empty).
    const std::size_t per =
        (indices.size() + static_cast<std::size_t>(workers) - 1) / static_cast<std::size_t>(workers);
    try {
      pool_->run([&](int w) {
        const std::size_t begin = std::min(indices.size(), per * static_cast<std::size_t>(w));
        const std::size_t end = std::min(indices.size(), begin + per);
        losses[static_cast<std::size_t>(w)] = 0.0;
        if (begin == end) return;
        data::Batch& mine = sub[static_cast<std::size_t>(w)];
        data::fill_batch(data_.train, std::span<const std::size_t>(indices).subspan(begin, end - begin), mine,
                         config_.max_length);
        Rng dropout(mix_seed(config_.seed, static_cast<std::uint64_t>(state_.epoch), state_.step,
                             static_cast<std::uint64_t>(w)));
        losses[static_cast<std::size_t>(w)] = replicas_[static_cast<std::size_t>(w)]->train_batch(
            mine, data_.train, config_.bptt_window, normalizer, dropout);
      });
    } catch (const DivergenceError& e) {
      diverged(e.what());
    }
    double loss_sum = 0;
    for (const double l : losses) loss_sum += l;
    if (!std::isfinite(loss_sum)) diverged("the training loss became " + fmt(loss_sum));
    auto& master = replicas_[0]->params();
    if (!others.empty()) {
      reducer_.reduce(master, others);
    } else {
      for (auto& p : master)
        if (p.sparse_rows) p.finalize_touched_rows();
    }
    if (config_.clip_norm > 0) {
      const auto clip = optim::clip_grad_norm(master, config_.clip_norm);
      if (!clip.finite) diverged("the gradient norm became " + fmt(clip.norm));
    } else {
      const double norm = optim::global_grad_norm(master);
      if (!std::isfinite(norm)) diverged("the gradient norm became " + fmt(norm));
    }
    optimizer_->step(master, schedule_->rate(state_.global_step));
    ++state_.global_step;
    if (!others.empty()) reducer_.broadcast(master, others);
    for (auto& r : replicas_) r->params().zero_grad();

    state_.epoch_loss_sum += loss_sum;
    state_.epoch_loss_units += normalizer;
    state_.epoch_tokens += batch.tokens();
    tokens += batch.tokens();
    padded += batch.padded();
    progress_.step(state_.step + 1, state_.epoch_loss_sum / state_.epoch_loss_units, tokens);

    ++steps_this_run_;
    const bool step_hook =
        options_.interrupt_after_steps > 0 && steps_this_run_ == options_.interrupt_after_steps;
    if (interrupt_requested() || step_hook) {
      ++state_.step;
      interrupted_ = true;
      return;
    }
  }
  if (state_.epoch == 0 || resuming_) {
    // Only meaningful when the epoch ran from its start.
    if (padded > 0 && state_.step == plan.size() && tokens == state_.epoch_tokens)
      progress_.note(
          "padding: " + fmt(100.0 * (1.0 - static_cast<double>(tokens) / static_cast<double>(padded)), 1) +
          "% of the batch grid (length bucketing on)");
  }
}

void Run::end_epoch() {
  const double seconds =
      state_.epoch_seconds +
      std::chrono::duration<double>(std::chrono::steady_clock::now() - epoch_start_).count();
  const auto dev = evaluate(*replicas_[0], data_.dev);
  const double metric = dev.metric(config_.early_stop_metric);
  const double rate = schedule_->rate(std::max<std::int64_t>(state_.global_step - 1, 0));
  const bool improved = metric_improves(config_.early_stop_metric, metric, state_.best_metric);
  const double train_loss = state_.epoch_loss_sum / std::max(state_.epoch_loss_units, 1e-300);
  const double tok_s = seconds > 0 ? static_cast<double>(state_.epoch_tokens) / seconds : 0.0;
  state_.total_seconds += seconds;
  state_.total_tokens += state_.epoch_tokens;
  last_dev_ = dev.summary();
  json line{{"epoch", state_.epoch + 1}, {"train_loss", train_loss}, {"dev", last_dev_},
            {"learning_rate", rate},     {"seconds", seconds},       {"tokens_per_second", tok_s},
            {"improved", improved}};
  {
    std::ofstream log(dir_ / "log.jsonl", std::ios::app);
    log << line.dump() << '\n';
    if (!log) throw IoError("cannot append to " + (dir_ / "log.jsonl").string());
  }
  if (improved) {
    state_.best_metric = metric;
    state_.best_epoch = state_.epoch + 1;
    state_.epochs_without_improvement = 0;
    best_dev_ = dev.to_json();
  } else {
    ++state_.epochs_without_improvement;
  }
  if (config_.schedule == "plateau" && schedule_->observe(metric))
    progress_.note("learning rate lowered to " + fmt(schedule_->rate(state_.global_step), 6));
  std::string summary = "train loss " + fmt(train_loss) + "  dev";
  for (const auto& [k, v] : last_dev_.items()) summary += " " + k + " " + fmt(v.get<double>());
  summary += improved ? "  (best)" : "";
  progress_.finish_epoch(summary);

  ++state_.epoch;
  state_.step = 0;
  state_.epoch_loss_sum = state_.epoch_loss_units = 0;
  state_.epoch_tokens = 0;
  state_.epoch_seconds = 0;
  if (config_.patience > 0 && state_.epochs_without_improvement >= config_.patience &&
      state_.epoch < config_.epochs) {
    early_stopped_ = true;
    progress_.note("early stop: dev " + config_.early_stop_metric + " did not improve for " +
                   std::to_string(config_.patience) + " epoch(s); best was epoch " +
                   std::to_string(state_.best_epoch));
  }
  state_.finished = early_stopped_ || state_.epoch >= config_.epochs;
  if (improved) {
    io::write_checkpoint(dir_ / "checkpoint-best.bin", *replicas_[0], data_.vocab, nullptr,
                         state_to_json(state_, *schedule_, data_.fingerprint), config_to_json(config_));
  }
  save_last();
  if (best_dev_.is_object() && !best_dev_.empty())
    write_file_atomic(dir_ / "best-dev-metrics.json", best_dev_.dump(2) + "\n");
}

void Run::load_resume_state() {
  const json saved = io::restore_checkpoint(dir_ / "checkpoint-last.bin", *replicas_[0], optimizer_.get());
  const json& trainer = saved.at("trainer");
  if (trainer.value("data_fingerprint", "") != std::to_string(data_.fingerprint))
    throw ConfigError("resume", "the training data of " + dir_.string() + " changed since the run started (" +
                                    config_.train + "); start a new run");
  state_ = state_from_json(trainer);
  std::vector<optim::StateScalar> sched;
  for (const auto& [k, v] : trainer.at("schedule").items()) sched.emplace_back(k, v.get<double>());
  schedule_->load_state(sched);
  optimizer_->set_step_count(state_.global_step);
  for (std::size_t w = 1; w < replicas_.size(); ++w) replicas_[w]->copy_values_from(*replicas_[0]);
  // Keep only the log lines of completed epochs (an interrupted epoch wrote none).
  const fs::path log_path = dir_ / "log.jsonl";
  std::ifstream in(log_path);
  std::string line, kept;
  int lines = 0;
  while (std::getline(in, line) && lines < state_.epoch) {
    kept += line + "\n";
    const json j = json::parse(line, nullptr, false);
    if (!j.is_discarded() && j.value("improved", false)) best_dev_ = j.at("dev");
    ++lines;
  }
  write_file_atomic(log_path, kept);
  const fs::path best_metrics = dir_ / "best-dev-metrics.json";
  if (fs::exists(best_metrics)) best_dev_ = json::parse(read_file(best_metrics));
}

void Run::finish(TrainOutcome outcome, TrainResult& result) {
  result.outcome = outcome;
  result.epochs_completed = state_.epoch;
  result.best_epoch = state_.best_epoch;
  result.metric = config_.early_stop_metric;
  result.best_metric = state_.best_metric;
  result.seconds = state_.total_seconds;
  result.tokens_per_second =
      state_.total_seconds > 0 ? static_cast<double>(state_.total_tokens) / state_.total_seconds : 0;
  result.peak_rss_bytes = peak_rss_bytes();
  if (outcome == TrainOutcome::kInterrupted) return;
  result.final_metrics =
      json{{"task", config_.task},
           {"outcome", outcome == TrainOutcome::kEarlyStopped ? "early_stopped" : "finished"},
           {"epochs", state_.epoch},
           {"best_epoch", state_.best_epoch},
           {"metric", config_.early_stop_metric},
           {"best_metric", state_.best_metric},
           {"dev", best_dev_},
           {"train_examples", data_.train.size()},
           {"dev_examples", data_.dev.size()},
           {"vocabulary_size", data_.vocab.vocab.size()},
           {"parameters", replicas_[0]->params().parameter_count()},
           {"seconds", state_.total_seconds},
           {"tokens_per_second", result.tokens_per_second},
           {"threads", config_.threads},
           {"peak_rss_bytes", result.peak_rss_bytes}};
  write_file_atomic(dir_ / "metrics.json", result.final_metrics.dump(2) + "\n");
}

TrainResult Run::execute() {
  dir_ = options_.out;
  if (dir_.empty()) throw ConfigError("out", "a run directory is required (--out DIR)");
  validate(config_);
  const text::VocabFile* saved_vocab = nullptr;
  text::VocabFile loaded_vocab;
  if (resuming_) {
    loaded_vocab = text::load_vocab_file(dir_ / "vocab.json");
    saved_vocab = &loaded_vocab;
  } else {
    std::error_code ec;
    if (fs::exists(dir_, ec) && !(fs::is_directory(dir_, ec) && fs::is_empty(dir_, ec)))
      throw ConfigError("out", dir_.string() +
                                   " already exists and is not empty; choose a new --out, or continue "
                                   "an interrupted run with `gyre train --resume " +
                                   dir_.string() + "`");
  }
  data_ = prepare_data(config_, progress_, saved_vocab);
  setup_model();  // all checks done: nothing is created before this point
  if (!resuming_) {
    fs::create_directories(dir_);
    write_file_atomic(dir_ / "config.json", config_to_json(config_).dump(2) + "\n");
    text::save_vocab_file(dir_ / "vocab.json", data_.vocab);
    write_file_atomic(dir_ / "log.jsonl", "");
  } else {
    load_resume_state();
  }
  if (!options_.quiet) {
    std::ostringstream head;
    head << (resuming_ ? "resuming " : "training ") << config_.cell << " " << config_.task << " ("
         << (spec_.bidirectional ? "bi, " : "") << spec_.layers << "x" << spec_.hidden_size << ", embedding "
         << spec_.embedding_size << ", " << replicas_[0]->params().parameter_count() << " parameters) on "
         << data_.train.size() << " examples, dev " << data_.dev.size() << ", vocabulary "
         << data_.vocab.vocab.size() << ", " << spec_.num_labels() << " labels, " << config_.threads
         << " thread(s), seed " << config_.seed;
    if (resuming_) head << "; from epoch " << state_.epoch + 1 << " step " << state_.step + 1;
    progress_.note(head.str());
  }
  install_interrupt_handlers();
  TrainResult result;
  while (!state_.finished && state_.epoch < config_.epochs) {
    run_epoch();
    if (interrupted_) {
      state_.epoch_seconds +=
          std::chrono::duration<double>(std::chrono::steady_clock::now() - epoch_start_).count();
      save_last();
      progress_.note("\ninterrupted: saved " + (dir_ / "checkpoint-last.bin").string() +
                     "; continue with: gyre train --resume " + dir_.string());
      finish(TrainOutcome::kInterrupted, result);
      return result;
    }
    end_epoch();
    if (early_stopped_) break;
    if (options_.interrupt_after_epochs > 0 && state_.epoch == options_.interrupt_after_epochs &&
        !state_.finished) {
      progress_.note("interrupted after epoch " + std::to_string(state_.epoch) +
                     "; continue with: gyre train --resume " + dir_.string());
      finish(TrainOutcome::kInterrupted, result);
      return result;
    }
  }
  finish(early_stopped_ ? TrainOutcome::kEarlyStopped : TrainOutcome::kFinished, result);
  return result;
}

}  // namespace

TrainResult train(const TrainConfig& config, const TrainOptions& options) {
  reset_interrupt();
  Run run(config, options, false);
  return run.execute();
}

TrainResult resume(const TrainOptions& options) {
  reset_interrupt();
  const fs::path dir = options.out;
  const fs::path config_path = dir / "config.json";
  if (!fs::exists(dir / "checkpoint-last.bin"))
    throw ConfigError("resume", dir.string() + " has no checkpoint-last.bin to resume from");
  json j;
  try {
    j = json::parse(read_file(config_path));
  } catch (const json::exception& e) {
    throw FormatError(config_path.string(), std::string("not valid JSON: ") + e.what());
  }
  Run run(config_from_json(j), options, true);
  return run.execute();
}

}  // namespace gyre::train
