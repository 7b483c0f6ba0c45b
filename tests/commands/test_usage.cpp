// Usage errors through the built binary: one "gyre: error:" line, a suggestion, exit code 2.

#include <catch2/catch.hpp>

#ifdef GYRE_CLI_PATH

#include <filesystem>
#include <string>

#include "support/run_cli.hpp"

namespace {

namespace fs = std::filesystem;
using Catch::Matchers::Contains;
using Catch::Matchers::StartsWith;
using gyre::test::CliRun;

fs::path dir() {
  return fs::path(GYRE_TEST_TMP_DIR) / "usage";
}

CliRun gyre_cli(const std::vector<std::string>& args) {
  return gyre::test::run_cli(dir(), args);
}

const std::string kIntents = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/intents.train.tsv";

// A usage error is exactly one line on stderr, nothing on stdout, exit code 2.
void require_one_line_error(const CliRun& r) {
  INFO("stdout: " << r.out << "\nstderr: " << r.err);
  REQUIRE(r.exit_code == 2);
  CHECK(r.out.empty());
  CHECK(gyre::test::line_count(r.err) == 1);
  CHECK_THAT(r.err, StartsWith("gyre: error: "));
}

std::string write(const std::string& name, const std::string& content) {
  fs::create_directories(dir());
  gyre::write_file_atomic(dir() / name, content);
  return (dir() / name).string();
}

}  // namespace

TEST_CASE("a misspelt option gets one line with the closest option", "[cli]") {
  const auto r = gyre_cli({"train", "--train", kIntents, "--epoch", "1", "--out", (dir() / "run").string()});
  require_one_line_error(r);
  CHECK_THAT(r.err, Contains("unknown option '--epoch'") && Contains("did you mean '--epochs'") &&
                        Contains("gyre train --help"));
  const auto c = gyre_cli({"tran", "--train", kIntents});
  require_one_line_error(c);
  CHECK_THAT(c.err, Contains("unknown command 'tran'; did you mean 'train'"));
  const auto v =
      gyre_cli({"train", "--train", kIntents, "--cell", "lstn", "--out", (dir() / "run").string()});
  require_one_line_error(v);
  CHECK_THAT(v.err, Contains("--cell: 'lstn' is not one of lstm, gru; did you mean 'lstm'"));
  CHECK_FALSE(fs::exists(dir() / "run"));
}

TEST_CASE("contradicting and out-of-range settings are refused before any work", "[cli]") {
  const std::string out = (dir() / "never").string();
  const auto both =
      gyre_cli({"train", "--train", kIntents, "--bidirectional", "--unidirectional", "--out", out});
  require_one_line_error(both);
  CHECK_THAT(both.err, Contains("--bidirectional and --unidirectional contradict each other"));
  const auto flags = gyre_cli({"train", "--train", kIntents, "--nfkc", "--no-nfkc", "--out", out});
  require_one_line_error(flags);
  const auto layers = gyre_cli({"train", "--train", kIntents, "--layers", "1000", "--out", out});
  require_one_line_error(layers);
  CHECK_THAT(layers.err, Contains("--layers: 1000 is out of range: expected integer in [1, 32]"));
  const auto hidden = gyre_cli({"train", "--train", kIntents, "--hidden-size", "99999999999", "--out", out});
  require_one_line_error(hidden);
  const auto rate = gyre_cli({"train", "--train", kIntents, "--learning-rate", "nan", "--out", out});
  require_one_line_error(rate);
  CHECK_THAT(rate.err, Contains("--learning-rate: 'nan' is not a number"));
  const auto threads = gyre_cli({"train", "--train", kIntents, "--threads", "100000", "--out", out});
  require_one_line_error(threads);
  CHECK_FALSE(fs::exists(out));
}

TEST_CASE("settings files (--config): duplicate keys, null values and unknown keys are refused with the line",
          "[cli]") {
  const std::string out = (dir() / "never").string();
  const auto dup =
      write("dup.json", "{\n  \"train\": \"" + kIntents + "\",\n  \"epochs\": 2,\n  \"epochs\": 3\n}\n");
  const auto r = gyre_cli({"train", "--config", dup, "--out", out});
  INFO(r.err);
  REQUIRE(r.exit_code == 2);
  CHECK_THAT(r.err, Contains("dup.json:4") && Contains("\"epochs\" is given twice"));
  const auto null = write("null.json", "{\n  \"train\": \"" + kIntents + "\",\n  \"hidden_size\": null\n}\n");
  const auto n = gyre_cli({"train", "--config", null, "--out", out});
  REQUIRE(n.exit_code == 2);
  CHECK_THAT(n.err, Contains("null.json:3") && Contains("null is not a value"));
  const auto typo = write("typo.json", "{\n  \"train\": \"" + kIntents + "\",\n  \"hiden_size\": 8\n}\n");
  const auto t = gyre_cli({"train", "--config", typo, "--out", out});
  REQUIRE(t.exit_code == 2);
  CHECK_THAT(t.err, Contains("typo.json:3") && Contains("did you mean 'hidden_size'"));
  CHECK_FALSE(fs::exists(out));
}

#endif
