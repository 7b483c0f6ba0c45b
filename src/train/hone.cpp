#include "gyre/train/hone.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <map>
#include <memory>
#include <set>
#include <sstream>
#include <utility>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/train/baseline.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/interrupt.hpp"
#include "gyre/train/process_group.hpp"
#include "gyre/train/trainer.hpp"

namespace gyre::train {

namespace fs = std::filesystem;
using nlohmann::json;

// ---- Hyperband arithmetic -------------------------------------------------------------------------

namespace {

long long int_pow(int base, int exp) {
  long long p = 1;
  for (int i = 0; i < exp; ++i) p *= base;
  return p;
}

}  // namespace

int hyperband_s_max(int max_epochs, int eta) {
  if (max_epochs < 1) throw ConfigError("max_epochs", "a trial needs at least 1 epoch");
  if (eta < 2) throw ConfigError("eta", "keeping one in fewer than 2 trials halves nothing; give 2 or more");
  // floor(log_eta(R)) without floating point: log(81)/log(3) is 3.9999... in doubles.
  int s = 0;
  while (int_pow(eta, s + 1) <= max_epochs) ++s;
  return s;
}

std::vector<HoneBracket> hyperband_brackets(int max_epochs, int eta) {
  const int s_max = hyperband_s_max(max_epochs, eta);
  std::vector<HoneBracket> brackets;
  for (int s = s_max; s >= 0; --s) {
    HoneBracket b;
    b.s = s;
    // n = ceil(B/R * eta^s / (s+1)) with B = (s_max+1) R  (Li et al. 2018, Algorithm 1, line 3)
    const long long num = static_cast<long long>(s_max + 1) * int_pow(eta, s);
    const long long n = (num + s) / (s + 1);
    for (int i = 0; i <= s; ++i) {
      HoneRung rung;
      rung.trials = static_cast<int>(n / int_pow(eta, i));  // floor(n eta^-i)
      // r_i = R eta^(i-s), whole epochs (rounded down, at least 1); the last rung is R.
      rung.epochs = i == s ? max_epochs : std::max(1, static_cast<int>(max_epochs / int_pow(eta, s - i)));
      b.rungs.push_back(rung);
    }
    brackets.push_back(std::move(b));
  }
  return brackets;
}

HoneBracket shrink_bracket(const HoneBracket& bracket, int n, int eta) {
  GYRE_CHECK(n >= 1, "a bracket needs at least one trial");
  HoneBracket b = bracket;
  long long div = 1;
  for (auto& rung : b.rungs) {
    rung.trials = std::max(1, static_cast<int>(n / div));
    div *= eta;
  }
  return b;
}

// ---- search space ---------------------------------------------------------------------------------

const std::vector<HoneDimension>& default_hone_space() {
  using K = HoneDimension::Kind;
  // Ranges are common practice for small recurrent text models, no single source. One line per
  // searched setting; the key must be a training setting (train_settings()).
  static const std::vector<HoneDimension> space = {
      {.key = "learning_rate", .kind = K::kLogUniform, .choices = {}, .low = 3e-4, .high = 1e-2, .digits = 2},
      {.key = "hidden_size", .kind = K::kChoice, .choices = {32, 64, 128, 256}},
      {.key = "embedding_size", .kind = K::kChoice, .choices = {32, 64, 128}},
      {.key = "dropout", .kind = K::kUniform, .choices = {}, .low = 0.0, .high = 0.5, .digits = 2},
      {.key = "pooling", .kind = K::kChoice, .choices = {"mean", "max", "last"}},
      {.key = "char_encoder", .kind = K::kChoice, .choices = {false, true}},
  };
  return space;
}

namespace {

double round_significant(double v, int digits) {
  if (v == 0.0) return 0.0;
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*g", digits, v);
  return std::strtod(buf, nullptr);
}

double round_decimals(double v, int digits) {
  const double scale = std::pow(10.0, digits);
  return std::round(v * scale) / scale;
}

json space_to_json(const std::vector<HoneDimension>& space) {
  json j = json::array();
  for (const auto& d : space) {
    json e{{"key", d.key}};
    switch (d.kind) {
      case HoneDimension::Kind::kChoice:
        e["choices"] = d.choices;
        break;
      case HoneDimension::Kind::kLogUniform:
        e["log_uniform"] = {d.low, d.high};
        e["digits"] = d.digits;
        break;
      case HoneDimension::Kind::kUniform:
        e["uniform"] = {d.low, d.high};
        e["digits"] = d.digits;
        break;
    }
    j.push_back(e);
  }
  return j;
}

}  // namespace

json sample_settings(const std::vector<HoneDimension>& space, Rng& rng) {
  json j = json::object();
  for (const auto& d : space) {
    switch (d.kind) {
      case HoneDimension::Kind::kChoice:
        GYRE_CHECK(!d.choices.empty(), "search dimension " + d.key + " has no choices");
        j[d.key] = d.choices[static_cast<std::size_t>(rng.below(d.choices.size()))];
        break;
      case HoneDimension::Kind::kLogUniform: {
        GYRE_CHECK(d.low > 0 && d.high > d.low, "bad log-uniform range of " + d.key);
        const double u = rng.uniform_double();
        j[d.key] =
            round_significant(std::exp(std::log(d.low) + u * (std::log(d.high) - std::log(d.low))), d.digits);
        break;
      }
      case HoneDimension::Kind::kUniform: {
        GYRE_CHECK(d.high >= d.low, "bad uniform range of " + d.key);
        j[d.key] = round_decimals(d.low + rng.uniform_double() * (d.high - d.low), d.digits);
        break;
      }
    }
  }
  return j;
}

// ---- the search ---------------------------------------------------------------------------------

namespace {

constexpr const char* kStateFormat = "gyre-hone-state";
// Version 3: trial 1 is the default settings, trained to the full budget, and the sampled trials
// are numbered from 2; version 2 numbered sampled trials from 1. Version 2: a rung's score is the
// saved model's dev score (network + n-gram part); version 1 ranked on the network alone. Rungs of
// an older version cannot be mixed with new ones.
constexpr int kStateVersion = 3;

/// What one rung of one trial produced.
struct RungOutcome {
  int epochs = 0;
  double score = 0.0;          // dev metric of the model as saved (network + n-gram part, tempered)
  double network_score = 0.0;  // best dev metric of the network alone (the trainer's early-stopping score)
  bool stopped_early = false;
  bool finished = false;
  bool continued = false;  // this rung continued the trial's resume.bin (not retrained from epoch 0)
};

RungOutcome outcome_from_json(const json& r) {
  RungOutcome o;
  o.epochs = r.at("epochs").get<int>();
  o.score = r.at("score").get<double>();
  o.network_score = r.at("network_score").get<double>();
  o.stopped_early = r.at("stopped_early").get<bool>();
  o.finished = r.at("finished").get<bool>();
  o.continued = r.at("continued").get<bool>();
  return o;
}

json outcome_to_json(int trial, int rung, const RungOutcome& o) {
  return json{{"trial", trial},
              {"rung", rung},
              {"epochs", o.epochs},
              {"score", o.score},
              {"network_score", o.network_score},
              {"stopped_early", o.stopped_early},
              {"finished", o.finished},
              {"continued", o.continued}};
}

std::string fmt_duration(double seconds) {
  if (!std::isfinite(seconds) || seconds < 0) return "?";
  const long long s = std::llround(seconds);
  char buf[32];
  if (s >= 3600)
    std::snprintf(buf, sizeof buf, "%lldh%02lldm", s / 3600, (s / 60) % 60);
  else
    std::snprintf(buf, sizeof buf, "%lldm%02llds", s / 60, s % 60);
  return buf;
}

std::string settings_text(const json& settings) {
  std::string out;
  for (const auto& [k, v] : settings.items()) {
    if (!out.empty()) out += " ";
    out += k + "=" + value_text(v);
  }
  return out;
}

/// A bracket as played: which iteration and Hyperband bracket, its rungs, its trials' ids.
struct PlannedBracket {
  int iteration = 0;
  HoneBracket bracket;
  int first_trial = 0;       // ids first_trial .. first_trial + rungs[0].trials - 1
  long long units() const {  // planned epochs of all rungs
    long long u = 0;
    int prev = 0;
    for (const auto& r : bracket.rungs) {
      u += static_cast<long long>(r.trials) * (r.epochs - prev);
      prev = r.epochs;
    }
    return u;
  }
};

class Search {
 public:
  explicit Search(const HoneSpec& spec)
      : spec_(spec),
        group_(spec.group ? *spec.group : process_group()),
        brackets_(hyperband_brackets(spec.max_epochs, spec.eta)) {}

