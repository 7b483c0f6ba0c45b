// The linear fit's caps (README "N-gram part"; issue 13, "Scale"): at most
// linear_fit_examples training examples, those of lowest linear_fit_rank (ties: file order), and
// at most linear_fit_features n-grams, those in the most examples (ties: key bytes). The rules are
// checked against brute force on seeded invented examples (invented data, not a check value);
// the end-to-end test runs `gyre train` with small caps so the capped path runs.

#include <catch2/catch.hpp>

#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/example.hpp"
#include "gyre/text/vocab.hpp"
#include "gyre/train/baseline.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/trainer.hpp"

namespace fs = std::filesystem;
using gyre::train::LinearBaseline;
using gyre::train::LinearFitCaps;

namespace {

const char* const kLabels[] = {"repair", "billing", "praise"};

// Seeded examples over a small invented vocabulary; every tenth repeats an earlier one (equal
// ranks: ties broken by position). The label follows a marker word, so the fit learns something.
std::vector<gyre::data::Example> invented_examples(std::size_t n) {
  std::vector<gyre::data::Example> out;
  std::uint64_t s = 2026;
  auto next = [&] {
    s = s * 6364136223846793005ULL + 1442695040888963407ULL;
    return static_cast<std::uint32_t>(s >> 33);
  };
  for (std::size_t i = 0; i < n; ++i) {
    if (i % 10 == 9) {
      out.push_back(out[next() % out.size()]);
      out.back().line = i + 2;
      continue;
    }
    gyre::data::Example ex;
    const std::size_t label = next() % 3;
    const std::size_t len = 3 + next() % 10;
    for (std::size_t j = 0; j < len; ++j) ex.text += "w" + std::to_string(next() % 80) + " ";
    ex.text += "mark" + std::to_string(label * 3 + next() % 3);
    ex.labels = {kLabels[label]};
    ex.line = i + 2;
    out.push_back(std::move(ex));
  }
  return out;
}

gyre::text::VocabFile vocab_of_labels() {
  gyre::text::VocabFile v;
  v.labels = gyre::text::LabelSet({"billing", "praise", "repair"}, {1, 1, 1});
  return v;
}

}  // namespace

TEST_CASE("linear fit sample: the cap examples of lowest (rank, position), in file order",
          "[train][linear_fit]") {
  const auto examples = invented_examples(500);
  const auto stream = gyre::train::stream_of(examples);
  // Brute force: rank every example, sort by (rank, position), keep the first `cap` positions.
  std::vector<std::pair<std::uint64_t, std::size_t>> ranked;
  for (std::size_t i = 0; i < examples.size(); ++i)
    ranked.emplace_back(gyre::train::linear_fit_rank(examples[i]), i);
  std::sort(ranked.begin(), ranked.end());
  // Repeated examples share a rank (the tie the position breaks).
  CHECK(gyre::train::linear_fit_rank(examples[9]) ==
        gyre::train::linear_fit_rank(*std::find_if(examples.begin(), examples.end(), [&](const auto& e) {
          return e.text == examples[9].text && e.labels == examples[9].labels;
        })));
  for (const std::size_t cap : {std::size_t{1}, std::size_t{7}, std::size_t{100}, std::size_t{499},
                                std::size_t{500}, std::size_t{10000}}) {
    std::size_t total = 0;
    const auto positions = gyre::train::linear_fit_sample(stream, cap, total);
    CHECK(total == examples.size());
    std::vector<std::size_t> expected;
    for (std::size_t i = 0; i < std::min(cap, ranked.size()); ++i) expected.push_back(ranked[i].second);
    std::sort(expected.begin(), expected.end());
    CHECK(positions == expected);
    // Deterministic: the same positions on a second read.
    std::size_t again_total = 0;
    CHECK(gyre::train::linear_fit_sample(stream, cap, again_total) == positions);
  }
  // The rank is not the dev split's hash: a sample is not biased towards or away from dev
  // membership (the two hashes differ on these examples).
  std::size_t differ = 0;
  for (const auto& ex : examples)
    differ += gyre::train::in_dev_split(ex, 0.5) != (gyre::train::linear_fit_rank(ex) % 2 == 0);
  CHECK(differ > 0);
  std::size_t total = 0;
  CHECK_THROWS_AS(gyre::train::linear_fit_sample(stream, 0, total), gyre::Error);
}

