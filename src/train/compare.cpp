#include "gyre/train/compare.hpp"

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <sstream>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/model/encoder.hpp"
#include "gyre/train/evaluate.hpp"
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
    if (j.contains("tokens_per_second") && j["tokens_per_second"].is_number())
      t.tokens_per_second += j["tokens_per_second"].get<double>();
  }
  if (t.epochs > 0) t.tokens_per_second /= t.epochs;
  return t;
}

// True when OUT/<run> holds a finished run of exactly this cell, size and seed.
bool reusable(const fs::path& dir, const std::string& cell, int hidden, std::uint64_t seed) {
  std::error_code ec;
  if (!fs::exists(dir, ec) || fs::is_empty(dir, ec)) return false;
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
                                 " holds a run with other settings (cell, hidden_size or seed); "
                                 "use another --out or delete it");
  return true;
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
  const model::Encoder encoder(m.vocab, m.spec.task);
  std::vector<data::EncodedExample> out;
  out.reserve(examples.size());
  for (const auto& ex : examples) out.push_back(encoder.encode(ex, path));
  return out;
}

double mean_of(const std::vector<std::uint8_t>& v) {
  double s = 0.0;
  for (const auto x : v) s += x;
  return v.empty() ? 0.0 : s / static_cast<double>(v.size());
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

json CompareResult::to_json(const CompareSpec& spec) const {
  json j;
  j["format"] = "gyre-compare";
  j["version"] = 1;
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
  for (const auto& r : runs) {
    j["runs"].push_back({{"name", r.name},
                         {"config", r.config},
                         {"cell", r.cell},
                         {"hidden_size", r.hidden_size},
                         {"seed", r.seed},
                         {"dir", r.name},
                         {"reused", r.reused},
                         {"parameters", r.parameters},
                         {"model_bytes", r.model_bytes},
                         {"epochs", r.epochs},
                         {"train_seconds", r.train_seconds},
                         {"tokens_per_second", r.tokens_per_second},
                         {"dev_metric", r.dev_metric},
                         {"test_metric", r.test_metric ? json(*r.test_metric) : json(nullptr)},
                         {"dev_scores", r.dev},
                         {"test_scores", r.test}});
  }
  j["configs"] = json::array();
  for (const auto& c : configs) {
    std::vector<double> dev, test, seconds, speed;
    std::vector<std::string> names;
    for (const auto i : c.runs) {
      dev.push_back(runs[i].dev_metric);
      if (runs[i].test_metric) test.push_back(*runs[i].test_metric);
      seconds.push_back(runs[i].train_seconds);
      speed.push_back(runs[i].tokens_per_second);
      names.push_back(runs[i].name);
    }
    j["configs"].push_back({{"name", c.name},
                            {"cell", c.cell},
                            {"hidden_size", c.hidden_size},
                            {"parameters", c.parameters},
                            {"model_bytes", c.model_bytes},
                            {"runs", names},
                            {"dev", summary_json(c.dev, dev)},
                            {"test", c.test ? summary_json(*c.test, test) : json(nullptr)},
                            {"train_seconds", summary_json(c.train_seconds, seconds)},
                            {"tokens_per_second", summary_json(c.tokens_per_second, speed)}});
  }
  j["best"] = configs.empty() ? json(nullptr) : json(configs[best].name);
  if (significance) {
    const auto& s = *significance;
    j["significance"] = {
        {"a", s.a},
        {"b", s.b},
        {"set", s.set},
        {"seed", s.seed},
        {"examples", s.examples},
        {"correctness", "exact match per example"},
        {"accuracy_a", s.accuracy_a},
        {"accuracy_b", s.accuracy_b},
        {"mcnemar_exact",
         {{"only_a", s.mcnemar.only_a}, {"only_b", s.mcnemar.only_b}, {"p_value", s.mcnemar.p_value}}},
        {"paired_bootstrap",
         {{"samples", s.bootstrap.samples},
          {"wins_a", s.bootstrap.wins_a},
          {"wins_b", s.bootstrap.wins_b},
          {"p_value", s.bootstrap.p_value}}}};
  } else {
    j["significance"] = nullptr;
  }
  return j;
}

CompareResult run_compare(const CompareSpec& spec) {
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
  {
    TrainConfig probe = spec.base;
    validate(probe);
  }
  // Read the evaluation files once, before any training, so bad input fails fast.
  data::ReadOptions read_options;
  read_options.skip_bad_lines = spec.base.skip_bad_lines;
  const std::vector<data::Example> dev_examples = data::load_corpus(spec.base.dev, read_options);
  if (dev_examples.empty()) throw ParseError(spec.base.dev, 0, "no examples in the file");
  std::vector<data::Example> test_examples;
  if (!spec.test.empty()) {
    test_examples = data::load_corpus(spec.test, read_options);
    if (test_examples.empty()) throw ParseError(spec.test, 0, "no examples in the file");
  }
  const bool with_test = !spec.test.empty();

  std::error_code ec;
  fs::create_directories(spec.out, ec);
  if (ec) throw IoError("cannot create directory " + spec.out.string() + ": " + ec.message());

  CompareResult result;
  const int total = static_cast<int>(spec.cells.size() * spec.hidden_sizes.size()) * spec.seeds;
  int done = 0;
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
        run.reused = reusable(dir, cell, hidden, seed);
        if (!run.reused) {
          TrainConfig c = spec.base;
          c.cell = cell;
          c.hidden_size = hidden;
          c.seed = seed;
          TrainOptions options;
          options.out = dir;
          options.quiet = true;
          const TrainResult tr = train(c, options);
          if (tr.outcome == TrainOutcome::kInterrupted)
            throw Error("interrupted during " + run.name +
                        "; finished runs are kept and reused by the next compare");
        }
        const LogTotals log = read_log(dir);
        run.epochs = log.epochs;
        run.train_seconds = log.seconds;
        run.tokens_per_second = log.tokens_per_second;

        io::TrainedModel trained = io::load_trained_model(dir);
        if (result.metric.empty()) result.metric = resolve_metric(spec.metric, trained.spec);
        run.parameters = trained.model->params().parameter_count();
        run.model_bytes = run.parameters * sizeof(float);
        const auto dev_encoded = encode_all(dev_examples, trained, spec.base.dev);
        const EvaluationResult dev = evaluate(*trained.model, dev_encoded, !with_test);
        run.dev_metric = dev.metric(result.metric);
        run.dev = dev.summary();
        run.test = nullptr;
        if (with_test) {
          const auto test_encoded = encode_all(test_examples, trained, spec.test);
          const EvaluationResult test = evaluate(*trained.model, test_encoded, true);
          run.test_metric = test.metric(result.metric);
          run.test = test.summary();
          run.correct = correctness(test, test_encoded, trained.spec.task);
        } else {
          run.correct = correctness(dev, dev_encoded, trained.spec.task);
        }
        ++done;
        if (spec.progress) {
          const double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
          char test_text[48] = "";
          if (run.test_metric) std::snprintf(test_text, sizeof test_text, "  test %.4f", *run.test_metric);
          std::fprintf(spec.progress, "[%d/%d] %-18s dev %s %.4f%s  %.1f s%s\n", done, total,
                       run.name.c_str(), result.metric.c_str(), run.dev_metric, test_text, secs,
                       run.reused ? "  (reused)" : "");
          std::fflush(spec.progress);
        }
        cfg.runs.push_back(result.runs.size());
        result.runs.push_back(std::move(run));
      }
      result.configs.push_back(std::move(cfg));
    }
  }
  summarize_runs(result, result.metric == "loss");

  if (result.configs.size() >= 2) {
    // Runner-up by mean dev metric.
    std::vector<std::size_t> order(result.configs.size());
    for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
    const bool lower = result.metric == "loss";
    std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
      return lower ? result.configs[a].dev.mean < result.configs[b].dev.mean
                   : result.configs[a].dev.mean > result.configs[b].dev.mean;
    });
    if (order[0] != result.best) std::swap(order[0], *std::find(order.begin(), order.end(), result.best));
    const auto& ca = result.configs[order[0]];
    const auto& cb = result.configs[order[1]];
    const auto& ra = result.runs[ca.runs.front()];
    const auto& rb = result.runs[cb.runs.front()];
    CompareSignificance s;
    s.a = ca.name;
    s.b = cb.name;
    s.set = with_test ? "test" : "dev";
    s.seed = ra.seed;
    s.examples = ra.correct.size();
    s.accuracy_a = mean_of(ra.correct);
    s.accuracy_b = mean_of(rb.correct);
    s.mcnemar = eval::mcnemar_exact(ra.correct, rb.correct);
    s.bootstrap = eval::paired_bootstrap(ra.correct, rb.correct, spec.bootstrap_samples, 1);
    result.significance = s;
  }
  write_file_atomic(spec.out / "compare.json", result.to_json(spec).dump(2) + "\n");
  return result;
}

