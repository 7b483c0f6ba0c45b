#include "gyre/train/labelling_trial.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <numeric>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/trainer.hpp"

namespace gyre::train {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

std::vector<data::Example> read_all(const std::string& path) {
  std::vector<data::Example> out;
  const data::ReadReport report =
      data::read_corpus(path, {}, [&](data::Example&& ex) { out.push_back(std::move(ex)); });
  if (report.task != data::Task::kClassify)
    throw ConfigError("train",
                      path + " is a tagging corpus; a labelling trial needs a classification corpus");
  if (out.empty()) throw ParseError(path, 0, "no examples in the file");
  return out;
}

void write_subset(const fs::path& path, const std::vector<data::Example>& all,
                  const std::vector<std::size_t>& idx) {
  std::string body;
  for (const auto i : idx) {
    json j{{"text", all[i].text}};
    if (all[i].labels.size() == 1)
      j["label"] = all[i].labels[0];
    else
      j["labels"] = all[i].labels;
    body += j.dump() + "\n";
  }
  write_file_atomic(path, body);
}

struct RoundModel {
  io::TrainedModel trained;
  double accuracy = 0.0, macro_f1 = 0.0;
};

RoundModel train_round(const TrialOptions& o, const fs::path& dir, const std::vector<data::Example>& all,
                       const std::vector<std::size_t>& labelled, const std::vector<data::Example>& test) {
  fs::create_directories(dir);
  write_subset(dir / "labelled.jsonl", all, labelled);
  TrainConfig c = o.config;
  c.train = (dir / "labelled.jsonl").string();
  TrainOptions t;
  t.out = dir / "run";
  t.quiet = true;
  t.fit_baseline = false;
  train(c, t);
  RoundModel r;
  r.trained = io::load_trained_model(t.out);
  data::Encoder encoder(r.trained.vocab, data::Task::kClassify);
  encoder.set_ngram_part(&r.trained.ngram_part);
  std::vector<data::EncodedExample> enc;
  for (const auto& ex : test) enc.push_back(encoder.encode(ex, o.test));
  const EvaluationResult e = evaluate(*r.trained.model, enc);
  r.accuracy = e.metric(Metric::kAccuracy);
  r.macro_f1 = e.metric(Metric::kMacroF1);
  return r;
}

std::vector<std::size_t> pick_more(const TrialOptions& o, RoundModel& m,
                                   const std::vector<data::Example>& all,
                                   const std::vector<std::size_t>& labelled,
                                   const std::vector<std::size_t>& pool, std::size_t count, PickRule rule,
                                   std::uint64_t seed) {
  data::Encoder encoder(m.trained.vocab, data::Task::kClassify);
  encoder.set_ngram_part(&m.trained.ngram_part);
  std::vector<std::string> tokens;
  auto encode = [&](const std::vector<std::size_t>& idx) {
    std::vector<data::EncodedExample> out;
    for (const auto i : idx) {
      data::EncodedExample e;
      encoder.encode_text(all[i].text, tokens, e);
      if (e.ids.empty()) {  // a text of no known token reads as <unk>
        e.ids.push_back(1);
        if (encoder.has_characters()) e.char_offsets.push_back(0);  // ... spelled with no characters
      }
      out.push_back(std::move(e));
    }
    return out;
  };
  const auto pool_enc = encode(pool);
  const auto preds = predict_all(*m.trained.model, pool_enc, 64, true);
  std::vector<std::vector<float>> labelled_features;
  if (rule == PickRule::kDiverse)
    for (auto& p : predict_all(*m.trained.model, encode(labelled), 64, true))
      labelled_features.push_back(std::move(p.features));
  PickOptions po;
  po.count = count;
  po.rule = rule;
  po.measure = o.measure;
  po.seed = seed;
  po.multi_label = m.trained.spec.output == model::OutputKind::kSigmoid;
  std::vector<std::size_t> out;
  for (const auto& p : pick_to_label(pool_enc, preds, labelled_features, po)) out.push_back(pool[p.index]);
  return out;
}

}  // namespace

