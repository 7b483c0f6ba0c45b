// `gyre vocab` through the built binary (GYRE_CLI_PATH).

#include <catch2/catch.hpp>

#ifdef GYRE_CLI_PATH

#include <sys/wait.h>

#include <cstdlib>
#include <filesystem>
#include <string>

#include "gyre/core/file.hpp"
#include "gyre/text/vocab.hpp"

namespace {

namespace fs = std::filesystem;

struct Run {
  int exit_code = -1;
  std::string out, err;
};

fs::path cli_dir() {
  const auto dir = fs::path(GYRE_TEST_TMP_DIR) / "vocab_cli";
  fs::create_directories(dir);
  return dir;
}

Run run_gyre(const std::string& args) {
  const auto out = cli_dir() / "stdout.txt", err = cli_dir() / "stderr.txt";
  const std::string command =
      std::string("'") + GYRE_CLI_PATH + "' " + args + " > '" + out.string() + "' 2> '" + err.string() + "'";
  const int status = std::system(command.c_str());
  Run r;
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  r.out = gyre::read_file(out);
  r.err = gyre::read_file(err);
  return r;
}

fs::path write(const std::string& name, const std::string& content) {
  const auto path = cli_dir() / name;
  gyre::write_file_atomic(path, content);
  return path;
}

}  // namespace

TEST_CASE("gyre vocab builds, reports and saves", "[cli]") {
  // Invented toy corpus: 12 'book', 1 'cancel' -> imbalance ratio 12 > 10 triggers the warning.
  std::string train;
  for (int i = 0; i < 12; ++i) train += "book\tFix my kettle on Friday, please!\n";
  train += "cancel\tCancel the Kettle visit\n";
  const auto train_path = write("train.tsv", train);
  const auto dev_path = write("dev.tsv", "book\tfix my toaster\ncancel\tcancel it\n");
  const auto out_path = cli_dir() / "sub" / "vocab.json";

  const Run r = run_gyre("vocab --train '" + train_path.string() + "' --dev '" + dev_path.string() +
                         "' --out '" + out_path.string() + "' --min-count 2");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  // 13 examples; tokens: 12 x 8 ("fix my kettle on friday , please !") + 4 = 100.
  CHECK_THAT(r.out, Catch::Contains("examples          13"));
  CHECK_THAT(r.out, Catch::Contains("tokens            100"));
  CHECK_THAT(r.out, Catch::Contains("types             11"));
  // min count 2 keeps the 8 repeated types + "kettle" is already among them -> 8 + 2 reserved.
  CHECK_THAT(r.out, Catch::Contains("vocabulary size   10"));
  CHECK_THAT(r.out, Catch::Contains("p50 8, p90 8, p99 8, max 8"));
  // dev tokens: fix my toaster cancel it -> toaster, cancel, it are unknown: 3/5.
  CHECK_THAT(r.out, Catch::Contains("OOV rate          60.0% (3 tokens"));
  CHECK_THAT(r.out, Catch::Contains("warning: imbalanced labels: 'book' has 12, 'cancel' only 1"));

  const auto file = gyre::text::load_vocab_file(out_path);
  CHECK(file.vocab.size() == 10);
  CHECK(file.vocab.id("kettle") > 1);
  CHECK(file.vocab.id("cancel") == gyre::text::Vocab::kUnk);
  CHECK(file.labels.size() == 2);
  // gyre train's defaults (src/train/config.cpp): max_tokens 1000, the rest as TokenizerSettings{}.
  gyre::text::TokenizerSettings train_defaults;
  train_defaults.max_tokens = 1000;
  CHECK(file.tokenizer == train_defaults);

  SECTION("tokenizer flags are saved") {
    const Run s = run_gyre(
        "vocab --train '" + train_path.string() + "' --out '" + out_path.string() +
        "' --tokenizer chars --no-nfkc --no-case-fold --fold-digits --no-keep-punctuation --max-tokens 5");
    REQUIRE(s.exit_code == 0);
    const auto f = gyre::text::load_vocab_file(out_path);
    CHECK(f.tokenizer.mode == gyre::text::TokenizerMode::kChars);
    CHECK_FALSE(f.tokenizer.nfkc);
    CHECK_FALSE(f.tokenizer.case_fold);
    CHECK(f.tokenizer.fold_digits);
    CHECK_FALSE(f.tokenizer.keep_punctuation);
    CHECK(f.tokenizer.max_tokens == 5);
    CHECK_THAT(s.out, Catch::Contains("max 5"));
  }
}

TEST_CASE("gyre vocab: bad input exits with 2 and names the line", "[cli]") {
  const auto bad = write("bad.tsv", "book\tfine\nno tab on this line\n");
  fs::remove(cli_dir() / "x.json");  // left by an earlier run
  Run r = run_gyre("vocab --train '" + bad.string() + "' --out '" + (cli_dir() / "x.json").string() + "'");
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains(bad.string() + ":2: expected TAB"));
  CHECK_FALSE(fs::exists(cli_dir() / "x.json"));

  r = run_gyre("vocab --train '" + bad.string() + "' --skip-bad-lines --out '" +
               (cli_dir() / "x.json").string() + "'");
  CHECK(r.exit_code == 0);
  CHECK_THAT(r.err, Catch::Contains("skipped 1 bad record"));
  CHECK_THAT(r.err, Catch::Contains("line 2"));

  CHECK(run_gyre("vocab --train '" + bad.string() + "' --tokenizer bytes").exit_code == 2);
  CHECK(run_gyre("vocab --train '" + (cli_dir() / "absent.tsv").string() + "'").exit_code == 2);
  CHECK(run_gyre("vocab").exit_code == 2);
  const Run help = run_gyre("vocab --help");
  CHECK(help.exit_code == 0);
  CHECK_THAT(help.out, Catch::Contains("Example:"));
}

#endif  // GYRE_CLI_PATH
