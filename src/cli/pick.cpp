// gyre pick: which unlabelled texts to label next (gyre/train/label_next.hpp). Reads one text per
// line, ranks them with the model, and writes a file ready to label: TSV rows "<TAB>text" (the
// label column left empty) or JSON Lines with the model's guess and the scores; a table of the
// picks goes to stdout when --out is given.

#include <cstdio>
#include <fstream>
#include <iostream>
#include <memory>
#include <string>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/error.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/train/evaluate.hpp"
#include "gyre/train/label_next.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct PickOptions {
  std::string model;
  std::string pool;
  std::string labelled;
  std::string out;
  std::string format = "tsv";
  std::string rule = "diverse";
  std::string measure = "margin";
  std::size_t count = 50;
  std::uint64_t seed = 1;
};

struct PoolText {
  std::size_t line = 0;
  std::string text;
};

std::vector<PoolText> read_pool(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw IoError("cannot open " + path);
  std::vector<PoolText> out;
  std::string line;
  std::size_t n = 0;
  while (std::getline(in, line)) {
    ++n;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    if (!text::is_valid_utf8(line)) throw ParseError(path, n, "invalid UTF-8");
    if (line.find_first_not_of(" \t") == std::string::npos)
      throw ParseError(path, n, "empty line (the pool has one text per line)");
    out.push_back({n, line});
  }
  if (out.empty()) throw ParseError(path, 0, "no texts in the file");
  return out;
}

std::vector<train::ExamplePrediction> run_model(const io::TrainedModel& trained,
                                                const std::vector<data::EncodedExample>& encoded,
                                                const std::vector<std::vector<std::string>>& words = {}) {
  return trained.runtime ? train::predict_all(*trained.runtime, encoded, true, true, words)
                         : train::predict_all(*trained.model, encoded, 64, true);
}

// The pool's texts as the model reads them; a text the model cannot read is refused with its line.
std::vector<data::EncodedExample> encode_pool(const data::Encoder& encoder, const std::vector<PoolText>& pool,
                                              const std::string& path) {
  std::vector<data::EncodedExample> encoded;
  encoded.reserve(pool.size());
  std::vector<std::string> tokens;
  for (const auto& p : pool) {
    data::EncodedExample ex;
    try {
      encoder.encode_text(p.text, tokens, ex);
    } catch (const runtime::Error& e) {
      throw ParseError(path, p.line, e.what());
    }
    if (ex.ids.empty()) throw ParseError(path, p.line, "no tokens in the text");
    ex.source_line = p.line;
    encoded.push_back(std::move(ex));
  }
  return encoded;
}

// The model's pooled representation of each already labelled text (texts without tokens left out).
std::vector<std::vector<float>> labelled_features(const io::TrainedModel& trained,
                                                  const data::Encoder& encoder, const std::string& path) {
  std::vector<std::vector<float>> features;
  std::vector<data::EncodedExample> labelled;
  std::vector<std::string> tokens;
  data::read_corpus(path, {}, [&](data::Example&& ex) {
    data::EncodedExample e;
    encoder.encode_text(ex.text, tokens, e);
    if (!e.ids.empty()) labelled.push_back(std::move(e));
  });
  for (auto& p : run_model(trained, labelled)) features.push_back(std::move(p.features));
  return features;
}

// The model's labels for a text, comma-separated.
std::string guess_of(const train::ExamplePrediction& pr, const io::TrainedModel& trained) {
  std::string guess;
  for (const auto l : pr.labels)
    guess += (guess.empty() ? "" : ",") + trained.spec.labels[static_cast<std::size_t>(l)];
  return guess;
}

// The file to label: TSV rows "<TAB>text", or JSON Lines with the guess and the scores.
std::string picks_file(const std::vector<train::Pick>& picks,
                       const std::vector<train::ExamplePrediction>& preds, const std::vector<PoolText>& pool,
                       const io::TrainedModel& trained, const train::PickOptions& po,
                       const std::string& format) {
  std::string body;
  for (std::size_t r = 0; r < picks.size(); ++r) {
    const auto& pk = picks[r];
    const auto& pr = preds[pk.index];
    if (format == "jsonl") {
      json copies = json::array();
      for (const auto c : pk.copies) copies.push_back(pool[c].line);
      json rec{{"label", ""},
               {"text", pool[pk.index].text},
               {"guess", guess_of(pr, trained)},
               {"probability", pr.confidence},
               {"uncertainty", pk.uncertainty},
               {"rank", r + 1},
               {"line", pool[pk.index].line},
               {"duplicates", copies}};
      if (po.rule == train::PickRule::kDiverse) rec["distance"] = pk.distance;
      body += rec.dump() + "\n";
    } else {
      body += "\t" + pool[pk.index].text + "\n";
    }
  }
  return body;
}

