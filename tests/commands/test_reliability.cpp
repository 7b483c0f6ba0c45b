// Issue 10 (guarantees on hostile input), through the built binary: malformed tagging files
// exit 2 naming file and line (items 4 and 9), settings that cannot fit in memory are refused up
// front with what they would need (item 10), warnings survive --quiet, a vocabulary cut to almost
// nothing is pointed out, and a model file's path is named once in an error.

#include <catch2/catch.hpp>

#ifdef GYRE_CLI_PATH

#include <filesystem>
#include <fstream>
#include <string>

#include "support/run_cli.hpp"

namespace {

namespace fs = std::filesystem;
using Catch::Matchers::Contains;
using gyre::test::CliRun;

fs::path dir() {
  return fs::path(GYRE_TEST_TMP_DIR) / "reliability";
}

CliRun gyre_cli(const std::vector<std::string>& args) {
  return gyre::test::run_cli(dir(), args);
}

const std::string kDemo = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/";
const std::string kFixtureModel = std::string(GYRE_FIXTURES_DIR) + "/runtime/torch_lstm_uni_last.gyre";

// The first `head` lines of a demo corpus, then `insert`, then the rest.
std::string demo_with(const std::string& name, std::size_t head, const std::string& insert) {
  std::ifstream in(kDemo + name);
  std::string out, line;
  for (std::size_t i = 0; std::getline(in, line); ++i) {
    if (i == head) out += insert;
    out += line + "\n";
  }
  fs::create_directories(dir());
  const fs::path path = dir() / ("edited-" + name);
  gyre::write_file_atomic(path, out);
  return path.string();
}

std::size_t occurrences(const std::string& text, const std::string& what) {
  std::size_t n = 0;
  for (std::size_t at = text.find(what); at != std::string::npos; at = text.find(what, at + 1)) ++n;
  return n;
}

// Exit code 2, nothing created, one error line containing `what`.
void refused(const CliRun& r, const std::string& what) {
  INFO("stdout: " << r.out << "\nstderr: " << r.err);
  CHECK(r.exit_code == 2);
  CHECK(gyre::test::line_count(r.err) == 1);
  CHECK_THAT(r.err, Contains("gyre: error: ") && Contains(what));
}

}  // namespace

TEST_CASE("a 3-column line in a tagging file is an error with file and line, not a classifier", "[cli]") {
  // Line 41 of the demo slot corpus gets a third column.
  const std::string slots = demo_with("slots.train.tsv", 40, "kettle\tB-appliance\tB-part\n");
  const std::string out = (dir() / "never-3col").string();
  fs::remove_all(out);
  refused(gyre_cli({"train", "--train", slots, "--out", out}), slots + ":41: expected exactly one TAB");
  refused(gyre_cli({"vocab", "--train", slots}), slots + ":41: expected exactly one TAB");
  CHECK_FALSE(fs::exists(out));
}

TEST_CASE("a malformed tag exits 2 with file and line", "[cli]") {
  const std::string slots = demo_with("slots.train.tsv", 40, "extra\tX-foo\n");
  const std::string out = (dir() / "never-tag").string();
  fs::remove_all(out);
  refused(gyre_cli({"train", "--train", slots, "--out", out}), slots + ":41: malformed tag 'X-foo'");
  CHECK_FALSE(fs::exists(out));
  // eval reads labelled data with the same reader.
  const std::string dev = demo_with("slots.dev.tsv", 0, "at\tO\nnine\tT-time\n\n");
  refused(
      gyre_cli({"eval", std::string(GYRE_FIXTURES_DIR) + "/runtime/torch_gru_bi_tag.gyre", "--test", dev}),
      dev + ":2: malformed tag 'T-time'");
}