  HoneResult run();

 private:
  json search_json() const {
    json base = config_to_json(spec_.base);
    base.erase("epochs");  // the resource, set per trial
    return json{{"base", base},
                {"space", space_to_json(spec_.space)},
                {"max_epochs", spec_.max_epochs},
                {"eta", spec_.eta},
                {"max_trials", spec_.max_trials}};
  }
  std::optional<PlannedBracket> plan(std::size_t k) const;
  void load_state();
  void save_state();
  double elapsed() const {
    return seconds_before_ +
           std::chrono::duration<double>(std::chrono::steady_clock::now() - session_start_).count();
  }
  HoneTrial& trial(int id);
  /// Trains (or continues) trial t to target_epochs and scores the model it saves (or, paused,
  /// would save) on dev: RungOutcome::score; the network's own best is network_score.
  RungOutcome run_rung(HoneTrial& t, int target_epochs, bool& interrupted);
  /// The training part of run_rung: score = the network's best dev metric.
  RungOutcome train_trial(HoneTrial& t, int target_epochs, bool& interrupted);
  void note_progress(const HoneTrial& t, const PlannedBracket& b, int rung, bool cached);
  bool better(const HoneTrial& a, const HoneTrial& b) const;
  json write_best(int id);

  struct Spread {
    bool budget_exhausted = false, interrupted = false;
    std::set<int> trained;  // trials that trained this rung on some rank
  };
  Spread train_rung_across_ranks(const std::vector<int>& alive, int rung, int target, int prev);
  void start();
  bool settle_trial(int id, const PlannedBracket& p, std::size_t rung, const Spread& spread,
                    HoneResult& result);
  bool train_rung(const PlannedBracket& p, std::size_t rung, const std::vector<int>& alive,
                  HoneResult& result);
  HoneResult finish(HoneResult result);

