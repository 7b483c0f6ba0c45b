// gyre predict --threads N: the output must be byte-identical to one thread (same records, same
// order, same digits), for a classifier and a tagger, TSV and JSON Lines, with error lines and a
// last batch that is not full. Runs the CLI binary (build the default target first).

#include <catch2/catch.hpp>

#include <sys/wait.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <optional>
#include <sstream>
#include <string>

#include "gyre/core/file.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/trainer.hpp"

namespace fs = std::filesystem;

#ifdef GYRE_CLI_PATH
namespace {

fs::path fresh_dir(const std::string& name) {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "cli" / name;
  fs::remove_all(dir);
  fs::create_directories(dir.parent_path());
  return dir;
}

fs::path train_small(const std::string& name, const std::string& corpus,
                     std::optional<gyre::model::OutputKind> output) {
  gyre::train::TrainConfig c;
  c.train = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/" + corpus;
  c.embedding_size = 16;
  c.hidden_size = 16;
  c.epochs = 1;
  c.output = output;
  gyre::train::TrainOptions o;
  o.out = fresh_dir(name);
  o.quiet = true;
  gyre::train::train(c, o);
  return o.out;
}

std::string run_predict(const fs::path& model, const fs::path& input, const std::string& args,
                        const fs::path& out) {
  const std::string cmd = std::string("'") + GYRE_CLI_PATH + "' predict '" + model.string() + "' --input '" +
                          input.string() + "' " + args + " > '" + out.string() + "'";
  REQUIRE(std::system(cmd.c_str()) == 0);
  return gyre::read_file(out);
}

std::size_t count_lines(const std::string& s) {
  std::size_t n = 0;
  for (const char c : s) n += c == '\n';
  return n;
}

}  // namespace

TEST_CASE("predict --threads 2 and 3 write exactly the bytes of --threads 1", "[train][cli][slow]") {
  const fs::path dir = fresh_dir("predict_threads");
  fs::create_directories(dir);
  // Input: the demo intents test texts (label column dropped), plus an empty line and a line of
  // invalid UTF-8 in the middle, so error records are interleaved with predictions.
  std::ifstream test(std::string(GYRE_SOURCE_DIR) + "/corpora/demo/intents.test.tsv");
  std::string line, text;
  std::getline(test, line);  // header
  std::size_t n = 0;
  while (std::getline(test, line)) {
    text += line.substr(line.find('\t') + 1) + "\n";
    if (++n == 50) text += "\n\xff\xfe broken\n";
  }
  const fs::path input = dir / "input.txt";
  gyre::write_file_atomic(input, text);
  const std::size_t input_lines = count_lines(text);
  REQUIRE(input_lines > 300);

  const fs::path classifier = train_small("predict_threads_intents", "intents.train.tsv", std::nullopt);
  const fs::path tagger =
      train_small("predict_threads_slots", "slots.train.tsv", gyre::model::OutputKind::kCrf);
  for (const auto& model : {classifier, tagger}) {
    for (const std::string format : {"tsv", "jsonl"}) {
      // batch size 7: many groups, and a last group whose batches are partly empty.
      const std::string base = "--format " + format + " --batch-size 7 --top-k 3";
      const std::string one = run_predict(model, input, base + " --threads 1", dir / "one.out");
      CHECK(count_lines(one) == input_lines);
      CHECK(one.find("invalid UTF-8") != std::string::npos);
      for (const int threads : {2, 3}) {
        const std::string many =
            run_predict(model, input, base + " --threads " + std::to_string(threads), dir / "many.out");
        INFO(model.filename().string() << " " << format << " threads " << threads);
        CHECK(many == one);
      }
    }
  }
}

TEST_CASE("predict --threads 2 --on-error fail writes the batches before the bad line, then fails",
          "[train][cli]") {
  const fs::path dir = fresh_dir("predict_threads_fail");
  fs::create_directories(dir);
  const fs::path model = train_small("predict_threads_fail_model", "intents.train.tsv", std::nullopt);
  std::string text;
  for (int i = 0; i < 20; ++i) text += "my kettle stopped heating\n";
  text += "\xff\n";
  for (int i = 0; i < 20; ++i) text += "how much is a repair\n";
  const fs::path input = dir / "input.txt";
  gyre::write_file_atomic(input, text);
  for (const int threads : {1, 2}) {
    const std::string cmd = std::string("'") + GYRE_CLI_PATH + "' predict '" + model.string() +
                            "' --input '" + input.string() + "' --batch-size 4 --on-error fail --threads " +
                            std::to_string(threads) + " > '" + (dir / "out.txt").string() + "' 2>/dev/null";
    const int status = std::system(cmd.c_str());
    INFO("threads " << threads);
    CHECK(WEXITSTATUS(status) == 2);
    // Line 21 is bad: its batch (lines 21-24) is not written, the 5 batches before it are.
    CHECK(count_lines(gyre::read_file(dir / "out.txt")) == 20);
  }
}
#endif
