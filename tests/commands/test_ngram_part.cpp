// gyre train with an n-gram part (README "N-gram part"), through the binary: the part is chosen,
// reported and saved; eval and predict apply it and agree with what train measured.
#include <catch2/catch.hpp>

#include <filesystem>
#include <sstream>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/file.hpp"
#include "support/run_cli.hpp"

namespace {

namespace fs = std::filesystem;
using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using nlohmann::json;

fs::path dir() {
  return fs::path(GYRE_TEST_TMP_DIR) / "ngram_part";
}

gyre::test::CliRun gyre_cli(const std::vector<std::string>& args) {
  return gyre::test::run_cli(dir(), args);
}

const std::string kDemo = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/";

}  // namespace

TEST_CASE("train chooses an n-gram part on dev, eval and predict score what train measured", "[cli]") {
  fs::create_directories(dir());
  const std::string train = kDemo + "sentiment.train.tsv", dev = kDemo + "sentiment.dev.tsv";
  const auto out = (dir() / "auto").string();
  fs::remove_all(out);
  const auto t = gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "2", "--hidden-size", "16",
                           "--embedding-size", "16", "--no-baseline", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  CHECK_THAT(t.err + t.out, Contains("n-gram part: mix"));
  const json metrics = json::parse(gyre::read_file(fs::path(out) / "metrics.json"));
  REQUIRE(metrics.contains("ngram_part"));
  CHECK_FALSE(metrics.contains("baseline"));  // --no-baseline: no separate report, the part still fits
  const json& part = metrics["ngram_part"];
  const double mix = part["mix"].get<double>();
  CHECK(part["order"] == 2);
  CHECK(part["grid"].size() > 2);
  const double blend = part["dev_accuracy"]["blend"].get<double>();
  // The choice minimises the tempered dev log-loss over the grid (ties: the smaller mix).
  double best = 1e300;
  double best_mix = -1;
  for (const auto& g : part["grid"])
    if (g["dev_tempered_loss"].get<double>() < best) {
      best = g["dev_tempered_loss"].get<double>();
      best_mix = g["mix"].get<double>();
    }
  CHECK(mix == best_mix);

  // eval on the dev file: the blended accuracy train reported.
  const auto report = (dir() / "eval.json").string();
  const auto e = gyre_cli({"eval", out, "--test", dev, "--no-baseline", "--json", report});
  INFO(e.err);
  REQUIRE(e.exit_code == 0);
  const json ej = json::parse(gyre::read_file(report));
  if (mix > 0) {
    CHECK_THAT(ej["accuracy"].get<double>(), WithinAbs(blend, 1e-12));
  } else {
    CHECK_THAT(ej["accuracy"].get<double>(), WithinAbs(part["dev_accuracy"]["network"].get<double>(), 1e-12));
  }
  // predict: the same labels as eval counted right.
  const auto p = gyre_cli({"predict", out, "--input", dev, "--input-format", "tsv"});
  INFO(p.err);
  REQUIRE(p.exit_code == 0);
  std::istringstream gold_in(gyre::read_file(dev)), pred_in(p.out);
  std::string gline, pline;
  std::size_t right = 0, total = 0;
  while (std::getline(gold_in, gline)) {
    if (gline.empty() || gline.rfind("label\t", 0) == 0) continue;
    REQUIRE(std::getline(pred_in, pline));
    right += gline.substr(0, gline.find('\t')) == pline.substr(0, pline.find('\t'));
    ++total;
  }
  CHECK_THAT(static_cast<double>(right) / static_cast<double>(total),
             WithinAbs(ej["accuracy"].get<double>(), 1e-12));

  // An exported file is scored by the runtime, which applies the same part.
  const auto exported = (dir() / "model.gyre").string();
  REQUIRE(gyre_cli({"export", out, "--out", exported, "--precision", "f32"}).exit_code == 0);
  const auto report2 = (dir() / "eval-exported.json").string();
  const auto e2 = gyre_cli({"eval", exported, "--test", dev, "--no-baseline", "--json", report2});
  INFO(e2.err);
  REQUIRE(e2.exit_code == 0);
  CHECK_THAT(json::parse(gyre::read_file(report2))["accuracy"].get<double>(),
             WithinAbs(ej["accuracy"].get<double>(), 1.0 / static_cast<double>(total) + 1e-12));
}

TEST_CASE("ngram-part off trains the network alone, bad n-gram settings are refused", "[cli]") {
  fs::create_directories(dir());
  const std::string train = kDemo + "sentiment.train.tsv", dev = kDemo + "sentiment.dev.tsv";
  const auto out = (dir() / "off").string();
  fs::remove_all(out);
  const auto t = gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "1", "--hidden-size", "8",
                           "--embedding-size", "8", "--ngram-part", "off", "--quiet", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  CHECK_FALSE(json::parse(gyre::read_file(fs::path(out) / "metrics.json")).contains("ngram_part"));
  const auto i = gyre_cli({"inspect", out});
  CHECK_THAT(i.out, Contains("n-gram part  none"));

  const auto bad = gyre_cli({"train", "--train", train, "--ngram-part", "sometimes", "--out", out + "-bad"});
  CHECK(bad.exit_code == 2);
  CHECK_THAT(bad.err, Contains("--ngram-part"));
  const auto order = gyre_cli({"train", "--train", train, "--ngram-order", "7", "--out", out + "-bad"});
  CHECK(order.exit_code == 2);
  CHECK_THAT(order.err, Contains("--ngram-order"));
}
