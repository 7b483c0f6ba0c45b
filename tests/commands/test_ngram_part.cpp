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

TEST_CASE("eval reports a model's n-gram part alone as its linear baseline, the same scores as a refit",
          "[cli]") {
  fs::create_directories(dir());
  const std::string train = kDemo + "sentiment.train.tsv", dev = kDemo + "sentiment.dev.tsv",
                    test = kDemo + "sentiment.test.tsv";
  const auto with = (dir() / "baseline-part").string(), without = (dir() / "baseline-off").string();
  for (const auto& [out, mode] : {std::pair{with, "auto"}, std::pair{without, "off"}}) {
    fs::remove_all(out);
    const auto t = gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "1", "--hidden-size", "8",
                             "--embedding-size", "8", "--ngram-part", mode, "--quiet", "--out", out});
    INFO(t.err);
    REQUIRE(t.exit_code == 0);
  }
  const json metrics = json::parse(gyre::read_file(fs::path(with) / "metrics.json"));
  REQUIRE(metrics.contains("ngram_part"));
  REQUIRE(metrics["ngram_part"]["mix"].get<double>() > 0);  // a 1-epoch network of 8 units needs the part
  const auto eval_json = [&](const std::string& model, const std::string& file, const std::string& name) {
    const auto report = (dir() / (name + ".json")).string();
    const auto e = gyre_cli({"eval", model, "--test", file, "--json", report});
    INFO(e.err);
    REQUIRE(e.exit_code == 0);
    return std::pair{json::parse(gyre::read_file(report)), e.out};
  };
  // On dev: what train measured for the part (ngram_part.dev_accuracy.ngram_part) and for the
  // baseline it fitted and scored separately (baseline.dev).
  const auto [on_dev, dev_out] = eval_json(with, dev, "part-dev");
  const json& row = on_dev.at("linear_baseline");
  CHECK(row.at("source") == "ngram_part");
  CHECK(row.at("refitted") == false);
  CHECK_THAT(dev_out, Contains("n-gram part alone"));
  CHECK_THAT(row["metrics"]["accuracy"].get<double>(),
             WithinAbs(metrics["ngram_part"]["dev_accuracy"]["ngram_part"].get<double>(), 1e-12));
  CHECK_THAT(row["metrics"]["accuracy"].get<double>(),
             WithinAbs(metrics["baseline"]["dev"]["accuracy"].get<double>(), 1e-12));
  CHECK_THAT(row["metrics"]["macro_f1"].get<double>(),
             WithinAbs(metrics["baseline"]["dev"]["macro_f1"].get<double>(), 1e-12));
  CHECK(row["name"] == metrics["baseline"]["name"]);
  // On test: the part alone scores what a refit scores (the run without a part refits the same
  // baseline on the same split).
  const auto [part_test, part_out] = eval_json(with, test, "part-test");
  const auto [refit_test, refit_out] = eval_json(without, test, "refit-test");
  CHECK(
      refit_test.at("linear_baseline").contains("train"));  // the refit path, kept for models without a part
  CHECK_FALSE(refit_test.at("linear_baseline").contains("source"));
  CHECK_THAT(part_test["linear_baseline"]["metrics"]["accuracy"].get<double>(),
             WithinAbs(refit_test["linear_baseline"]["metrics"]["accuracy"].get<double>(), 1e-12));
  CHECK_THAT(part_test["linear_baseline"]["metrics"]["macro_f1"].get<double>(),
             WithinAbs(refit_test["linear_baseline"]["metrics"]["macro_f1"].get<double>(), 1e-12));
  // An int8 file reports its stored part (rounded weights): within two test examples of the f32 one.
  const auto exported = (dir() / "baseline-part.int8.gyre").string();
  REQUIRE(gyre_cli({"export", with, "--out", exported, "--precision", "int8"}).exit_code == 0);
  const auto [int8_test, int8_out] = eval_json(exported, test, "part-int8-test");
  CHECK(int8_test.at("linear_baseline").at("source") == "ngram_part");
  const double examples = int8_test.at("examples").get<double>();
  CHECK_THAT(
      int8_test["linear_baseline"]["metrics"]["accuracy"].get<double>(),
      WithinAbs(part_test["linear_baseline"]["metrics"]["accuracy"].get<double>(), 2.0 / examples + 1e-12));
}