TEST_CASE("training that cannot fit in memory is refused up front with what it would need", "[cli]") {
  const std::string out = (dir() / "never-big").string();
  fs::remove_all(out);
  // 8 layers of 60000 LSTM units: 4H(D+H+1) parameters per layer (one bias vector, the usual
  // LSTM count; common knowledge, no single source) = 1.44e10 for the first (D = 64) and
  // 2.88e10 for each other (D = H): 2.16e11 in all, with gradients and Adam's two moments 16
  // bytes each, about 3.2 TiB. It used to allocate until "out of memory" (exit 1).
  const auto r = gyre_cli({"train", "--train", kDemo + "intents.train.tsv", "--hidden-size", "60000",
                           "--layers", "8", "--out", out});
  refused(r, "--hidden-size: training this model needs at least ");
  CHECK_THAT(r.err, Contains("2.16e+11 parameters") && Contains("GiB") && Contains("available"));
  CHECK_FALSE(fs::exists(out));
}

TEST_CASE("gyre bench refuses impossible thread counts, batches and durations up front", "[cli]") {
  const auto threads = gyre_cli({"bench", kFixtureModel, "--threads", "1,100000"});
  refused(threads, "--threads: this benchmark needs at least ");
  CHECK_THAT(threads.err, Contains("100000 threads"));
  refused(gyre_cli({"bench", kFixtureModel, "--batch-size", "100000000", "--tokens", "1000"}),
          "--batch-size: this benchmark needs at least ");
  refused(gyre_cli({"bench", kFixtureModel, "--threads", "0"}),
          "--threads: thread counts must be at least 1");
  for (const char* seconds : {"nan", "inf", "-1", "0"}) {
    INFO(seconds);
    refused(gyre_cli({"bench", kFixtureModel, "--seconds", seconds}), "is not a number of seconds");
  }
}

TEST_CASE("warnings survive --quiet: skipped lines, and a tiny vocabulary is pointed out", "[cli]") {
  const std::string intents = demo_with("intents.train.tsv", 100, "no tab on this line\n");
  const std::string out = (dir() / "quiet").string();
  fs::remove_all(out);
  const auto r = gyre_cli({"train", "--train", intents, "--dev", kDemo + "intents.dev.tsv", "--epochs", "1",
                           "--hidden-size", "8", "--embedding-size", "8", "--skip-bad-lines", "--quiet",
                           "--min-count", "1000", "--out", out});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.err, Contains("warning: " + intents + ": skipped 1 bad record(s) (lines 101)"));
  CHECK_THAT(r.err, Contains("warning: --min-count 1000 leaves a vocabulary of ") &&
                        Contains("of the training tokens") && Contains("become <unk>"));
  // The default settings leave no such warning.
  fs::remove_all(out);
  const auto plain =
      gyre_cli({"train", "--train", kDemo + "intents.train.tsv", "--dev", kDemo + "intents.dev.tsv",
                "--epochs", "1", "--hidden-size", "8", "--embedding-size", "8", "--quiet", "--out", out});
  REQUIRE(plain.exit_code == 0);
  CHECK(plain.err.find("warning") == std::string::npos);
}

TEST_CASE("an error about a model file names its path once", "[cli]") {
  fs::create_directories(dir());
  const fs::path cut = dir() / "cut.gyre";
  {
    std::ifstream in(kFixtureModel, std::ios::binary);
    std::string bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    gyre::write_file_atomic(cut, bytes.substr(0, bytes.size() - 500));
  }
  const std::string data = demo_with("intents.dev.tsv", 0, "");
  for (const std::vector<std::string>& args :
       {std::vector<std::string>{"inspect", cut.string()},
        {"bench", cut.string()},
        {"predict", cut.string()},
        {"eval", cut.string(), "--test", data},
        {"export", cut.string(), "--out", (dir() / "x.gyre").string()}}) {
    const auto r = gyre_cli(args);
    INFO(args[0] << ": " << r.err);
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Contains("file is truncated"));
    CHECK(occurrences(r.err, cut.string()) == 1);
  }
}

#endif