  const HoneSpec& spec_;
  ProcessGroup& group_;
  std::unique_ptr<RankClaims> claims_;  // several MPI ranks: who trains which (trial, rung)
  std::vector<HoneBracket> brackets_;
  std::map<std::pair<int, int>, RungOutcome> done_;  // (trial, rung) -> outcome
  std::vector<HoneTrial> trials_;
  Rng sampler_{1};
  std::string metric_;
  double seconds_before_ = 0.0;
  std::chrono::steady_clock::time_point session_start_ = std::chrono::steady_clock::now();
  long long units_total_ = 0;  // planned epochs of all brackets (0 = unbounded)
  long long units_done_ = 0;
  long long units_trained_this_session_ = 0;
  double seconds_trained_this_session_ = 0.0;
};

std::optional<PlannedBracket> Search::plan(std::size_t k) const {
  // First the default settings, alone, trained to R epochs (trial 1, iteration 0): the search then
  // never returns settings that score worse on dev than the user's defaults, whatever the
  // sampling and the halving (early rungs of a few epochs can cut a setting that needs more; a
  // tuner starting from the default configuration as its incumbent: Hutter, Hoos & Leyton-Brown
  // 2011, SMAC). It counts as one trial of --trials.
  if (k == 0) {
    PlannedBracket p;
    p.bracket.rungs = {HoneRung{1, spec_.max_epochs}};
    p.first_trial = 1;
    return p;
  }
  // Then iterations repeat the brackets s_max..0 with new configurations until the trial budget
  // is spent; the last bracket is shrunk to the trials left.
  --k;
  const std::size_t per_iteration = brackets_.size();
  int first = 2;
  for (std::size_t i = 0; i <= k; ++i) {
    const HoneBracket& b = brackets_[i % per_iteration];
    int n = b.rungs[0].trials;
    if (spec_.max_trials > 0) {
      const int left = spec_.max_trials - (first - 1);
      if (left <= 0) return std::nullopt;
      n = std::min(n, left);
    }
    if (i == k) {
      PlannedBracket p;
      p.iteration = static_cast<int>(i / per_iteration) + 1;
      p.bracket = n == b.rungs[0].trials ? b : shrink_bracket(b, n, spec_.eta);
      p.first_trial = first;
      return p;
    }
    first += n;
  }
  return std::nullopt;
}

HoneTrial& Search::trial(int id) {
  // Configurations are drawn in id order from one generator seeded with the training seed, so
  // trial k has the same settings whatever the budget or session.
  while (static_cast<int>(trials_.size()) < id) {
    HoneTrial t;
    t.id = static_cast<int>(trials_.size()) + 1;
    if (t.id == 1) {  // the defaults: the base config's values of the searched keys
      const json base = config_to_json(spec_.base);
      t.settings = json::object();
      for (const auto& d : spec_.space) t.settings[d.key] = base.at(d.key);
      t.defaults = true;
    } else {
      t.settings = sample_settings(spec_.space, sampler_);
    }
    trials_.push_back(std::move(t));
  }
  return trials_[static_cast<std::size_t>(id - 1)];
}

void Search::load_state() {
  const fs::path path = spec_.out / "hone-state.json";
  if (!fs::exists(path)) return;
  json j;
  try {
    j = json::parse(read_file(path));
  } catch (const json::exception& e) {
    throw FormatError(path.string(), std::string("not valid JSON: ") + e.what());
  }
  if (j.value("format", "") != kStateFormat)
    throw FormatError(path.string(), "not a gyre hone state file (format " + std::string(kStateFormat) +
                                         " version " + std::to_string(kStateVersion) + ")");
  if (j.value("version", 0) != kStateVersion)
    throw FormatError(path.string(),
                      "hone state version " + std::to_string(j.value("version", 0)) +
                          ", this gyre reads version " + std::to_string(kStateVersion) +
                          (j.value("version", 0) == 1
                               ? " (version 1 ranked trials on the network alone, without the n-gram part)"
                               : " (since version 3 trial 1 is the default settings, so the sampled trials "
                                 "are numbered differently)") +
                          "; start the search again with a new --out");
  if (j.at("search") != search_json())
    throw ConfigError("out", spec_.out.string() +
                                 " holds a search with other settings (data, fixed settings, search space, "
                                 "--max-epochs, --keep-one-in or --trials differ); choose a new --out, "
                                 "or repeat the earlier command to continue it");
  seconds_before_ = j.value("seconds", 0.0);
  metric_ = j.value("metric", "");
  for (const auto& r : j.at("rungs"))
    done_[{r.at("trial").get<int>(), r.at("rung").get<int>()}] = outcome_from_json(r);
}

void Search::save_state() {
  if (group_.rank() != 0) return;  // one writer; every rank holds the same outcomes
  json rungs = json::array();
  for (const auto& [key, o] : done_) rungs.push_back(outcome_to_json(key.first, key.second, o));
  const json j{{"format", kStateFormat}, {"version", kStateVersion}, {"search", search_json()},
               {"metric", metric_},      {"seconds", elapsed()},     {"rungs", rungs}};
  write_file_atomic(spec_.out / "hone-state.json", j.dump(1) + "\n");
}

namespace {
/// Options of the search's own trainings (a trial's rung, the probe of a paused trial, the best
/// run): quiet, on this process alone (also inside an MPI job), the linear baseline only if asked.
TrainOptions trial_options(const fs::path& out, bool fit_baseline) {
  TrainOptions options;
  options.out = out;
  options.quiet = true;
  options.fit_baseline = fit_baseline;
  options.group = &local_group();
  return options;
}
}  // namespace

/// Best dev metric and epochs of a run directory from its log.jsonl, first `epochs` lines.
RungOutcome outcome_from_log(const fs::path& dir, const std::string& metric, int epochs) {
  std::ifstream in(dir / "log.jsonl");
  std::string line;
  RungOutcome o;
  o.score = std::nan("");
  const Metric m = metric_from_string(metric);
  while (o.epochs < epochs && std::getline(in, line)) {
    const json j = json::parse(line);
    const double v = j.at("dev").at(metric).get<double>();
    if (metric_improves(m, v, o.score)) o.score = v;
    ++o.epochs;
  }
  return o;
}

/// Whether the run in `dir` (its resolved config.json) gets an n-gram part when it ends: a
/// single-label classifier with ngram_part auto (trainer.cpp Run::finish; the mix chosen on dev may
/// still be 0, and then the saved model is the network alone).
bool may_have_ngram_part(const fs::path& dir) {
  const json c = json::parse(read_file(dir / "config.json"));
  return c.value("task", "") == "classify" && c.value("output", "") == "softmax" &&
         c.value("ngram_part", "") == "auto";
}

/// The dev score, in `metric`, of the model a finished run directory saved (selected.bin: the
/// network, its n-gram part and temperature, as `gyre eval` runs it), on the run's dev split read
/// again from its files.
double saved_model_dev_score(const fs::path& dir, const std::string& metric) {
  const io::TrainedModel trained =
      io::load_trained_model(dir / io::kSelectedCheckpointFile, io::Engine::kLibrary);
  const TrainConfig config = config_from_json(json::parse(read_file(dir / "config.json")));
  data::Encoder encoder(trained.vocab, trained.spec.task);
  encoder.set_ngram_part(&trained.ngram_part);
  const std::string dev_path = config.dev.empty() ? config.train : config.dev;
  std::vector<data::EncodedExample> dev;
  read_run_split(config, true, data::TagScheme::kNone)(
      [&](const data::Example& ex) { dev.push_back(encoder.encode(ex, dev_path)); });
  return evaluate(*trained.model, dev).metric(metric);
}

RungOutcome Search::run_rung(HoneTrial& t, int target_epochs, bool& interrupted) {
  RungOutcome o = train_trial(t, target_epochs, interrupted);
  if (interrupted) return o;
  o.network_score = o.score;
  const fs::path dir = spec_.out / "trials" / ("t" + std::to_string(t.id));
  if (!may_have_ngram_part(dir)) return o;  // the saved model is the network: its dev score
  if (o.finished) {
    o.score = saved_model_dev_score(dir, metric_);
    return o;
  }
  // Paused at the rung's end: the trial has no n-gram part yet (the part and its mix come with the
  // calibration at a run's end). Its score is what it would save if it ended here: a copy of the
  // run directory is finished at these epochs (the trainer fits the part, chooses the mix on dev,
  // fits the temperature, exactly as for a run that ends) and scored; the trial itself stays
  // paused and continues from its own resume.bin.
  if (interrupt_requested()) {  // resume() below clears the flag: a Ctrl-C must be seen first
    interrupted = true;
    return o;
  }
  const fs::path probe = spec_.out / "trials" / ("t" + std::to_string(t.id) + ".probe");
  fs::remove_all(probe);
  fs::copy(dir, probe, fs::copy_options::recursive);
  fs::remove(probe / "metrics.json");
  TrainOptions options = trial_options(probe, /*fit_baseline=*/false);
  options.epochs = o.epochs;
  const TrainResult r = resume(options);
  if (r.outcome == TrainOutcome::kInterrupted) {
    fs::remove_all(probe);
    interrupted = true;
    return o;
  }
  o.score = saved_model_dev_score(probe, metric_);
  fs::remove_all(probe);
  return o;
}

RungOutcome Search::train_trial(HoneTrial& t, int target_epochs, bool& interrupted) {
  const fs::path dir = spec_.out / "trials" / ("t" + std::to_string(t.id));
  TrainOptions options = trial_options(dir, /*fit_baseline=*/false);  // fitted once, for the winner
  // Pause at the rung's end; the trainer saves resume.bin, from which the next rung
  // continues. The last rung runs to R (or an early stop).
  options.interrupt_after_epochs = target_epochs < spec_.max_epochs ? target_epochs : 0;
  RungOutcome o;
  if (fs::exists(dir / "metrics.json")) {
    // Trained to the end already (R or an early stop), e.g. in a session killed before it saved.
    const json m = json::parse(read_file(dir / "metrics.json"));
    o.epochs = m.at("epochs").get<int>();
    o.score = m.at("best_metric").get<double>();
    o.stopped_early = m.value("outcome", "") == "early_stopped";
    o.finished = true;
    if (metric_.empty()) metric_ = m.at("metric").get<std::string>();
    return o;
  }
  TrainResult r;
  // train() and resume() clear the interrupt flag when they start: a Ctrl-C that arrived since
  // the last rung must be seen here.
  if (interrupt_requested()) {
    interrupted = true;
    return o;
  }
  const bool continued = fs::exists(dir / io::kResumeCheckpointFile);
  if (continued) {
    // A paused trial, or one interrupted by Ctrl-C within this rung.
    if (!metric_.empty()) {
      const RungOutcome logged = outcome_from_log(dir, metric_, target_epochs);
      if (logged.epochs >= target_epochs) return logged;  // paused here before the state was saved
    }
    r = resume(options);
  } else {
    fs::remove_all(dir);  // killed before its first checkpoint: nothing to keep
    fs::create_directories(dir.parent_path());
    json j = config_to_json(spec_.base);
    for (const auto& [k, v] : t.settings.items()) j[k] = v;
    j["epochs"] = spec_.max_epochs;
    r = train(config_from_json(j), options);
  }
  if (metric_.empty()) metric_ = r.metric;
  if (r.outcome == TrainOutcome::kInterrupted &&
      (interrupt_requested() || r.epochs_completed < target_epochs)) {
    interrupted = true;
    return o;
  }
  o.epochs = r.epochs_completed;
  o.score = r.best_metric;
  o.stopped_early = r.outcome == TrainOutcome::kEarlyStopped;
  o.finished = r.outcome != TrainOutcome::kInterrupted;
  o.continued = continued;
  return o;
}

bool Search::better(const HoneTrial& a, const HoneTrial& b) const {
  const Metric m = metric_from_string(metric_);
  if (metric_improves(m, a.score, b.score)) return true;
  if (metric_improves(m, b.score, a.score)) return false;
  // Equal saved scores (common when the n-gram part decides most of dev: every trial has the same
  // linear fit): the better network, which is what differs between the trials.
  if (metric_improves(m, a.network_score, b.network_score)) return true;
  if (metric_improves(m, b.network_score, a.network_score)) return false;
  if (a.epochs != b.epochs) return a.epochs > b.epochs;  // equal scores: the longer-trained one
  return a.id < b.id;
}

void Search::note_progress(const HoneTrial& t, const PlannedBracket& b, int rung, bool cached) {
  if (spec_.progress == nullptr || group_.rank() != 0) return;
  const double spent = elapsed();
  std::string eta = "?";
  if (units_trained_this_session_ > 0) {
    const double per_unit = seconds_trained_this_session_ / static_cast<double>(units_trained_this_session_);
    double left = units_total_ > 0 ? per_unit * static_cast<double>(units_total_ - units_done_)
                                   : std::numeric_limits<double>::infinity();
    if (spec_.max_minutes > 0) left = std::min(left, std::max(0.0, spec_.max_minutes * 60.0 - spent));
    eta = fmt_duration(left);
  } else if (units_total_ == 0 && spec_.max_minutes > 0) {
    eta = fmt_duration(std::max(0.0, spec_.max_minutes * 60.0 - spent));
  }
  std::string done = units_total_ > 0
                         ? std::to_string(units_done_) + "/" + std::to_string(units_total_) + " epochs (" +
                               std::to_string(100 * units_done_ / units_total_) + "%)"
                         : std::to_string(units_done_) + " epochs";
  std::fprintf(spec_.progress,
               "hone: %s  trial %d (iteration %d, bracket %d, rung %d/%zu, %d epoch%s) dev %s %.4f%s%s  "
               "elapsed %s  eta %s\n",
               done.c_str(), t.id, b.iteration, b.bracket.s, rung + 1, b.bracket.rungs.size(), t.epochs,
               t.epochs == 1 ? "" : "s", metric_.c_str(), t.score, t.stopped_early ? " (stopped early)" : "",
               cached ? " [saved]" : "", fmt_duration(spent).c_str(), eta.c_str());
  std::fflush(spec_.progress);
}

json Search::write_best(int id) {
  const HoneTrial& w = trial(id);
  const fs::path src = spec_.out / "trials" / ("t" + std::to_string(w.id));
  const fs::path best = spec_.out / "best", tmp = spec_.out / "best.tmp";
  fs::remove_all(tmp);
  fs::copy(src, tmp, fs::copy_options::recursive);
  // The copy becomes a finished run of exactly the epochs the trial had: config.json says so,
  // and the trainer (resuming with nothing left to train) writes metrics.json with the linear
  // baseline beside it. With the constant or plateau schedule (the only ones allowed here),
  // `gyre train --config best/config.json` repeats the run.
  json config = json::parse(read_file(tmp / "config.json"));
  config["epochs"] = w.epochs;
  write_file_atomic(tmp / "config.json", config.dump(2) + "\n");
  fs::remove(tmp / "metrics.json");
  const TrainResult r = resume(trial_options(tmp, /*fit_baseline=*/true));
  // The run directory keeps its checkpoint header's own copy of the config; nothing else names
  // the directory, so a rename is all it takes.
  fs::remove_all(best);
  fs::rename(tmp, best);
  return r.final_metrics.contains("baseline") ? r.final_metrics["baseline"] : json();
}

// Checks the search, opens (or reopens) its output directory and state, and counts the planned
// epochs for the progress lines.
void Search::start() {
  if (spec_.max_trials <= 0 && spec_.max_minutes <= 0)
    throw ConfigError("trials", "give a budget: --trials N and/or --minutes M");
  if (spec_.base.schedule == optim::ScheduleKind::kLinear ||
      spec_.base.schedule == optim::ScheduleKind::kCosine)
    throw ConfigError("schedule", std::string("a ") + optim::to_string(spec_.base.schedule) +
                                      " schedule depends on the total epochs, which differ per trial; use "
                                      "--schedule constant or plateau while searching");
  for (const auto& d : spec_.space)
    if (train_settings().find(d.key) == nullptr)
      throw ConfigError(d.key, "searched setting is not a training setting");
  validate(spec_.base);
  sampler_.reseed(spec_.base.seed);
  install_interrupt_handlers();
  reset_interrupt();
  if (group_.rank() == 0) {
    std::error_code ec;
    if (fs::exists(spec_.out, ec) && !fs::exists(spec_.out / "hone-state.json", ec) &&
        !(fs::is_directory(spec_.out, ec) && fs::is_empty(spec_.out, ec)))
      throw ConfigError("out",
                        spec_.out.string() +
                            " already exists, is not empty and holds no hone-state.json; choose a new --out");
    fs::create_directories(spec_.out);
  }
  if (group_.size() > 1) claims_ = std::make_unique<RankClaims>(group_, spec_.out);  // collective
  load_state();
  save_state();  // from here on a rerun of the same command continues this search
  if (spec_.max_trials > 0)
    for (std::size_t k = 0;; ++k) {
      const auto p = plan(k);
      if (!p) break;
      units_total_ += p->units();
    }
}

// Trains trial `id` to rung `rung` of bracket `p` (or takes its saved outcome) and records the
// outcome in the trial. Returns false when the search must stop here: the minute budget ran out,
// Ctrl-C came, or (MPI) the ranks stopped before training it; `result` says which.
bool Search::settle_trial(int id, const PlannedBracket& p, std::size_t rung, const Spread& spread,
                          HoneResult& result) {
  const int target = p.bracket.rungs[rung].epochs;
  const int prev = rung == 0 ? 0 : p.bracket.rungs[rung - 1].epochs;
  HoneTrial& t = trial(id);
  t.iteration = p.iteration;
  t.bracket = p.bracket.s;
  const auto key = std::make_pair(id, static_cast<int>(rung));
  auto it = done_.find(key);
  const bool cached = it != done_.end();
  if (!cached && claims_) {
    // The ranks trained every trial of this rung unless the budget or Ctrl-C stopped them.
    if (!spread.budget_exhausted && !spread.interrupted)
      throw Error("hone: trial " + std::to_string(id) + " has no outcome after its rung was shared out");
    result.budget_exhausted = spread.budget_exhausted;
    result.interrupted = spread.interrupted;
    return false;
  }
  if (!cached) {
    if (spec_.max_minutes > 0 && elapsed() >= spec_.max_minutes * 60.0) {
      result.budget_exhausted = true;
      return false;
    }
    const auto start = std::chrono::steady_clock::now();
    bool interrupted = false;
    const RungOutcome o = run_rung(t, target, interrupted);
    if (interrupted || interrupt_requested()) {
      if (!interrupted) done_[key] = o;
      save_state();
      result.interrupted = true;
      return false;
    }
    it = done_.emplace(key, o).first;
    save_state();
    units_trained_this_session_ += target - prev;
    seconds_trained_this_session_ +=
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  }
  const RungOutcome& o = it->second;
  t.epochs = o.epochs;
  t.score = o.score;
  t.network_score = o.network_score;
  t.stopped_early = o.stopped_early;
  t.finished = o.finished;
  t.rung = static_cast<int>(rung);
  // Counted for promotions only: a first rung cut by Ctrl-C also continues its resume.bin,
  // but whether that happened depends on when the signal came.
  t.rungs_continued += rung > 0 && o.continued ? 1 : 0;
  units_done_ += target - prev;
  note_progress(t, p, static_cast<int>(rung), cached && spread.trained.count(id) == 0);
  return true;
}

// Trains every survivor `alive` of bracket `p` to rung `rung` (shared out over the ranks of an
// MPI job first). Returns false when the search must stop (see settle_trial).
bool Search::train_rung(const PlannedBracket& p, std::size_t rung, const std::vector<int>& alive,
                        HoneResult& result) {
  Spread spread;
  if (claims_) {
    const int target = p.bracket.rungs[rung].epochs;
    const int prev = rung == 0 ? 0 : p.bracket.rungs[rung - 1].epochs;
    spread = train_rung_across_ranks(alive, static_cast<int>(rung), target, prev);
  }
  for (const int id : alive)
    if (!settle_trial(id, p, rung, spread, result)) return false;
  return true;
}

HoneResult Search::run() {
  start();
  HoneResult result;
  bool stop = false;
  for (std::size_t k = 0; !stop; ++k) {
    const auto p = plan(k);
    if (!p) break;
    // Successive halving (Jamieson & Talwalkar 2016, Algorithm 1): train every survivor to the
    // rung's epochs, keep the best 1/eta of them (at least one), repeat.
    std::vector<int> alive;
    for (int i = 0; i < p->bracket.rungs[0].trials; ++i) alive.push_back(p->first_trial + i);
    for (std::size_t rung = 0; rung < p->bracket.rungs.size() && !stop; ++rung) {
      stop = !train_rung(*p, rung, alive, result);
      if (stop) break;
      // Keep the best floor(n_i / eta) for the next rung (its planned count, at least one).
      if (rung + 1 < p->bracket.rungs.size()) {
        std::vector<int> ranked = alive;
        std::sort(ranked.begin(), ranked.end(), [&](int a, int b) { return better(trial(a), trial(b)); });
        ranked.resize(std::min(ranked.size(), static_cast<std::size_t>(p->bracket.rungs[rung + 1].trials)));
        alive = ranked;
      }
    }
  }
  return finish(std::move(result));
}

// The trials that ran, the best of them, and (rank 0 of a finished search) the best run and
// hone.json.
HoneResult Search::finish(HoneResult result) {
  result.metric = metric_;
  result.seconds = elapsed();
  for (const auto& t : trials_)
    if (t.rung >= 0) result.trials.push_back(t);
  // The best score seen at any rung (Li et al. return the configuration with the best
  // intermediate loss seen so far).
  for (std::size_t i = 0; i < result.trials.size(); ++i)
    if (!result.best || better(result.trials[i], result.trials[static_cast<std::size_t>(*result.best)]))
      result.best = static_cast<int>(i);
  if (claims_) claims_->finish();  // collective: every rank is done training
  if (result.interrupted || group_.rank() != 0) return result;
  if (result.best) result.baseline = write_best(result.trials[static_cast<std::size_t>(*result.best)].id);
  write_file_atomic(spec_.out / "hone.json", result.to_json(spec_).dump(2) + "\n");
  return result;
}

// Trains the rung's trials that have no outcome yet on the ranks of an MPI job: each rank claims
// the next unclaimed (trial, rung), trains it alone, and at the end every rank receives every
// outcome (and whether any rank ran out of minutes or was interrupted), so all ranks go on with the
// same outcomes: the promotions are those of one process.
Search::Spread Search::train_rung_across_ranks(const std::vector<int>& alive, int rung, int target,
                                               int prev) {
  const auto start = std::chrono::steady_clock::now();
  Spread mine;
  json outcomes = json::array();
  for (const int id : alive) {
    if (done_.count({id, rung}) != 0) continue;
    if (spec_.max_minutes > 0 && elapsed() >= spec_.max_minutes * 60.0) {
      mine.budget_exhausted = true;
      break;
    }
    if (!claims_->claim("t" + std::to_string(id) + "-r" + std::to_string(rung))) continue;
    if (spec_.progress) {
      std::fprintf(spec_.progress, "hone: rank %d trains trial %d (rung %d, to %d epochs)\n", group_.rank(),
                   id, rung + 1, target);
      std::fflush(spec_.progress);
    }
    bool interrupted = false;
    const RungOutcome o = run_rung(trial(id), target, interrupted);
    if (interrupted || interrupt_requested()) {
      if (!interrupted) outcomes.push_back(outcome_to_json(id, rung, o));
      mine.interrupted = true;
      break;
    }
    outcomes.push_back(outcome_to_json(id, rung, o));
  }
  const json report{{"outcomes", outcomes},
                    {"metric", metric_},
                    {"budget_exhausted", mine.budget_exhausted},
                    {"interrupted", mine.interrupted}};
  Spread all;
  for (const std::string& text : all_gather_strings(group_, report.dump())) {
    const json r = json::parse(text);
    for (const auto& o : r.at("outcomes")) {
      done_[{o.at("trial").get<int>(), o.at("rung").get<int>()}] = outcome_from_json(o);
      all.trained.insert(o.at("trial").get<int>());
      units_trained_this_session_ += target - prev;
    }
    if (metric_.empty()) metric_ = r.at("metric").get<std::string>();
    all.budget_exhausted = all.budget_exhausted || r.at("budget_exhausted").get<bool>();
    all.interrupted = all.interrupted || r.at("interrupted").get<bool>();
  }
  seconds_trained_this_session_ +=
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  save_state();
  return all;
}

}  // namespace

json HoneResult::to_json(const HoneSpec& spec) const {
  json trials_json = json::array();
  for (const auto& t : trials)
    trials_json.push_back({{"id", t.id},
                           {"iteration", t.iteration},
                           {"bracket", t.bracket},
                           {"settings", t.settings},
                           {"defaults", t.defaults},
                           {"epochs", t.epochs},
                           {"rung", t.rung},
                           {"dev_" + metric, t.score},
                           {"network_dev_" + metric, t.network_score},
                           {"stopped_early", t.stopped_early},
                           {"finished", t.finished},
                           {"rungs_continued", t.rungs_continued}});
  json j{{"format", "gyre-hone"},
         {"version", 1},
         {"metric", metric},
         {"max_epochs", spec.max_epochs},
         {"keep_one_in", spec.eta},
         {"max_trials", spec.max_trials},
         {"max_minutes", spec.max_minutes},
         {"seed", spec.base.seed},
         {"seconds", seconds},
         {"budget_exhausted", budget_exhausted},
         {"trials", trials_json},
         {"baseline", baseline}};
  if (best) {
    j["best"] = {{"trial", trials[static_cast<std::size_t>(*best)].id},
                 {"run", (spec.out / "best").string()},
                 {"settings", trials[static_cast<std::size_t>(*best)].settings},
                 {"epochs", trials[static_cast<std::size_t>(*best)].epochs},
                 {"dev_" + metric, trials[static_cast<std::size_t>(*best)].score}};
  }
  return j;
}

HoneResult run_hone(const HoneSpec& spec) {
  return Search(spec).run();
}

std::string hone_table(const HoneResult& result, std::size_t rows) {
  std::vector<std::size_t> order(result.trials.size());
  for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
  const bool lower = !result.metric.empty() && metric_from_string(result.metric) == Metric::kLoss;
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    const HoneTrial &ta = result.trials[a], &tb = result.trials[b];
    if (ta.score != tb.score) return lower ? ta.score < tb.score : ta.score > tb.score;
    return lower ? ta.network_score < tb.network_score : ta.network_score > tb.network_score;
  });
  std::ostringstream out;
  char buf[256];
  std::snprintf(buf, sizeof buf, "%-6s %-8s %-7s %-12s %-8s  %s\n", "trial", "bracket", "epochs",
                ("dev " + result.metric).c_str(), "network", "settings");
  out << buf;
  for (std::size_t k = 0; k < order.size() && k < rows; ++k) {
    const HoneTrial& t = result.trials[order[k]];
    std::snprintf(buf, sizeof buf, "%-6s %-8d %-7s %-12.4f %-8.4f  %s\n",
                  (std::to_string(t.id) +
                   (result.best && static_cast<std::size_t>(*result.best) == order[k] ? "*" : ""))
                      .c_str(),
                  t.bracket, (std::to_string(t.epochs) + (t.stopped_early ? "e" : "")).c_str(), t.score,
                  t.network_score, ((t.defaults ? "(defaults) " : "") + settings_text(t.settings)).c_str());
    out << buf;
  }
  if (order.size() > rows) out << "(" << order.size() - rows << " more in hone.json)\n";
  return out.str();
}

}  // namespace gyre::train