TEST_CASE("pick and export's dev check run an exported model with an n-gram part", "[cli]") {
  fs::create_directories(dir());
  const std::string train = kDemo + "sentiment.train.tsv", dev = kDemo + "sentiment.dev.tsv";
  const auto out = (dir() / "pick-part").string();
  fs::remove_all(out);
  const auto t = gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "1", "--hidden-size", "8",
                           "--embedding-size", "8", "--no-baseline", "--quiet", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  const json metrics = json::parse(gyre::read_file(fs::path(out) / "metrics.json"));
  REQUIRE(metrics["ngram_part"]["mix"].get<double>() > 0);
  // The export's dev check scores the file through the runtime (words included) beside the
  // checkpoint; f32 agrees on every label.
  const auto exported = (dir() / "pick-part.gyre").string();
  const auto x = gyre_cli({"export", out, "--out", exported, "--precision", "f32"});
  INFO(x.out << x.err);
  REQUIRE(x.exit_code == 0);
  CHECK_THAT(x.out, Contains("dev accuracy ("));
  CHECK_THAT(x.out, Contains("label agreement 100.00%"));
  CHECK_THAT(x.out, !Contains("skipped"));
  // pick: the pool is the dev texts; the exported file (runtime) picks what the checkpoint (library)
  // picks, with the same probabilities within 1e-5 (the runtime parity tolerance).
  const auto pool = (dir() / "pick-pool.txt").string();
  {
    std::istringstream in(gyre::read_file(dev));
    std::string line, texts;
    while (std::getline(in, line))
      if (!line.empty() && line.rfind("label\t", 0) != 0) texts += line.substr(line.find('\t') + 1) + "\n";
    gyre::write_file_atomic(pool, texts);
  }
  const auto pick = [&](const std::string& model) {
    const auto r =
        gyre_cli({"pick", model, "--pool", pool, "--count", "5", "--labelled", train, "--format", "jsonl"});
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    std::vector<json> rows;
    std::istringstream in(r.out);
    std::string line;
    while (std::getline(in, line)) rows.push_back(json::parse(line));
    return rows;
  };
  const auto from_checkpoint = pick(out), from_file = pick(exported);
  REQUIRE(from_checkpoint.size() == 5);
  REQUIRE(from_file.size() == 5);
  for (std::size_t i = 0; i < 5; ++i) {
    CHECK(from_file[i]["line"] == from_checkpoint[i]["line"]);
    CHECK(from_file[i]["guess"] == from_checkpoint[i]["guess"]);
    CHECK_THAT(from_file[i]["probability"].get<double>(),
               WithinAbs(from_checkpoint[i]["probability"].get<double>(), 1e-5));
  }
}