TEST_CASE("linear baseline with caps: fitted on the sample, the same for any thread count",
          "[train][linear_fit]") {
  const auto examples = invented_examples(600);
  const auto dev = invented_examples(60);
  const auto vocab = vocab_of_labels();
  LinearFitCaps caps;
  caps.examples = 250;
  caps.features = 120;
  std::vector<gyre::runtime::NgramPart> parts;
  for (const int threads : {1, 2}) {
    const LinearBaseline fit = LinearBaseline::fit(vocab, gyre::data::Task::kClassify, examples, "train.tsv",
                                                   dev, "dev.tsv", 10.0, 2, threads, caps);
    CHECK(fit.use().train_examples == 600);
    CHECK(fit.use().examples == 250);
    CHECK(fit.use().examples_capped());
    CHECK(fit.use().features == 120);
    CHECK(fit.use().candidate_features > 120);
    CHECK(fit.use().features_capped());
    CHECK(fit.feature_count() == 120);
    const auto j = fit.use_json();
    CHECK(j["examples_cap"] == 250);
    CHECK(j["features_cap"] == 120);
    parts.push_back(fit.ngram_part(1.0F));
  }
  CHECK(parts[0].keys() == parts[1].keys());
  CHECK(parts[0].weights() == parts[1].weights());
  // The capped fit is the fit, without an examples cap, on the sampled examples given in file order.
  std::size_t total = 0;
  const auto positions =
      gyre::train::linear_fit_sample(gyre::train::stream_of(examples), caps.examples, total);
  std::vector<gyre::data::Example> sample;
  for (const auto p : positions) sample.push_back(examples[p]);
  LinearFitCaps features_only;
  features_only.features = caps.features;
  const LinearBaseline direct = LinearBaseline::fit(vocab, gyre::data::Task::kClassify, sample, "train.tsv",
                                                    dev, "dev.tsv", 10.0, 2, 1, features_only);
  CHECK_FALSE(direct.use().examples_capped());
  CHECK(direct.ngram_part(1.0F).keys() == parts[0].keys());
  CHECK(direct.ngram_part(1.0F).weights() == parts[0].weights());
  // A known count at or below the cap skips the sampling pass and fits on every example.
  LinearFitCaps known;
  known.examples = 600;
  known.known_examples = 600;
  const LinearBaseline all = LinearBaseline::fit(vocab, gyre::data::Task::kClassify, examples, "train.tsv",
                                                 dev, "dev.tsv", 10.0, 2, 1, known);
  CHECK(all.use().examples == 600);
  CHECK_FALSE(all.use().examples_capped());
  CHECK_FALSE(all.use().features_capped());
}

TEST_CASE("gyre train with small linear fit caps: progress lines, metrics.json, the part's features",
          "[train][linear_fit][slow]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "linear_fit_caps";
  fs::remove_all(dir);
  fs::create_directories(dir);
  const auto examples = invented_examples(4000);
  std::string train = "label\ttext\n", dev = "label\ttext\n";
  for (const auto& ex : examples) train += ex.labels.front() + "\t" + ex.text + "\n";
  for (const auto& ex : invented_examples(300)) dev += ex.labels.front() + "\t" + ex.text + "\n";
  gyre::write_file_atomic(dir / "train.tsv", train);
  gyre::write_file_atomic(dir / "dev.tsv", dev);
  gyre::train::TrainConfig c;
  c.train = (dir / "train.tsv").string();
  c.dev = (dir / "dev.tsv").string();
  c.embedding_size = 8;
  c.hidden_size = 8;
  c.epochs = 2;
  c.linear_fit_examples = 1500;
  c.linear_fit_features = 200;
  gyre::train::TrainOptions o;
  o.out = dir / "run";
  o.quiet = false;  // the progress lines are under test
  const fs::path log = dir / "stderr.txt";
  o.progress = std::fopen(log.c_str(), "w");
  REQUIRE(o.progress != nullptr);
  gyre::train::train(c, o);
  std::fclose(o.progress);
  const std::string said = gyre::read_file(log);
  INFO(said);
  CHECK(said.find("on 1500 of the 4000 training examples (capped by --linear-fit-examples") !=
        std::string::npos);
  CHECK(said.find("linear fit: 200 features (capped by --linear-fit-features") != std::string::npos);
  const auto m = nlohmann::json::parse(gyre::read_file(dir / "run" / "metrics.json"));
  REQUIRE(m.contains("linear_fit"));
  const auto& fit = m["linear_fit"];
  CHECK(fit["train_examples"] == 4000);
  CHECK(fit["examples"] == 1500);
  CHECK(fit["examples_cap"] == 1500);
  CHECK(fit["features"] == 200);
  CHECK(fit["features_cap"] == 200);
  CHECK(fit["candidate_features"].get<int>() > 200);
  CHECK(m["baseline"]["features"] == 200);
  REQUIRE(m.contains("ngram_part"));
  CHECK(m["ngram_part"]["features"] == 200);
  // The baseline learns the marker words from the capped sample (3 classes: chance is ~1/3).
  CHECK(m["baseline"]["dev"]["accuracy"].get<double>() > 0.6);
}