// The picks as a table on stdout (when the file goes to --out).
void print_picks(const std::vector<train::Pick>& picks, const std::vector<train::ExamplePrediction>& preds,
                 const std::vector<PoolText>& pool, const io::TrainedModel& trained) {
  std::printf("%4s  %6s  %-16s %6s  %5s  %s\n", "rank", "line", "guess", "p", "dups", "text");
  for (std::size_t r = 0; r < picks.size(); ++r) {
    const auto& pk = picks[r];
    const auto& pr = preds[pk.index];
    std::string text = pool[pk.index].text;
    if (text.size() > 60) text = text.substr(0, 57) + "...";
    std::printf("%4zu  %6zu  %-16s %6.3f  %5zu  %s\n", r + 1, pool[pk.index].line,
                guess_of(pr, trained).c_str(), static_cast<double>(pr.confidence), pk.copies.size(),
                text.c_str());
  }
}

ExitCode run_pick(const PickOptions& o) {
  train::PickOptions po;
  po.rule = train::pick_rule_from_string(o.rule);
  po.measure = train::uncertainty_from_string(o.measure);
  po.count = o.count;
  po.seed = o.seed;
  const io::TrainedModel trained = io::load_trained_model(o.model, io::Engine::kRuntimeForExported);
  if (trained.spec.task != data::Task::kClassify)
    throw ConfigError("model",
                      trained.path.string() + " is a tagger; gyre pick ranks texts for a classifier");
  po.multi_label = trained.spec.output == model::OutputKind::kSigmoid;
  data::Encoder encoder(trained.vocab, data::Task::kClassify);
  encoder.set_ngram_part(&trained.ngram_part);
  const std::vector<PoolText> pool = read_pool(o.pool);
  const std::vector<data::EncodedExample> encoded = encode_pool(encoder, pool, o.pool);
  std::vector<std::vector<float>> features;
  if (!o.labelled.empty()) features = labelled_features(trained, encoder, o.labelled);
  const auto preds = run_model(trained, encoded);
  const auto picks = train::pick_to_label(encoded, preds, features, po);

  const std::string body = picks_file(picks, preds, pool, trained, po, o.format);
  if (o.out.empty()) {
    std::cout << body;
    return ExitCode::kOk;
  }
  write_file_atomic(o.out, body);
  std::printf("picked %zu of %zu texts (%s, uncertainty by %s) -> %s\n", picks.size(), pool.size(),
              train::to_string(po.rule), train::to_string(po.measure), o.out.c_str());
  print_picks(picks, preds, pool, trained);
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "pick", "Choose which unlabelled texts to label next (uncertainty + diversity)", 45,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<PickOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre pick runs/intents --pool inbox.txt --count 40 --out to-label.tsv\n"
          "  gyre pick runs/intents --pool inbox.txt --labelled corpora/demo/intents.train.tsv --format "
          "jsonl\n"
          "The TSV output is label<TAB>text with the label left empty, ready to fill in; JSON Lines add the\n"
          "model's guess, its probability, the uncertainty and the lines of collapsed duplicates.\n"
          "--pick diverse: the 10x count most uncertain texts, then greedy k-center over the model's pooled\n"
          "representation (core-set, Sener & Savarese 2018); uncertain: most uncertain first; random.");
      sub.add_option("model", o->model, "run directory, checkpoint or exported classifier")->required();
      sub.add_option("--pool", o->pool, "unlabelled texts, one per line")->required();
      sub.add_option("--count", o->count, "how many texts to pick")
          ->check(CLI::PositiveNumber)
          ->default_str("50");
      sub.add_option("--pick", o->rule, "diverse | uncertain | random")
          ->check(CLI::IsMember({"diverse", "uncertain", "random"}))
          ->default_str("diverse");
      sub.add_option("--uncertainty", o->measure, "margin (1 - gap of the top two) | entropy")
          ->check(CLI::IsMember({"margin", "entropy"}))
          ->default_str("margin");
      sub.add_option("--labelled", o->labelled,
                     "corpus already labelled: diverse picks keep away from its texts");
      sub.add_option("--out", o->out, "write here (atomically) and print a table; default: stdout");
      sub.add_option("--format", o->format, "tsv | jsonl")
          ->check(CLI::IsMember({"tsv", "jsonl"}))
          ->default_str("tsv");
      sub.add_option("--seed", o->seed, "seed of --pick random")->default_str("1");
      return [o] { return run_pick(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
