#include "gyre/train/compare.hpp"

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <map>
#include <optional>
#include <sstream>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/core/version.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/process_group.hpp"
#include "gyre/train/progress.hpp"
#include "gyre/train/trainer.hpp"

namespace gyre::train {
namespace {

namespace fs = std::filesystem;
using nlohmann::json;

std::string config_name(const std::string& cell, int hidden) {
  return cell + "-h" + std::to_string(hidden);
}

json summary_json(const eval::SampleSummary& s, const std::vector<double>& values) {
  return json{{"mean", s.mean}, {"std", s.std}, {"count", s.count}, {"values", values}};
}

struct LogTotals {
  int epochs = 0;
  double seconds = 0.0;
  double tokens_per_second = 0.0;
  std::vector<json> dev;  // each epoch's dev summary
};

// Sums log.jsonl of a finished run: one JSON object per epoch.
LogTotals read_log(const fs::path& run_dir) {
  const fs::path path = run_dir / "log.jsonl";
  std::istringstream in(read_file(path));
  LogTotals t;
  std::string line;
  std::size_t line_no = 0;
  while (std::getline(in, line)) {
    ++line_no;
    if (line.empty()) continue;
    json j;
    try {
      j = json::parse(line);
    } catch (const json::parse_error& e) {
      throw ParseError(path.string(), line_no, std::string("not valid JSON: ") + e.what());
    }
    if (!j.is_object() || !j.contains("seconds") || !j["seconds"].is_number())
      throw ParseError(path.string(), line_no, "expected an epoch object with \"seconds\"");
    ++t.epochs;
    t.seconds += j["seconds"].get<double>();
    t.dev.push_back(j.contains("dev") ? j["dev"] : json(nullptr));
    if (j.contains("tokens_per_second") && j["tokens_per_second"].is_number())
      t.tokens_per_second += j["tokens_per_second"].get<double>();
  }
  if (t.epochs > 0) t.tokens_per_second /= t.epochs;
  return t;
}

// What a compare run was trained from: the requested configuration (cell, size and seed set;
// "auto" settings as requested, so they resolve the same way again), fingerprints of the data
// files' contents and the gyre version. Written as OUT/<run>/compare-run.json when the run
// finishes; a later compare reuses the run only when all three match.
constexpr const char* kRunRecord = "compare-run.json";

// 64-bit FNV-1a (gyre::stable_hash) of a file's bytes, as 16 hex digits.
std::string content_fingerprint(const std::string& path) {
  const std::string bytes = read_file(path);
  char buf[24];
  std::snprintf(buf, sizeof buf, "%016llx",
                static_cast<unsigned long long>(stable_hash(bytes.data(), bytes.size())));
  return buf;
}

json run_record(const TrainConfig& c, const json& fingerprints) {
  json config = config_to_json(c);
  // The files are identified by their contents (below), not by how their paths were spelt.
  config.erase("train");
  config.erase("dev");
  return json{{"format", "gyre-compare-run"},
              {"version", 1},
              {"gyre_version", std::string(gyre::version())},
              {"config", config},
              {"data", fingerprints}};
}

json data_fingerprints(const CompareSpec& spec) {
  json d;
  d["train"] = content_fingerprint(spec.base.train);
  d["dev"] = content_fingerprint(spec.base.dev);
  d["test"] = spec.test.empty() ? json(nullptr) : json(content_fingerprint(spec.test));
  d["pretrained_embeddings"] = spec.base.pretrained_embeddings.empty()
                                   ? json(nullptr)
                                   : json(content_fingerprint(spec.base.pretrained_embeddings));
  return d;
}

std::string short_value(const json& v) {
  if (v.is_null()) return "none";
  std::string s = value_text(v);
  if (s.size() > 40) s = s.substr(0, 37) + "...";
  return s;
}

// Why the finished run recorded in `old` cannot stand for `wanted`: "" when it can, otherwise
// every difference in plain words ("--epochs 1 -> 3, --layers 1 -> 2").
std::string record_difference(const json& old, const json& wanted) {
  if (!old.is_object() || old.value("format", "") != "gyre-compare-run")
    return "it has no readable " + std::string(kRunRecord) + " (trained by hand or by an older gyre)";
  std::vector<std::string> diffs;
  if (old.value("gyre_version", "") != wanted["gyre_version"].get<std::string>())
    diffs.push_back("trained by gyre " + old.value("gyre_version", std::string("?")) + ", this is gyre " +
                    wanted["gyre_version"].get<std::string>());
  const json& oc = old.contains("config") ? old["config"] : json::object();
  const json& wc = wanted["config"];
  for (const auto& [key, value] : wc.items()) {
    std::string option = "--" + key;
    std::replace(option.begin(), option.end(), '_', '-');
    if (!oc.contains(key))
      diffs.push_back(option + " (not recorded) -> " + short_value(value));
    else if (oc[key] != value)
      diffs.push_back(option + " " + short_value(oc[key]) + " -> " + short_value(value));
  }
  for (const auto& [key, value] : oc.items())
    if (!wc.contains(key)) diffs.push_back("setting '" + key + "' no longer exists");
  const json& od = old.contains("data") ? old["data"] : json::object();
  for (const auto& [key, value] : wanted["data"].items())
    if (!od.contains(key) || od[key] != value) diffs.push_back(key + " file contents differ");
  std::string out;
  for (const auto& d : diffs) out += (out.empty() ? "" : ", ") + d;
  return out;
}

// The state of OUT/<run>: nothing there, a finished run trained from `wanted` (reusable), or a
// finished run trained from something else (`why` says what differs). A directory holding an
// unfinished or unrecognised run is refused (ConfigError): compare never deletes what it did not
// write.
enum class RunState { kAbsent, kReusable, kStale };
RunState run_state(const fs::path& dir, const std::string& cell, int hidden, std::uint64_t seed,
                   const json& wanted, std::string& why) {
  std::error_code ec;
  if (!fs::exists(dir, ec) || fs::is_empty(dir, ec)) return RunState::kAbsent;
  if (!fs::exists(dir / "metrics.json", ec))
    throw ConfigError(
        "out", dir.string() + " holds an unfinished run; finish it with `gyre train --resume` or delete it");
  json c;
  try {
    c = json::parse(read_file(dir / "config.json"));
  } catch (const json::parse_error& e) {
    throw ParseError((dir / "config.json").string(), 0, std::string("not valid JSON: ") + e.what());
  }
  const bool same = c.is_object() && c.value("cell", "") == cell && c.value("hidden_size", 0) == hidden &&
                    c.value("seed", std::uint64_t{0}) == seed;
  if (!same)
    throw ConfigError("out", dir.string() +
                                 " holds a run of another cell, hidden_size or seed than its name says; "
                                 "use another --out or delete it");
  json old;
  if (fs::exists(dir / kRunRecord, ec)) {
    try {
      old = json::parse(read_file(dir / kRunRecord));
    } catch (const json::parse_error&) {
      old = nullptr;
    }
  }
  why = record_difference(old, wanted);
  return why.empty() ? RunState::kReusable : RunState::kStale;
}

// Trains one run into a scratch directory beside its place and swaps it in only when it has
// finished, so an interrupted retraining leaves the previous run as it was.
TrainResult train_into(const fs::path& dir, const TrainConfig& c, const json& record, std::FILE* progress) {
  const fs::path scratch = dir.parent_path() / ("." + dir.filename().string() + ".training");
  const fs::path old = dir.parent_path() / ("." + dir.filename().string() + ".replaced");
  std::error_code ec;
  fs::remove_all(scratch, ec);  // left by an interrupted compare: ours, never finished
  TrainOptions options;
  options.out = scratch;
  // The run's own progress: redrawn in place on a terminal, plain lines every few seconds in a log.
  options.quiet = progress == nullptr;
  options.progress = progress ? progress : stderr;
  options.group = &local_group();  // a compare run trains on one process, also inside an MPI job
  TrainResult tr = train(c, options);
  if (tr.outcome == TrainOutcome::kInterrupted) return tr;
  write_file_atomic(scratch / kRunRecord, record.dump(2) + "\n");
  fs::remove_all(old, ec);
  if (fs::exists(dir)) fs::rename(dir, old);
  fs::rename(scratch, dir);
  fs::remove_all(old, ec);
  return tr;
}

std::string resolve_metric(const std::string& wanted, const model::ModelSpec& spec) {
  if (wanted != "auto") return wanted;
  if (spec.task == data::Task::kTag) return "span_f1";
  return spec.output == model::OutputKind::kSigmoid ? "macro_f1" : "accuracy";
}

std::vector<std::uint8_t> correctness(const EvaluationResult& r,
                                      const std::vector<data::EncodedExample>& encoded, data::Task task) {
  std::vector<std::uint8_t> out(encoded.size());
  for (std::size_t i = 0; i < encoded.size(); ++i) {
    const auto& p = r.predictions[i];
    out[i] = (task == data::Task::kClassify ? p.labels == encoded[i].targets : p.tags == encoded[i].targets)
                 ? 1
                 : 0;
  }
  return out;
}

std::vector<data::EncodedExample> encode_all(const std::vector<data::Example>& examples,
                                             const io::TrainedModel& m, const std::string& path) {
  data::Encoder encoder(m.vocab, m.spec.task);
  encoder.set_ngram_part(&m.ngram_part);
  std::vector<data::EncodedExample> out;
  out.reserve(examples.size());
  for (const auto& ex : examples) out.push_back(encoder.encode(ex, path));
  return out;
}

// The metric the head-to-head resamples: the compare metric, except that a loss ranking is
// compared on accuracy (token accuracy for taggers), which has per-example counts.
std::string head_to_head_metric(const std::string& metric, data::Task task) {
  if (metric != "loss") return metric;
  return task == data::Task::kTag ? "token_accuracy" : "accuracy";
}

// Per-example additive counts of `metric` (gyre/eval/significance.hpp, ExampleCounts): the
// metric of any resample of examples is a function of the column sums.
//   accuracy        [exact match, 1]
//   token_accuracy  [right tokens, tokens]
//   span_f1         [tp, fp, fn] over spans (CoNLL-2000 rules, as eval::TaggingScorer)
//   macro_f1        [tp, fp, fn] per label
eval::ExampleCounts example_counts(const EvaluationResult& r,
                                   const std::vector<data::EncodedExample>& encoded,
                                   const model::ModelSpec& spec, const std::string& metric) {
  eval::ExampleCounts c;
  const std::size_t n = encoded.size();
  if (metric == "accuracy" && r.task == data::Task::kClassify) {
    c.width = 2;
    for (std::size_t i = 0; i < n; ++i) {
      c.values.push_back(r.predictions[i].labels == encoded[i].targets ? 1.0 : 0.0);
      c.values.push_back(1.0);
    }
  } else if (metric == "accuracy" || metric == "token_accuracy") {
    c.width = 2;
    for (std::size_t i = 0; i < n; ++i) {
      double right = 0.0;
      for (std::size_t t = 0; t < encoded[i].targets.size(); ++t)
        right += r.predictions[i].tags[t] == encoded[i].targets[t] ? 1.0 : 0.0;
      c.values.push_back(right);
      c.values.push_back(static_cast<double>(encoded[i].targets.size()));
    }
  } else if (metric == "span_f1") {
    c.width = 3;
    std::vector<std::string> gold, predicted;
    for (std::size_t i = 0; i < n; ++i) {
      gold.clear();
      predicted.clear();
      for (std::size_t t = 0; t < encoded[i].targets.size(); ++t) {
        gold.push_back(spec.labels[static_cast<std::size_t>(encoded[i].targets[t])]);
        predicted.push_back(spec.labels[static_cast<std::size_t>(r.predictions[i].tags[t])]);
      }
      eval::TaggingScorer one;
      one.add(gold, predicted);
      const auto m = one.metrics();
      c.values.push_back(static_cast<double>(m.correct_spans));
      c.values.push_back(static_cast<double>(m.predicted_spans - m.correct_spans));
      c.values.push_back(static_cast<double>(m.gold_spans - m.correct_spans));
    }
  } else if (metric == "macro_f1") {
    const std::size_t labels = spec.labels.size();
    c.width = 3 * labels;
    c.values.assign(n * c.width, 0.0);
    for (std::size_t i = 0; i < n; ++i) {
      std::vector<std::uint8_t> gold(labels, 0), predicted(labels, 0);
      for (const auto l : encoded[i].targets) gold[static_cast<std::size_t>(l)] = 1;
      for (const auto l : r.predictions[i].labels) predicted[static_cast<std::size_t>(l)] = 1;
      double* row = c.values.data() + i * c.width;
      for (std::size_t l = 0; l < labels; ++l) {
        row[3 * l] += gold[l] && predicted[l];
        row[3 * l + 1] += !gold[l] && predicted[l];
        row[3 * l + 2] += gold[l] && !predicted[l];
      }
    }
  } else {
    throw ConfigError("metric", "no per-example counts for '" + metric + "'");
  }
  return c;
}

// The metric as a function of summed counts (the same definitions as gyre/eval; zero division
// gives 0). Single-label macro F1 averages over the labels seen in gold or predictions,
// multi-label over all labels (DEVELOPERS.md, evaluation conventions).
eval::CountMetric count_metric(const std::string& metric, bool multi_label) {
  if (metric == "accuracy" || metric == "token_accuracy")
    return [](std::span<const double> s) { return s[1] > 0 ? s[0] / s[1] : 0.0; };
  if (metric == "span_f1")
    return [](std::span<const double> s) {
      const double d = 2 * s[0] + s[1] + s[2];
      return d > 0 ? 2 * s[0] / d : 0.0;
    };
  return [multi_label](std::span<const double> s) {
    double sum = 0.0;
    std::size_t used = 0;
    for (std::size_t l = 0; l + 2 < s.size(); l += 3) {
      const double d = 2 * s[l] + s[l + 1] + s[l + 2];
      if (!multi_label && d == 0) continue;  // label in neither gold nor predictions
      sum += d > 0 ? 2 * s[l] / d : 0.0;
      ++used;
    }
    return used ? sum / static_cast<double>(used) : 0.0;
  };
}

std::string config_label(const CompareConfig& c) {
  std::string cell = c.cell;
  for (auto& ch : cell) ch = static_cast<char>(std::toupper(static_cast<unsigned char>(ch)));
  return cell + " h" + std::to_string(c.hidden_size);
}

std::string pretty_metric(const std::string& metric) {
  if (metric == "macro_f1") return "macro F1";
  if (metric == "span_f1") return "span F1";
  if (metric == "token_accuracy") return "token accuracy";
  return metric;
}

// "1.2" for a share shown in points, "0.0123" otherwise.
std::string amount(double v, bool points) {
  char buf[32];
  std::snprintf(buf, sizeof buf, points ? "%.1f" : "%.4f", points ? 100.0 * v : v);
  return buf;
}

// Median milliseconds per text of the int8 model in the embedded runtime, batch 1, over the dev
// texts (at most 200 of them, repeated until about 0.3 s have passed), after one warm-up pass.
double runtime_latency_ms(const fs::path& model_path, const std::vector<data::EncodedExample>& texts,
                          double& mean_tokens) {
  const runtime::Model model = runtime::Model::load(model_path.string());
  runtime::Context ctx(model);
  const bool classify = model.architecture().task == runtime::Task::kClassify;
  const std::size_t count = std::min<std::size_t>(texts.size(), 200);
  std::vector<std::vector<std::uint32_t>> ids(count);
  double tokens = 0.0;
  for (std::size_t i = 0; i < count; ++i) {
    for (const auto id : texts[i].ids) ids[i].push_back(static_cast<std::uint32_t>(id));
    tokens += static_cast<double>(ids[i].size());
  }
  mean_tokens = count ? tokens / static_cast<double>(count) : 0.0;
  // A model with a character encoder reads each token's characters too (from the encoded text).
  const bool chars = model.architecture().has_char_encoder();
  // A classifier with an n-gram part reads the words too (the encoder keeps them for such a model).
  const bool ngram = model.architecture().has_ngram_part();
  for (std::size_t i = 0; ngram && i < count; ++i) {
    GYRE_CHECK(texts[i].words.size() == texts[i].ids.size(),
               "compare: the dev texts of a model with an n-gram part must carry their words");
  }
  auto infer_one = [&](std::size_t i) {
    const auto& x = ids[i];
    const Span<const std::uint32_t> xs(x.data(), x.size());
    if (ngram)
      ctx.classify_ids(xs, texts[i].char_ids, texts[i].char_offsets, texts[i].words);
    else if (chars && classify)
      ctx.classify_ids(xs, texts[i].char_ids, texts[i].char_offsets);
    else if (chars)
      ctx.tag_ids(xs, texts[i].char_ids, texts[i].char_offsets);
    else if (classify)
      ctx.classify_ids(xs);
    else
      ctx.tag_ids(xs);
  };
  for (std::size_t i = 0; i < count; ++i) infer_one(i);  // warm-up: buffers sized, caches hot
  std::vector<double> ms;
  using Clock = std::chrono::steady_clock;
  const auto start = Clock::now();
  do {
    for (std::size_t i = 0; i < count; ++i) {
      const auto t0 = Clock::now();
      infer_one(i);
      ms.push_back(std::chrono::duration<double, std::milli>(Clock::now() - t0).count());
    }
  } while (Clock::now() - start < std::chrono::milliseconds(300) && ms.size() < 100000);
  std::sort(ms.begin(), ms.end());
  return ms.empty() ? 0.0 : ms[ms.size() / 2];
}

}  // namespace

void summarize_runs(CompareResult& result, bool lower_is_better) {
  GYRE_CHECK(!result.configs.empty(), "compare needs at least one configuration");
  for (auto& c : result.configs) {
    std::vector<double> dev, test, seconds, speed;
    for (const auto i : c.runs) {
      const auto& r = result.runs.at(i);
      dev.push_back(r.dev_metric);
      if (r.test_metric) test.push_back(*r.test_metric);
      seconds.push_back(r.train_seconds);
      speed.push_back(r.tokens_per_second);
      c.parameters = r.parameters;
      c.model_bytes = r.model_bytes;
      c.int8_bytes = r.int8_bytes;
    }
    c.dev = eval::summarize(dev);
    c.test.reset();
    if (!test.empty()) c.test = eval::summarize(test);
    c.train_seconds = eval::summarize(seconds);
    c.tokens_per_second = eval::summarize(speed);
  }
  result.best = 0;
  for (std::size_t i = 1; i < result.configs.size(); ++i) {
    const double cand = result.configs[i].dev.mean, best = result.configs[result.best].dev.mean;
    if (lower_is_better ? cand < best : cand > best) result.best = i;
  }
}

void mark_pareto_front(CompareResult& result) {
  const bool lower = result.metric == "loss";
  auto score = [&](const CompareConfig& c) {
    const double v = c.test ? c.test->mean : c.dev.mean;
    return lower ? -v : v;  // higher is better from here on
  };
  for (auto& c : result.configs) {
    c.pareto = true;
    for (const auto& o : result.configs) {
      if (&o == &c) continue;
      const bool no_worse = score(o) >= score(c) && o.latency_ms <= c.latency_ms;
      const bool better = score(o) > score(c) || o.latency_ms < c.latency_ms;
      if (no_worse && better) {
        c.pareto = false;
        break;
      }
    }
  }
}

namespace {

// The head-to-head's verdict in words, in the metric's own direction (loss: lower is better): who
// is ahead by how much, the interval and budget, and how many seeds would settle it.
std::string verdict_text(const HeadToHead& h) {
  const double diff = h.interval.difference;
  const bool lower_better = h.metric == "loss";
  const bool a_better = lower_better ? diff < 0 : diff > 0;
  const std::string& winner = a_better ? h.label_a : h.label_b;
  const std::string& loser = a_better ? h.label_b : h.label_a;
  const double lo = a_better ? h.interval.low : -h.interval.high;
  const double hi = a_better ? h.interval.high : -h.interval.low;
  const double gap = std::fabs(diff);
  const std::string what = (h.points ? " points of " : " of ") + h.set + " " + pretty_metric(h.metric);
  char budget[160];
  std::snprintf(budget, sizeof budget, "95%% interval %s to %s; %zu seed%s x %zu examples",
                amount(lower_better ? -hi : lo, h.points).c_str(),
                amount(lower_better ? -lo : hi, h.points).c_str(), std::min(h.seeds_a, h.seeds_b),
                std::min(h.seeds_a, h.seeds_b) == 1 ? "" : "s", h.examples);
  std::string seeds_text;
  if (h.seeds_needed > 1000)
    seeds_text = "more than 1000 seeds per configuration would be needed to detect a difference of this size";
  else if (h.seeds_needed > 0)
    seeds_text = "about " + std::to_string(h.seeds_needed) +
                 " seeds per configuration would detect a difference of this size reliably";
  else if (h.seeds_a < 2 || h.seeds_b < 2)
    seeds_text = "with one seed the number of seeds needed cannot be estimated";
  else
    seeds_text = "the mean scores are equal: no number of seeds per configuration would detect a difference";
  std::string verdict;
  if (h.detected) {
    verdict = winner + " beats " + loser + " by " + amount(gap, h.points) + what + " (" + budget + ")";
  } else if (gap > 0) {
    verdict = "no difference detectable at this budget: " + winner + " is ahead of " + loser + " by " +
              amount(gap, h.points) + what + " (" + budget + ")";
  } else {
    verdict = "no difference detectable at this budget: " + h.label_a + " and " + h.label_b +
              " have the same " + h.set + " " + pretty_metric(h.metric) + " (" + budget + ")";
  }
  if (!seeds_text.empty()) verdict += "; " + seeds_text;
  return verdict;
}

// Warnings that qualify the verdict: an unconfirmed permutation test, dev scores, one seed.
void add_notes(HeadToHead& h) {
  char line[320];
  if (h.detected && std::min(h.seeds_a, h.seeds_b) >= 2 && h.permutation.p_value > 0.05) {
    std::snprintf(
        line, sizeof line,
        "the permutation test over the per-seed scores does not confirm it (p = %.3g; with %zu + %zu seeds "
        "p cannot go below %.3g)",
        h.permutation.p_value, h.seeds_a, h.seeds_b, 2.0 / static_cast<double>(h.permutation.relabellings));
    h.notes.push_back(line);
  }
  if (h.set == "dev")
    h.notes.push_back(
        "WARNING: no --test file, so these are dev scores: dev chose every run's best epoch and each cell's "
        "best configuration, so they are optimistic. Give --test FILE for an honest comparison.");
  if (std::min(h.seeds_a, h.seeds_b) == 1)
    h.notes.push_back(
        "NOTE: one seed per configuration: nothing can be said about seed-to-seed variation, which often "
        "decides LSTM-vs-GRU questions; the interval covers the choice of examples only. Use --seeds 3 or "
        "more.");
}

}  // namespace

HeadToHead head_to_head(const CompareResult& result, std::size_t ia, std::size_t ib, const std::string& set,
                        const std::string& metric, int bootstrap_samples) {
  const auto& ca = result.configs.at(ia);
  const auto& cb = result.configs.at(ib);
  HeadToHead h;
  h.a = ca.name;
  h.b = cb.name;
  h.label_a = config_label(ca);
  h.label_b = config_label(cb);
  h.set = set;
  h.metric = metric;
  h.points = metric != "loss";
  const bool multi_label = result.multi_label;
  const auto fn = count_metric(metric, multi_label);
  std::vector<eval::ExampleCounts> a, b;
  for (const auto i : ca.runs) a.push_back(result.runs.at(i).counts);
  for (const auto i : cb.runs) b.push_back(result.runs.at(i).counts);
  for (const auto& x : a) h.scores_a.push_back(eval::metric_of(x, fn));
  for (const auto& x : b) h.scores_b.push_back(eval::metric_of(x, fn));
  h.seeds_a = a.size();
  h.seeds_b = b.size();
  h.examples = a.empty() ? 0 : a.front().examples();
  h.summary_a = eval::summarize(h.scores_a);
  h.summary_b = eval::summarize(h.scores_b);
  h.interval = eval::hierarchical_bootstrap(a, b, fn, bootstrap_samples, 0.95, 1);
  h.permutation = eval::permutation_test(h.scores_a, h.scores_b);
  h.detected = h.interval.low > 0.0 || h.interval.high < 0.0;
  const double diff = h.interval.difference;
  if (h.seeds_a >= 2 && h.seeds_b >= 2)
    h.seeds_needed = eval::seeds_to_detect(diff, h.summary_a.std, h.summary_b.std);
  for (std::size_t k = 0; k < std::min(ca.runs.size(), cb.runs.size()); ++k) {
    const auto& ra = result.runs.at(ca.runs[k]);
    const auto& rb = result.runs.at(cb.runs[k]);
    h.per_seed.push_back({ra.seed, eval::mcnemar_exact(ra.correct, rb.correct)});
  }

  h.verdict = verdict_text(h);
  add_notes(h);
  return h;
}

namespace {

json run_json(const CompareRun& r) {
  return {{"name", r.name},
          {"config", r.config},
          {"cell", r.cell},
          {"hidden_size", r.hidden_size},
          {"seed", r.seed},
          {"dir", r.name},
          {"reused", r.reused},
          {"trained_by_rank", r.trained_by_rank < 0 ? json(nullptr) : json(r.trained_by_rank)},
          {"retrained_because", r.retrain_reason.empty() ? json(nullptr) : json(r.retrain_reason)},
          {"parameters", r.parameters},
          {"model_bytes", r.model_bytes},
          {"int8_bytes", r.int8_bytes},
          {"epochs", r.epochs},
          {"dev_curve", r.dev_curve},
          {"train_seconds", r.train_seconds},
          {"tokens_per_second", r.tokens_per_second},
          {"dev_metric", r.dev_metric},
          {"test_metric", r.test_metric ? json(*r.test_metric) : json(nullptr)},
          {"dev_scores", r.dev},
          {"test_scores", r.test}};
}

// One configuration with the summaries of its runs (`runs`: all runs of the grid).
json config_json(const CompareConfig& c, const std::vector<CompareRun>& runs) {
  std::vector<double> dev, test, seconds, speed;
  std::vector<std::string> names;
  for (const auto i : c.runs) {
    dev.push_back(runs[i].dev_metric);
    if (runs[i].test_metric) test.push_back(*runs[i].test_metric);
    seconds.push_back(runs[i].train_seconds);
    speed.push_back(runs[i].tokens_per_second);
    names.push_back(runs[i].name);
  }
  return {{"name", c.name},
          {"cell", c.cell},
          {"hidden_size", c.hidden_size},
          {"parameters", c.parameters},
          {"model_bytes", c.model_bytes},
          {"int8_bytes", c.int8_bytes},
          {"latency_ms", c.latency_ms},
          {"latency_tokens", c.latency_tokens},
          {"pareto", c.pareto},
          {"runs", names},
          {"dev", summary_json(c.dev, dev)},
          {"test", c.test ? summary_json(*c.test, test) : json(nullptr)},
          {"train_seconds", summary_json(c.train_seconds, seconds)},
          {"tokens_per_second", summary_json(c.tokens_per_second, speed)}};
}

json head_to_head_json(const HeadToHead& h) {
  json seeds = json::array();
  for (const auto& m : h.per_seed)
    seeds.push_back({{"seed", m.seed},
                     {"only_a", m.test.only_a},
                     {"only_b", m.test.only_b},
                     {"p_value", m.test.p_value}});
  return {{"a", h.a},
          {"b", h.b},
          {"label_a", h.label_a},
          {"label_b", h.label_b},
          {"set", h.set},
          {"metric", h.metric},
          {"points", h.points},
          {"examples", h.examples},
          {"scores_a", h.scores_a},
          {"scores_b", h.scores_b},
          {"mean_a", h.summary_a.mean},
          {"std_a", h.summary_a.std},
          {"mean_b", h.summary_b.mean},
          {"std_b", h.summary_b.std},
          {"difference", h.interval.difference},
          {"two_level_bootstrap",
           {{"method", "resample runs of each configuration, then examples shared by all runs (percentile)"},
            {"level", h.interval.level},
            {"low", h.interval.low},
            {"high", h.interval.high},
            {"samples", h.interval.samples}}},
          {"permutation_test",
           {{"method", "two-sample permutation test of mean per-seed scores, two-sided"},
            {"p_value", h.permutation.p_value},
            {"exact", h.permutation.exact},
            {"relabellings", h.permutation.relabellings}}},
          {"detected", h.detected},
          {"seeds_needed", h.seeds_needed == 0 ? json(nullptr) : json(h.seeds_needed)},
          {"per_seed_mcnemar", seeds},
          {"verdict", h.verdict},
          {"notes", h.notes}};
}

}  // namespace

json CompareResult::to_json(const CompareSpec& spec) const {
  json j;
  j["format"] = "gyre-compare";
  j["version"] = 2;  // 2: "head_to_head" replaces "significance"
  j["metric"] = metric;
  j["train"] = spec.base.train;
  j["dev"] = spec.base.dev;
  j["test"] = spec.test.empty() ? json(nullptr) : json(spec.test);
  j["seeds"] = spec.seeds;
  j["cells"] = spec.cells;
  j["hidden_sizes"] = spec.hidden_sizes;
  json base = config_to_json(spec.base);
  for (const char* k : {"cell", "hidden_size", "seed"}) base.erase(k);
  j["shared_config"] = base;
  j["runs"] = json::array();
  for (const auto& r : runs) j["runs"].push_back(run_json(r));
  j["configs"] = json::array();
  for (const auto& c : configs) j["configs"].push_back(config_json(c, runs));
  j["best"] = configs.empty() ? json(nullptr) : json(configs[best].name);
  j["head_to_head"] = head_to_head ? head_to_head_json(*head_to_head) : json(nullptr);
  return j;
}

namespace {

// The settings of one run of the grid: the shared ones with this cell, size and seed.
TrainConfig run_config(const CompareSpec& spec, const std::string& cell, int hidden, std::uint64_t seed) {
  TrainConfig c = spec.base;
  c.cell = model::parse_cell(cell);
  c.hidden_size = hidden;
  c.seed = seed;
  return c;
}

// One run of the grid that a rank trained in this job, and why it was retrained (if it was).
struct TrainedHere {
  int rank = 0;
  std::string reason;
};

// Spreads the runs that need training over the ranks of an MPI job, dynamically: each rank walks
// the grid in order and claims the next run nobody has claimed (an exclusive create of
// OUT/.claims-<job>/<run>, so OUT must be on a filesystem every rank sees) and trains it on its
// own. Every rank returns the same map of the runs trained in this job.
std::map<std::string, TrainedHere> train_grid_across_ranks(const CompareSpec& spec, ProcessGroup& group,
                                                           const json& fingerprints) {
  RankClaims claims(group, spec.out);
  std::string mine;  // "name\treason\n" per run this rank trained
  const int total = static_cast<int>(spec.cells.size() * spec.hidden_sizes.size()) * spec.seeds;
  int index = 0;
  for (const auto& cell : spec.cells)
    for (const int hidden : spec.hidden_sizes)
      for (int s = 1; s <= spec.seeds; ++s) {
        ++index;
        const std::string name = config_name(cell, hidden) + "-s" + std::to_string(s);
        const TrainConfig c = run_config(spec, cell, hidden, static_cast<std::uint64_t>(s));
        const json record = run_record(c, fingerprints);
        std::string why;
        if (run_state(spec.out / name, cell, hidden, c.seed, record, why) == RunState::kReusable) continue;
        if (!claims.claim(name)) continue;  // another rank has it
        const auto start = std::chrono::steady_clock::now();
        if (!why.empty() && spec.messages) {
          std::fprintf(spec.messages, "gyre compare: rank %d retraining %s: %s\n", group.rank(), name.c_str(),
                       why.c_str());
          std::fflush(spec.messages);
        }
        if (spec.progress) {
          std::fprintf(spec.progress, "gyre compare: rank %d of %d trains run %d of %d: %s\n", group.rank(),
                       group.size(), index, total, name.c_str());
          std::fflush(spec.progress);
        }
        // Each run's own progress lines would interleave across ranks: the runs train quietly.
        const TrainResult tr = train_into(spec.out / name, c, record, nullptr);
        if (tr.outcome == TrainOutcome::kInterrupted)
          throw Error("interrupted during " + name +
                      "; finished runs are kept and reused by the next compare");
        if (spec.progress) {
          std::fprintf(
              spec.progress, "gyre compare: rank %d finished %s in %s\n", group.rank(), name.c_str(),
              format_duration(std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count())
                  .c_str());
          std::fflush(spec.progress);
        }
        mine += name + "\t" + why + "\n";
      }
  // Collective: returns when every rank has finished its runs.
  const std::vector<std::string> all = all_gather_strings(group, mine);
  std::map<std::string, TrainedHere> trained;
  for (int r = 0; r < group.size(); ++r) {
    std::istringstream lines(all[static_cast<std::size_t>(r)]);
    std::string line;
    while (std::getline(lines, line)) {
      const auto tab = line.find('\t');
      trained[line.substr(0, tab)] = TrainedHere{r, tab == std::string::npos ? "" : line.substr(tab + 1)};
    }
  }
  claims.finish();
  return trained;
}

// Refuses a grid that cannot be run, before anything is read or trained.
void check_compare_spec(const CompareSpec& spec) {
  if (spec.cells.empty()) throw ConfigError("cells", "give at least one cell (lstm, gru)");
  if (spec.hidden_sizes.empty()) throw ConfigError("hidden_sizes", "give at least one hidden size");
  if (spec.seeds < 1) throw ConfigError("seeds", "must be at least 1");
  if (spec.base.dev.empty())
    throw ConfigError("dev", "compare needs a --dev file so every run is scored on the same examples");
  if (spec.out.empty()) throw ConfigError("out", "give the output directory with --out DIR");
  {
    static const char* const kMetrics[] = {"auto",    "accuracy",       "macro_f1",
                                           "span_f1", "token_accuracy", "loss"};
    if (std::find(std::begin(kMetrics), std::end(kMetrics), spec.metric) == std::end(kMetrics))
      throw ConfigError(
          "metric",
          "'" + spec.metric + "' is not one of auto, accuracy, macro_f1, span_f1, token_accuracy, loss");
  }
  for (const auto& cell : spec.cells) {
    if (cell != "lstm" && cell != "gru")
      throw ConfigError("cells", "'" + cell + "' is not a cell (lstm, gru)");
    if (std::count(spec.cells.begin(), spec.cells.end(), cell) > 1)
      throw ConfigError("cells", "'" + cell + "' given twice");
  }
  for (const int h : spec.hidden_sizes) {
    if (h < 1) throw ConfigError("hidden_sizes", "sizes must be positive");
    if (std::count(spec.hidden_sizes.begin(), spec.hidden_sizes.end(), h) > 1)
      throw ConfigError("hidden_sizes", std::to_string(h) + " given twice");
  }
  TrainConfig probe = spec.base;
  validate(probe);
}

// The examples every run is scored on: dev, and test when given.
struct ScoringSets {
  std::vector<data::Example> dev, test;
  bool with_test = false;
};

// Reads the evaluation files once, before any training, so bad input fails fast.
ScoringSets read_scoring_sets(const CompareSpec& spec) {
  const data::ReadOptions reading = read_options(spec.base);
  ScoringSets sets;
  sets.dev = data::load_corpus(spec.base.dev, reading);
  if (sets.dev.empty()) throw ParseError(spec.base.dev, 0, "no examples in the file");
  if (!spec.test.empty()) {
    sets.test = data::load_corpus(spec.test, reading);
    if (sets.test.empty()) throw ParseError(spec.test, 0, "no examples in the file");
  }
  sets.with_test = !spec.test.empty();
  return sets;
}

// Where the grid is, for the progress lines: runs done, and how long the trained ones took.
struct GridClock {
  int total = 0;
  int done = 0;
  int trained_runs = 0;
  double trained_seconds = 0.0;
  std::chrono::steady_clock::time_point start = std::chrono::steady_clock::now();
};

double seconds_since(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

// Whether `run` (in `dir`) can be reused, with the reason it must be retrained otherwise, and which
// rank trains or trained it; says so when a stale run is retrained.
RunState settle_run(const CompareSpec& spec, CompareRun& run, const fs::path& dir, const json& record,
                    const std::map<std::string, TrainedHere>& trained_in_job, int rank) {
  std::string why;
  const RunState state = run_state(dir, run.cell, run.hidden_size, run.seed, record, why);
  run.reused = state == RunState::kReusable;
  if (const auto it = trained_in_job.find(run.name); it != trained_in_job.end()) {
    // Trained by a rank of this MPI job a moment ago: not a reuse.
    run.reused = false;
    run.trained_by_rank = it->second.rank;
    why = it->second.reason;
  } else if (!run.reused) {
    run.trained_by_rank = rank;
  }
  if (state == RunState::kStale && spec.messages) {
    std::fprintf(spec.messages, "gyre compare: retraining %s: %s\n", run.name.c_str(), why.c_str());
    std::fflush(spec.messages);
  }
  run.retrain_reason = why;
  return state;
}

// Trains `run` into `dir` (started at `start`), after a line saying where in the grid it is.
void train_run(const CompareSpec& spec, const CompareRun& run, const fs::path& dir, const TrainConfig& c,
               const json& record, GridClock& clock, std::chrono::steady_clock::time_point start) {
  if (spec.progress) {
    // The grid line: where in the grid we are, time so far and a rough time to go
    // (mean time of the runs trained so far x runs left; reused runs take no time).
    const double elapsed = seconds_since(clock.start);
    const std::string eta = clock.trained_runs > 0
                                ? "ETA " + format_duration(clock.trained_seconds / clock.trained_runs *
                                                           static_cast<double>(clock.total - clock.done))
                                : "ETA unknown until one run has trained";
    std::fprintf(spec.progress, "gyre compare: run %d of %d: %s (elapsed %s, %s)\n", clock.done + 1,
                 clock.total, run.name.c_str(), format_duration(elapsed).c_str(), eta.c_str());
    std::fflush(spec.progress);
  }
  const TrainResult tr = train_into(dir, c, record, spec.progress);
  ++clock.trained_runs;
  clock.trained_seconds += seconds_since(start);
  if (tr.outcome == TrainOutcome::kInterrupted)
    throw Error("interrupted during " + run.name + "; finished runs are kept and reused by the next compare");
}

// Scores the finished run in `dir` on the scoring sets: its log totals, size, int8 file
// (`int8_path`), dev and test metrics and per-example results for the head-to-head. The first
// run fixes the result's metric and task. Returns the encoded dev examples (for the latency).
std::vector<data::EncodedExample> score_run(const CompareSpec& spec, const ScoringSets& sets,
                                            const fs::path& dir, const fs::path& int8_path, CompareRun& run,
                                            CompareResult& result) {
  const LogTotals log = read_log(dir);
  run.epochs = log.epochs;
  run.train_seconds = log.seconds;
  run.tokens_per_second = log.tokens_per_second;

  io::TrainedModel trained = io::load_trained_model(dir);
  if (result.metric.empty()) {
    result.metric = resolve_metric(spec.metric, trained.spec);
    result.task = trained.spec.task;
    result.multi_label = trained.spec.output == model::OutputKind::kSigmoid;
  }
  const std::string h2h_metric = head_to_head_metric(result.metric, trained.spec.task);
  run.parameters = trained.model->params().parameter_count();
  run.model_bytes = run.parameters * sizeof(float);
  for (const auto& d : log.dev)
    run.dev_curve.push_back(d.is_object() && d.contains(result.metric) && d[result.metric].is_number()
                                ? d[result.metric].get<double>()
                                : std::nan(""));
  // Costs of the deployable form: the int8 model file and its batch-1 latency in the runtime.
  run.int8_bytes = io::export_model(trained, int8_path, runtime::DType::kI8);
  auto dev_encoded = encode_all(sets.dev, trained, spec.base.dev);
  const EvaluationResult dev = evaluate(*trained.model, dev_encoded, !sets.with_test);
  run.dev_metric = dev.metric(result.metric);
  run.dev = dev.summary();
  run.test = nullptr;
  if (sets.with_test) {
    const auto test_encoded = encode_all(sets.test, trained, spec.test);
    const EvaluationResult test = evaluate(*trained.model, test_encoded, true);
    run.test_metric = test.metric(result.metric);
    run.test = test.summary();
    run.correct = correctness(test, test_encoded, trained.spec.task);
    run.counts = example_counts(test, test_encoded, trained.spec, h2h_metric);
  } else {
    run.correct = correctness(dev, dev_encoded, trained.spec.task);
    run.counts = example_counts(dev, dev_encoded, trained.spec, h2h_metric);
  }
  return dev_encoded;
}

// The line after each run: its scores and time.
void report_run(const CompareSpec& spec, const CompareRun& run, const std::string& metric,
                const GridClock& clock, double seconds) {
  if (!spec.progress) return;
  char test_text[48] = "";
  if (run.test_metric) std::snprintf(test_text, sizeof test_text, "  test %.4f", *run.test_metric);
  std::fprintf(spec.progress, "[%d/%d] %-18s dev %s %.4f%s  %.1f s%s\n", clock.done, clock.total,
               run.name.c_str(), metric.c_str(), run.dev_metric, test_text, seconds,
               run.reused ? "  (reused)" : "");
  std::fflush(spec.progress);
}

// The two configurations the head-to-head compares: best LSTM against best GRU, each by mean dev
// metric; with one cell type, the best two. Needs two configurations.
std::pair<std::size_t, std::size_t> head_to_head_pair(const CompareResult& result) {
  const bool lower = result.metric == "loss";
  auto better = [&](std::size_t x, std::size_t y) {
    return lower ? result.configs[x].dev.mean < result.configs[y].dev.mean
                 : result.configs[x].dev.mean > result.configs[y].dev.mean;
  };
  std::optional<std::size_t> best_lstm, best_gru;
  for (std::size_t i = 0; i < result.configs.size(); ++i) {
    auto& slot = result.configs[i].cell == "lstm" ? best_lstm : best_gru;
    if (!slot || better(i, *slot)) slot = i;
  }
  if (best_lstm && best_gru) return {*best_lstm, *best_gru};
  std::vector<std::size_t> order(result.configs.size());
  for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
  std::stable_sort(order.begin(), order.end(), better);
  return {order[0], order[1]};
}

}  // namespace

CompareResult run_compare(const CompareSpec& spec) {
  check_compare_spec(spec);
  const ScoringSets sets = read_scoring_sets(spec);
  const json fingerprints = data_fingerprints(spec);

  std::error_code ec;
  fs::create_directories(spec.out, ec);
  if (ec) throw IoError("cannot create directory " + spec.out.string() + ": " + ec.message());

  ProcessGroup& group = spec.group ? *spec.group : process_group();
  std::map<std::string, TrainedHere> trained_in_job;
  if (group.size() > 1) {
    trained_in_job = train_grid_across_ranks(spec, group, fingerprints);
    if (group.rank() != 0) return {};  // rank 0 scores every run and writes the one table
  }

  CompareResult result;
  GridClock clock;
  clock.total = static_cast<int>(spec.cells.size() * spec.hidden_sizes.size()) * spec.seeds;
  for (const auto& cell : spec.cells) {
    for (const int hidden : spec.hidden_sizes) {
      CompareConfig cfg;
      cfg.name = config_name(cell, hidden);
      cfg.cell = cell;
      cfg.hidden_size = hidden;
      for (int s = 1; s <= spec.seeds; ++s) {
        const auto seed = static_cast<std::uint64_t>(s);
        CompareRun run;
        run.config = cfg.name;
        run.name = cfg.name + "-s" + std::to_string(s);
        run.cell = cell;
        run.hidden_size = hidden;
        run.seed = seed;
        const fs::path dir = spec.out / run.name;
        const auto start = std::chrono::steady_clock::now();
        const TrainConfig c = run_config(spec, cell, hidden, seed);
        const json record = run_record(c, fingerprints);
        if (settle_run(spec, run, dir, record, trained_in_job, group.rank()) != RunState::kReusable)
          train_run(spec, run, dir, c, record, clock, start);
        const fs::path int8_path = dir / "model-int8.gyre";
        const auto dev_encoded = score_run(spec, sets, dir, int8_path, run, result);
        ++clock.done;
        report_run(spec, run, result.metric, clock, seconds_since(start));
        if (s == 1) cfg.latency_ms = runtime_latency_ms(int8_path, dev_encoded, cfg.latency_tokens);
        cfg.runs.push_back(result.runs.size());
        result.runs.push_back(std::move(run));
      }
      result.configs.push_back(std::move(cfg));
    }
  }
  summarize_runs(result, result.metric == "loss");
  mark_pareto_front(result);

  if (result.configs.size() >= 2) {
    const auto [ia, ib] = head_to_head_pair(result);
    result.head_to_head =
        head_to_head(result, ia, ib, sets.with_test ? "test" : "dev",
                     head_to_head_metric(result.metric, result.task), spec.bootstrap_samples);
  }
  write_file_atomic(spec.out / "compare.json", result.to_json(spec).dump(2) + "\n");
  return result;
}

std::string compare_verdict(const CompareResult& result) {
  if (!result.head_to_head) return "verdict: one configuration only, nothing to compare\n";
  std::string out = "verdict: " + result.head_to_head->verdict + "\n";
  for (const auto& n : result.head_to_head->notes) out += n + "\n";
  return out;
}

namespace {

// The head-to-head under the table: per-seed scores, the interval, the permutation test and the
// per-seed McNemar tests.
std::string head_to_head_table(const HeadToHead& h) {
  std::ostringstream out;
  char line[320];
  const bool pts = h.points;
  std::snprintf(line, sizeof line, "\n%s vs %s on %s, %s per seed%s:\n", h.label_a.c_str(), h.label_b.c_str(),
                h.set.c_str(), pretty_metric(h.metric).c_str(), pts ? " (points)" : "");
  out << line;
  auto scores = [&](const std::vector<double>& v) {
    std::string t;
    for (const double x : v) t += (t.empty() ? "" : " ") + amount(x, pts);
    return t;
  };
  std::snprintf(line, sizeof line, "  %-12s %s\n  %-12s %s\n", h.label_a.c_str(), scores(h.scores_a).c_str(),
                h.label_b.c_str(), scores(h.scores_b).c_str());
  out << line;
  std::snprintf(line, sizeof line,
                "  difference %s %s, 95%% interval %s to %s (two-level bootstrap over seeds and examples, "
                "%d resamples)\n",
                amount(h.interval.difference, pts).c_str(), pts ? "points" : "",
                amount(h.interval.low, pts).c_str(), amount(h.interval.high, pts).c_str(),
                h.interval.samples);
  out << line;
  std::snprintf(line, sizeof line,
                "  permutation test over per-seed scores: p = %.3g (%s, %zu relabellings)\n",
                h.permutation.p_value, h.permutation.exact ? "exact" : "random", h.permutation.relabellings);
  out << line;
  out << "  per-seed McNemar, exact match (right only by " << h.label_a << " / only by " << h.label_b
      << "):\n   ";
  for (const auto& m : h.per_seed) {
    std::snprintf(line, sizeof line, "  s%llu %lld/%lld p=%.3g", static_cast<unsigned long long>(m.seed),
                  static_cast<long long>(m.test.only_a), static_cast<long long>(m.test.only_b),
                  m.test.p_value);
    out << line;
  }
  out << "\n";
  return out.str();
}

}  // namespace

std::string compare_table(const CompareResult& result, bool with_test) {
  // One seed: no spread to show, so no "±" (issue 14).
  auto pm = [](const eval::SampleSummary& s) {
    char buf[64];
    if (s.count < 2)
      std::snprintf(buf, sizeof buf, "%.4f", s.mean);
    else
      std::snprintf(buf, sizeof buf, "%.4f ± %.4f", s.mean, s.std);
    return std::string(buf);
  };
  auto size_text = [](std::size_t bytes) {
    char buf[32];
    if (bytes >= 1024 * 1024)
      std::snprintf(buf, sizeof buf, "%.1f MiB", static_cast<double>(bytes) / (1024.0 * 1024.0));
    else
      std::snprintf(buf, sizeof buf, "%.0f KiB", static_cast<double>(bytes) / 1024.0);
    return std::string(buf);
  };
  // Columns: name, parameters, int8 size, latency, dev, [test], seconds, tokens/s, front.
  // "±" is 2 bytes, 1 column.
  std::ostringstream out;
  char line[320];
  const std::string dev_head = "dev " + result.metric;
  const std::string test_head = "test " + result.metric;
  std::snprintf(line, sizeof line, "  %-14s %9s %9s %8s  %-17s", "config", "params", "int8", "ms/text",
                dev_head.c_str());
  out << line;
  if (with_test) {
    std::snprintf(line, sizeof line, "  %-17s", test_head.c_str());
    out << line;
  }
  std::snprintf(line, sizeof line, "  %8s %9s  %s\n", "train s", "tokens/s", "front");
  out << line;
  for (std::size_t i = 0; i < result.configs.size(); ++i) {
    const auto& c = result.configs[i];
    std::snprintf(line, sizeof line, "%s %-14s %9zu %9s %8.3f  %-18s", i == result.best ? "*" : " ",
                  c.name.c_str(), c.parameters, size_text(c.int8_bytes).c_str(), c.latency_ms,
                  pm(c.dev).c_str());
    out << line;
    if (with_test) {
      std::snprintf(line, sizeof line, "  %-18s", c.test ? pm(*c.test).c_str() : "-");
      out << line;
    }
    std::snprintf(line, sizeof line, "  %8.1f %9.0f  %s\n", c.train_seconds.mean, c.tokens_per_second.mean,
                  c.pareto ? "yes" : "-");
    out << line;
  }
  const std::size_t seeds = result.configs.empty() ? 0 : result.configs.front().runs.size();
  if (seeds == 1)
    out << "  (one seed: no spread over seeds; * = best dev " << result.metric << ")\n";
  else
    out << "  (mean ± sample std over " << seeds << " seeds; * = best mean dev " << result.metric << ")\n";
  out << "  (int8: exported model file; ms/text: median batch-1 latency of that file in the embedded "
         "runtime\n"
         "   on this machine; front: on the "
      << (with_test ? "test" : "dev") << " " << result.metric << " vs latency Pareto front)\n";
  if (result.head_to_head) out << head_to_head_table(*result.head_to_head);
  return out.str();
}

}  // namespace gyre::train