nlohmann::json labelling_trial(const TrialOptions& o) {
  if (o.config.dev.empty()) throw ConfigError("dev", "a labelling trial needs a dev file (--dev)");
  if (o.test.empty()) throw ConfigError("test", "a labelling trial needs a test file (--test)");
  if (!(o.start_fraction > 0 && o.start_fraction < 1)) throw ConfigError("start", "must be in (0, 1)");
  if (!(o.step_fraction > 0 && o.step_fraction < 1)) throw ConfigError("step", "must be in (0, 1)");
  if (o.rounds < 1) throw ConfigError("rounds", "must be at least 1");
  std::error_code ec;
  if (fs::exists(o.out, ec) && !(fs::is_directory(o.out, ec) && fs::is_empty(o.out, ec)))
    throw ConfigError("out", o.out.string() + " already exists and is not empty; choose a new --out");
  const std::vector<data::Example> all = read_all(o.config.train);
  const std::vector<data::Example> test = read_all(o.test);
  const std::size_t n = all.size();
  const auto start = static_cast<std::size_t>(std::ceil(o.start_fraction * static_cast<double>(n)));
  const auto step = static_cast<std::size_t>(std::ceil(o.step_fraction * static_cast<double>(n)));
  if (start + step * static_cast<std::size_t>(o.rounds) > n)
    throw ConfigError("rounds", "start + rounds x step is more than the " + std::to_string(n) + " examples");
  std::vector<std::size_t> order(n);
  std::iota(order.begin(), order.end(), std::size_t{0});
  Rng rng(o.seed);
  rng.shuffle(std::span<std::size_t>(order));
  const std::vector<std::size_t> first(order.begin(), order.begin() + static_cast<std::ptrdiff_t>(start));
  const std::vector<std::size_t> first_pool(order.begin() + static_cast<std::ptrdiff_t>(start), order.end());
  fs::create_directories(o.out);
  auto note = [&](const std::string& s) {
    if (!o.quiet) std::fprintf(stderr, "%s\n", s.c_str());
  };
  note("round 0: " + std::to_string(start) + " labelled examples (shared by every rule)");
  RoundModel first_model = train_round(o, o.out / "start", all, first, test);
  json rules = json::array();
  for (const PickRule rule : o.rules) {
    std::vector<std::size_t> labelled = first, pool = first_pool;
    json points = json::array();
    points.push_back({{"labelled", labelled.size()},
                      {"accuracy", first_model.accuracy},
                      {"macro_f1", first_model.macro_f1}});
    RoundModel* current = &first_model;
    RoundModel latest;
    for (int r = 1; r <= o.rounds; ++r) {
      const auto picked =
          pick_more(o, *current, all, labelled, pool, step, rule, o.seed + static_cast<std::uint64_t>(r));
      labelled.insert(labelled.end(), picked.begin(), picked.end());
      std::vector<std::size_t> sorted_picked = picked;
      std::sort(sorted_picked.begin(), sorted_picked.end());
      std::erase_if(pool, [&](std::size_t i) {
        return std::binary_search(sorted_picked.begin(), sorted_picked.end(), i);
      });
      latest = train_round(o, o.out / (std::string(to_string(rule)) + "-" + std::to_string(r)), all, labelled,
                           test);
      current = &latest;
      char buf[160];
      std::snprintf(buf, sizeof buf, "%-9s round %d: %zu labelled, test accuracy %.4f", to_string(rule), r,
                    labelled.size(), latest.accuracy);
      note(buf);
      points.push_back(
          {{"labelled", labelled.size()}, {"accuracy", latest.accuracy}, {"macro_f1", latest.macro_f1}});
    }
    rules.push_back({{"rule", to_string(rule)}, {"points", std::move(points)}});
  }
  json result{{"train", o.config.train},
              {"test", o.test},
              {"examples", n},
              {"start", start},
              {"step", step},
              {"rounds", o.rounds},
              {"seed", o.seed},
              {"measure", to_string(o.measure)},
              {"rules", std::move(rules)}};
  write_file_atomic(o.out / "labelling.json", result.dump(2) + "\n");
  return result;
}

}  // namespace gyre::train
