// `gyre compare` and `gyre report` through the binary: exit codes, table on stdout, files written.
// Needs the gyre binary (build the default target first, as for the other CLI tests).

#include <catch2/catch.hpp>

#include <sys/wait.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>

#include <nlohmann/json.hpp>

#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"

namespace fs = std::filesystem;

namespace {

int run(const std::string& args, const fs::path& out_file) {
  const std::string cmd =
      std::string("'") + GYRE_CLI_PATH + "' " + args + " > '" + out_file.string() + "' 2>&1";
  const int status = std::system(cmd.c_str());
  return WIFEXITED(status) ? WEXITSTATUS(status) : -1;
}

void write_corpus(const fs::path& path, std::size_t n, std::uint64_t seed) {
  const char* labels[] = {"left", "right"};
  const char* cues[2][2] = {{"north", "hill"}, {"south", "river"}};
  const char* filler[] = {"we", "went", "to", "the", "old", "place", "by", "foot"};
  gyre::Rng rng(seed);
  std::ofstream out(path);
  for (std::size_t i = 0; i < n; ++i) {
    const std::size_t c = rng.below(2);
    const std::size_t len = 3 + rng.below(6), at = rng.below(len);
    out << labels[c] << '\t';
    for (std::size_t t = 0; t < len; ++t)
      out << (t ? " " : "") << (t == at ? cues[c][rng.below(2)] : filler[rng.below(8)]);
    out << '\n';
  }
}

}  // namespace

TEST_CASE("gyre compare and gyre report from the command line", "[compare][cli]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "compare" / "cli";
  fs::remove_all(dir);
  fs::create_directories(dir);
  write_corpus(dir / "train.tsv", 80, 5);
  write_corpus(dir / "dev.tsv", 30, 6);
  const fs::path log = dir / "stdout.txt";
  const std::string data =
      "--train '" + (dir / "train.tsv").string() + "' --dev '" + (dir / "dev.tsv").string() + "'";

  REQUIRE(run("compare " + data +
                  " --cells lstm,gru --hidden-sizes 4 --seeds 2 --epochs 1 --embedding-size 4 --out '" +
                  (dir / "out").string() + "' --quiet",
              log) == 0);
  const std::string text = gyre::read_file(log);
  INFO(text);
  REQUIRE(text.find("lstm-h4") != std::string::npos);
  REQUIRE(text.find("gru-h4") != std::string::npos);
  REQUIRE(text.find("McNemar") != std::string::npos);
  REQUIRE(fs::exists(dir / "out" / "compare.json"));
  REQUIRE(fs::exists(dir / "out" / "report.html"));
  REQUIRE(fs::exists(dir / "out" / "gru-h4-s2" / "metrics.json"));

  // Regression (issue 14): a rerun into the same --out with other settings used to reuse the old
  // runs because reuse looked only at cell, size and seed. Now every run is retrained and a line
  // names what differs; the run directories then hold the new settings.
  REQUIRE(run("compare " + data +
                  " --cells lstm,gru --hidden-sizes 4 --seeds 2 --epochs 2 --layers 2 --embedding-size 4 "
                  "--out '" +
                  (dir / "out").string() + "' --quiet",
              log) == 0);
  {
    const std::string again = gyre::read_file(log);
    INFO(again);
    for (const char* name : {"lstm-h4-s1", "lstm-h4-s2", "gru-h4-s1", "gru-h4-s2"}) {
      INFO(name);
      REQUIRE(again.find(std::string("retraining ") + name + ": --epochs 1 -> 2, --layers 1 -> 2") !=
              std::string::npos);
      const auto cfg = nlohmann::json::parse(gyre::read_file(dir / "out" / name / "config.json"));
      REQUIRE(cfg["epochs"] == 2);
      REQUIRE(cfg["layers"] == 2);
    }
    const auto cmp = nlohmann::json::parse(gyre::read_file(dir / "out" / "compare.json"));
    for (const auto& r : cmp["runs"]) REQUIRE(r["reused"] == false);
    REQUIRE(!fs::exists(dir / "out" / ".lstm-h4-s1.training"));
  }
  // The same command again reuses all four runs and retrains nothing.
  REQUIRE(run("compare " + data +
                  " --cells lstm,gru --hidden-sizes 4 --seeds 2 --epochs 2 --layers 2 --embedding-size 4 "
                  "--out '" +
                  (dir / "out").string() + "' --quiet",
              log) == 0);
  {
    const std::string same = gyre::read_file(log);
    INFO(same);
    REQUIRE(same.find("retraining") == std::string::npos);
    const auto cmp = nlohmann::json::parse(gyre::read_file(dir / "out" / "compare.json"));
    for (const auto& r : cmp["runs"]) REQUIRE(r["reused"] == true);
  }

  REQUIRE(run("report '" + (dir / "out" / "lstm-h4-s1").string() + "'", log) == 0);
  REQUIRE(fs::exists(dir / "out" / "lstm-h4-s1" / "report.html"));
  REQUIRE(run("report '" + (dir / "out").string() + "' --out '" + (dir / "cmp.html").string() + "'", log) ==
          0);
  REQUIRE(fs::exists(dir / "cmp.html"));

  // Progress into a log (not a terminal): the grid line before each run (run k of n, elapsed,
  // ETA), the run's own plain epoch lines, and one line per finished run.
  REQUIRE(run("compare " + data +
                  " --cells lstm,gru --hidden-sizes 4 --seeds 1 --epochs 2 --embedding-size 4 --out '" +
                  (dir / "progress").string() + "'",
              log) == 0);
  {
    const std::string text2 = gyre::read_file(log);
    INFO(text2);
    REQUIRE(text2.find("gyre compare: run 1 of 2: lstm-h4-s1 (elapsed ") != std::string::npos);
    REQUIRE(text2.find("ETA unknown until one run has trained") != std::string::npos);
    REQUIRE(text2.find("gyre compare: run 2 of 2: gru-h4-s1 (elapsed ") != std::string::npos);
    REQUIRE(text2.find(", ETA ") != std::string::npos);
    REQUIRE(text2.find("epoch 2/2") != std::string::npos);
    REQUIRE(text2.find("[2/2] gru-h4-s1") != std::string::npos);
    REQUIRE(text2.find('\r') == std::string::npos);  // no in-place redraws in a log
    // One seed: the verdict says so and the table shows no spread.
    REQUIRE(text2.find("one seed per configuration") != std::string::npos);
    REQUIRE(text2.find("dev scores") != std::string::npos);
    // Costs beside accuracy.
    REQUIRE(text2.find("ms/text") != std::string::npos);
    REQUIRE(text2.find("front") != std::string::npos);
    REQUIRE(fs::exists(dir / "progress" / "lstm-h4-s1" / "model-int8.gyre"));
  }

  // Bad usage and bad settings exit with 2.
  REQUIRE(run("compare " + data + " --cells lstm,elman --out '" + (dir / "bad").string() + "'", log) == 2);
  REQUIRE(gyre::read_file(log).find("elman") != std::string::npos);
  REQUIRE(run("compare --train x.tsv", log) == 2);
  REQUIRE(run("report '" + dir.string() + "'", log) != 0);
}