std::string compare_table(const CompareResult& result, bool with_test) {
  auto pm = [](const eval::SampleSummary& s) {
    char buf[64];
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
  // Columns: name, parameters, size, dev, [test], seconds, tokens/s. "±" is 2 bytes, 1 column.
  std::ostringstream out;
  char line[256];
  const std::string dev_head = "dev " + result.metric;
  const std::string test_head = "test " + result.metric;
  std::snprintf(line, sizeof line, "  %-14s %10s %9s  %-17s", "config", "params", "f32 size",
                dev_head.c_str());
  out << line;
  if (with_test) {
    std::snprintf(line, sizeof line, "  %-17s", test_head.c_str());
    out << line;
  }
  std::snprintf(line, sizeof line, "  %9s %10s\n", "train s", "tokens/s");
  out << line;
  for (std::size_t i = 0; i < result.configs.size(); ++i) {
    const auto& c = result.configs[i];
    std::snprintf(line, sizeof line, "%s %-14s %10zu %9s  %-18s", i == result.best ? "*" : " ",
                  c.name.c_str(), c.parameters, size_text(c.model_bytes).c_str(), pm(c.dev).c_str());
    out << line;
    if (with_test) {
      std::snprintf(line, sizeof line, "  %-18s", c.test ? pm(*c.test).c_str() : "-");
      out << line;
    }
    std::snprintf(line, sizeof line, "  %9.1f %10.0f\n", c.train_seconds.mean, c.tokens_per_second.mean);
    out << line;
  }
  const std::size_t seeds = result.configs.empty() ? 0 : result.configs.front().runs.size();
  out << "  (mean ± sample std over " << seeds << " seed" << (seeds == 1 ? "" : "s") << "; * = best mean dev "
      << result.metric << ")\n";
  if (result.significance) {
    const auto& s = *result.significance;
    std::snprintf(line, sizeof line,
                  "\n%s vs %s on %s (seed %llu, %zu examples, exact-match accuracy %.4f vs %.4f)\n"
                  "  McNemar exact test:  %lld right only by %s, %lld right only by %s, p = %.4g\n"
                  "  paired bootstrap:    %s better in %d of %d resamples, p = %.4g\n",
                  s.a.c_str(), s.b.c_str(), s.set.c_str(), static_cast<unsigned long long>(s.seed),
                  s.examples, s.accuracy_a, s.accuracy_b, static_cast<long long>(s.mcnemar.only_a),
                  s.a.c_str(), static_cast<long long>(s.mcnemar.only_b), s.b.c_str(), s.mcnemar.p_value,
                  s.a.c_str(), s.bootstrap.wins_a, s.bootstrap.samples, s.bootstrap.p_value);
    out << line;
  }
  return out.str();
}

}  // namespace gyre::train