TEST_CASE("predict --why shows the n-gram part's share beside the network's", "[cli]") {
  fs::create_directories(dir());
  const std::string train = kDemo + "sentiment.train.tsv", dev = kDemo + "sentiment.dev.tsv";
  const auto out = (dir() / "why-part").string();
  fs::remove_all(out);
  const auto t = gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "1", "--hidden-size", "8",
                           "--embedding-size", "8", "--no-baseline", "--quiet", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  REQUIRE(json::parse(gyre::read_file(fs::path(out) / "metrics.json"))["ngram_part"]["mix"].get<double>() >
          0);
  const auto exported = (dir() / "why-part.gyre").string();
  REQUIRE(gyre_cli({"export", out, "--out", exported, "--precision", "f32", "--no-check"}).exit_code == 0);
  const auto input = (dir() / "why-input.txt").string();
  gyre::write_file_atomic(input, "the engineer was late and rude and the kettle still leaks\nvery happy\n");
  const auto why = [&](const std::string& model, const std::string& file) {
    const auto r = gyre_cli({"predict", model, "--input", file, "--format", "jsonl", "--why"});
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    std::vector<json> rows;
    std::istringstream in(r.out);
    std::string line;
    while (std::getline(in, line)) rows.push_back(json::parse(line).at("why"));
    return rows;
  };
  const auto library = why(out, input), runtime = why(exported, input);
  REQUIRE(library.size() == 2);
  REQUIRE(runtime.size() == 2);
  for (std::size_t i = 0; i < 2; ++i) {
    const json& a = library[i];
    const json& b = runtime[i];
    CHECK(a.at("method") == "integrated_gradients");
    CHECK(b.at("method") == "occlusion");
    REQUIRE(a.contains("ngram_part"));
    REQUIRE(b.contains("ngram_part"));
    CHECK(a["ngram_part"]["unit"] == "logit");
    // The shares and the bias add up to the part's addition to the label's logit.
    double sum = 0;
    for (const auto& tok : a.at("tokens")) sum += tok.at("ngram_part").get<double>();
    CHECK_THAT(sum, WithinAbs(a["ngram_part"]["sum"].get<double>(), 1e-9));
    CHECK_THAT(a["ngram_part"]["bias"].get<double>() + sum,
               WithinAbs(a["ngram_part"]["logit"].get<double>(), 1e-5));
    // The part's share does not depend on the engine (f32 file: the same weights).
    REQUIRE(a.at("tokens").size() == b.at("tokens").size());
    for (std::size_t k = 0; k < a.at("tokens").size(); ++k)
      CHECK_THAT(a["tokens"][k]["ngram_part"].get<double>(),
                 WithinAbs(b["tokens"][k]["ngram_part"].get<double>(), 1e-5));
  }
  // The trainer's dev mistakes (metrics.json, the run report) carry the same explanation as
  // predict --why gives for their texts: the network's integrated gradients and the part's share.
  const json mistakes = json::parse(gyre::read_file(fs::path(out) / "metrics.json")).at("dev_mistakes");
  REQUIRE(!mistakes.empty());
  std::string texts;
  for (const auto& m : mistakes) texts += m.at("text").get<std::string>() + "\n";
  const auto mistaken = (dir() / "why-mistakes.txt").string();
  gyre::write_file_atomic(mistaken, texts);
  const auto again = why(out, mistaken);
  REQUIRE(again.size() == mistakes.size());
  for (std::size_t i = 0; i < again.size(); ++i) {
    const json& a = mistakes[i].at("why");
    const json& b = again[i];
    CHECK(a.at("label") == mistakes[i].at("predicted"));
    CHECK(a.at("label") == b.at("label"));
    REQUIRE(a.contains("ngram_part"));
    CHECK_THAT(a["ngram_part"]["logit"].get<double>(),
               WithinAbs(b["ngram_part"]["logit"].get<double>(), 1e-6));
    REQUIRE(a.at("tokens").size() == b.at("tokens").size());
    for (std::size_t k = 0; k < a.at("tokens").size(); ++k) {
      CHECK(a["tokens"][k]["token"] == b["tokens"][k]["token"]);
      CHECK_THAT(a["tokens"][k]["score"].get<double>(),
                 WithinAbs(b["tokens"][k]["score"].get<double>(), 1e-6));
      CHECK_THAT(a["tokens"][k]["ngram_part"].get<double>(),
                 WithinAbs(b["tokens"][k]["ngram_part"].get<double>(), 1e-6));
    }
  }
  // A model without a part shows the network's share only.
  const auto plain = (dir() / "why-plain").string();
  fs::remove_all(plain);
  REQUIRE(
      gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "1", "--hidden-size", "8",
                "--embedding-size", "8", "--no-baseline", "--ngram-part", "off", "--quiet", "--out", plain})
          .exit_code == 0);
  const auto none = why(plain, input);
  REQUIRE(none.size() == 2);
  CHECK_FALSE(none[0].contains("ngram_part"));
  CHECK_FALSE(none[0]["tokens"][0].contains("ngram_part"));
}