TEST_CASE("gyre compare reads CSV with the text and label columns chosen by header name", "[compare][cli]") {
  // Spreadsheet-style exports of the same invented corpus: quoted texts holding commas and quotes,
  // the label in a column named "direction", the text in "note", an id column first.
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "compare" / "csv";
  fs::remove_all(dir);
  fs::create_directories(dir);
  auto to_csv = [&](const fs::path& tsv, const fs::path& csv) {
    std::ifstream in(tsv);
    std::ofstream out(csv);
    out << "id,note,direction\r\n";
    std::size_t id = 0;
    for (std::string line; std::getline(in, line); ++id) {
      const auto tab = line.find('\t');
      out << id << ",\"" << line.substr(tab + 1) << ", \"\"noted\"\"\"," << line.substr(0, tab) << "\r\n";
    }
  };
  write_corpus(dir / "train.tsv", 80, 5);
  write_corpus(dir / "dev.tsv", 30, 6);
  write_corpus(dir / "test.tsv", 30, 7);
  for (const char* name : {"train", "dev", "test"})
    to_csv(dir / (std::string(name) + ".tsv"), dir / (std::string(name) + ".csv"));
  const fs::path log = dir / "stdout.txt";
  const std::string data = "--train '" + (dir / "train.csv").string() + "' --dev '" +
                           (dir / "dev.csv").string() + "' --test '" + (dir / "test.csv").string() + "'";
  REQUIRE(run("compare " + data +
                  " --text-column note --label-column direction --cells gru --hidden-sizes 4 --seeds 1 "
                  "--epochs 1 --embedding-size 4 --out '" +
                  (dir / "out").string() + "' --quiet",
              log) == 0);
  const auto cmp = nlohmann::json::parse(gyre::read_file(dir / "out" / "compare.json"));
  REQUIRE(cmp["runs"].size() == 1);
  const auto metrics = nlohmann::json::parse(gyre::read_file(dir / "out" / "gru-h4-s1" / "metrics.json"));
  CHECK(metrics["train_examples"] == 80);
  CHECK(metrics["dev_examples"] == 30);
  CHECK(cmp["runs"][0]["test_metric"].is_number());

  // Without the column options the header has no "text" column: exit 2, file, line and the columns.
  REQUIRE(run("compare " + data + " --cells gru --hidden-sizes 4 --seeds 1 --epochs 1 --out '" +
                  (dir / "bad").string() + "' --quiet",
              log) == 2);
  const std::string err = gyre::read_file(log);
  INFO(err);
  CHECK(err.find(":1: no column named 'text' in the header (columns: id, note, direction)") !=
        std::string::npos);
  CHECK(err.rfind("gyre: error: ", 0) == 0);
}
