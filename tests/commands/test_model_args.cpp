// One language across commands, through the built binary: every command that reads a model takes
// a run directory (inspect and bench too), option names and defaults are shared (bench
// --batch-size, vocab's tokenizer and vocabulary options are train's), and the vocabulary file
// that `gyre vocab` writes is one `gyre train --vocab` uses.

#include <catch2/catch.hpp>

#ifdef GYRE_CLI_PATH

#include <cmath>
#include <filesystem>
#include <map>
#include <set>
#include <sstream>
#include <string>

#include <nlohmann/json.hpp>

#include "gyre/text/vocab.hpp"
#include "support/run_cli.hpp"

namespace {

namespace fs = std::filesystem;
using Catch::Matchers::Contains;
using Catch::Matchers::StartsWith;
using gyre::test::CliRun;

fs::path dir() {
  return fs::path(GYRE_TEST_TMP_DIR) / "model_args";
}

CliRun gyre_cli(const std::vector<std::string>& args) {
  return gyre::test::run_cli(dir(), args);
}

// A small invented two-label corpus (demo scenario wording); punctuation-only tokens ("!", ",")
// make keep_punctuation matter.
std::string corpus() {
  fs::create_directories(dir());
  const auto path = dir() / "small.tsv";
  std::string text;
  // Texts differ (a number), so the hash-chosen dev split takes some of each label.
  for (int i = 0; i < 20; ++i) {
    const std::string n = std::to_string(i);
    text += "book\tcan someone fix my kettle " + n + " on friday , please !\n";
    text += "cancel\tplease cancel the repair visit " + n + " for monday !\n";
  }
  gyre::write_file_atomic(path, text);
  return path.string();
}

// One tiny run shared by the tests of this file (trained once per test process).
std::string trained_run() {
  static const std::string run = [] {
    const auto out = dir() / "run";
    fs::remove_all(out);
    const auto r = gyre_cli({"train", "--train", corpus(), "--epochs", "1", "--hidden-size", "8",
                             "--embedding-size", "8", "--quiet", "--out", out.string()});
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    return out.string();
  }();
  return run;
}

void require_one_line_error(const CliRun& r) {
  INFO("stdout: " << r.out << "\nstderr: " << r.err);
  REQUIRE(r.exit_code == 2);
  CHECK(gyre::test::line_count(r.err) == 1);
  CHECK_THAT(r.err, StartsWith("gyre: error: "));
}

}  // namespace

TEST_CASE("inspect takes a run directory and pretty-prints the header", "[cli]") {
  const std::string run = trained_run();
  const auto r = gyre_cli({"inspect", run, "--header", "--no-tensors"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("selected.bin") && Contains("training checkpoint"));
  // Indented JSON (nlohmann dump(2)): keys start lines, two spaces in.
  CHECK_THAT(r.out, Contains("{\n  \""));
  CHECK_THAT(r.out, Contains("\n  \"architecture\": {\n"));
  const auto help = gyre_cli({"inspect", "--help"});
  CHECK_THAT(help.out, Contains("gyre inspect runs/intents-lstm"));
  CHECK_THAT(help.out, !Contains("runs/intents/model.gyre"));
  const auto missing = gyre_cli({"inspect", (dir() / "absent").string()});
  CHECK(missing.exit_code != 0);
  CHECK_THAT(missing.err, Contains("absent"));
}

TEST_CASE("bench takes a run directory and times text-in as well as ids-in", "[cli]") {
  const std::string run = trained_run();
  const auto r =
      gyre_cli({"bench", run, "--seconds", "0.3", "--threads", "1", "--batch-size", "4", "--tokens", "6"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("timed as exported at f32"));
  CHECK_THAT(r.out, Contains("latency, model only (6 token ids in): p50"));
  CHECK_THAT(r.out, Contains("latency, end to end (text in,") && Contains("tokens after tokenization): p50"));
  CHECK_THAT(r.out, Contains("throughput, model only (batch of 4)"));
  CHECK_THAT(r.out, !Contains("batched call"));
  // --batched adds the batch through Context::classify_batch_ids.
  const auto batched = gyre_cli({"bench", run, "--seconds", "0.3", "--threads", "1,2", "--batch-size", "5",
                                 "--tokens", "6", "--batched"});
  INFO(batched.err);
  REQUIRE(batched.exit_code == 0);
  CHECK_THAT(batched.out, Contains("threads 2") && Contains("throughput, batched call (batch of 5): "));
  // The old spelling is gone: one vocabulary (--batch-size everywhere).
  const auto old = gyre_cli({"bench", run, "--batch", "4"});
  require_one_line_error(old);
  CHECK_THAT(old.err, Contains("unknown option '--batch'") && Contains("did you mean '--batch-size'"));
}

TEST_CASE("vocab shares train's option names and defaults, and train --vocab uses its file", "[cli]") {
  const std::string train = corpus();
  const auto vocab_path = (dir() / "vocab.json").string();
  // Defaults are train's: vocabulary capped at 50000, texts at 1000 tokens.
  const auto r = gyre_cli({"vocab", "--train", train, "--out", vocab_path});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("max size 50000") && Contains("max 1000 tokens"));
  CHECK_THAT(r.out, Contains("gyre train --vocab " + vocab_path));

  // Old names are refused with the shared one suggested.
  const auto old = gyre_cli({"vocab", "--train", train, "--drop-punctuation"});
  require_one_line_error(old);
  CHECK_THAT(old.err, Contains("unknown option '--drop-punctuation'"));
  const auto size = gyre_cli({"vocab", "--train", train, "--max-size", "10"});
  require_one_line_error(size);
  CHECK_THAT(size.err, Contains("did you mean '--max-vocab-size'"));
  const auto range = gyre_cli({"vocab", "--train", train, "--max-vocab-size", "2"});
  CHECK(range.exit_code == 2);
  CHECK_THAT(range.err, Contains("--max-vocab-size"));

  SECTION("train with the file vocab wrote: same tokens, no second vocabulary") {
    const auto out = (dir() / "with-vocab").string();
    fs::remove_all(out);
    const auto t = gyre_cli({"train", "--train", train, "--vocab", vocab_path, "--epochs", "1",
                             "--hidden-size", "8", "--embedding-size", "8", "--quiet", "--out", out});
    INFO(t.err);
    REQUIRE(t.exit_code == 0);
    const auto given = gyre::text::load_vocab_file(vocab_path);
    const auto used = gyre::text::load_vocab_file(fs::path(out) / "vocab.json");
    CHECK(used.vocab.size() == given.vocab.size());
    CHECK(used.tokenizer == given.tokenizer);
    for (std::size_t id = 0; id < given.vocab.size(); ++id)
      CHECK(used.vocab.token(static_cast<std::int32_t>(id)) ==
            given.vocab.token(static_cast<std::int32_t>(id)));
  }
  SECTION("a vocabulary built with other tokenizer settings is refused before any work") {
    const auto other = (dir() / "vocab-nopunct.json").string();
    REQUIRE(gyre_cli({"vocab", "--train", train, "--no-keep-punctuation", "--out", other}).exit_code == 0);
    const auto out = (dir() / "mismatch").string();
    fs::remove_all(out);
    const auto t = gyre_cli({"train", "--train", train, "--vocab", other, "--epochs", "1", "--out", out});
    INFO(t.err);
    CHECK(t.exit_code == 2);
    CHECK_THAT(t.err,
               Contains("--vocab") && Contains("keep_punctuation off but this run has keep_punctuation on"));
    CHECK_FALSE(fs::exists(out));
  }
}

TEST_CASE("a header line and swapped columns are named with file:line by train, eval and vocab", "[cli]") {
  fs::create_directories(dir());
  // Invented review texts (demo scenario); 24 lines, every text different and with spaces.
  std::string swapped, header = "category\tmessage\n";
  const char* texts[] = {"Couldn't be happier with the repair",
                         "the kettle works again",
                         "technician was late",
                         "fair price for the part",
                         "would book again",
                         "still leaks a bit"};
  for (int i = 0; i < 24; ++i) {
    const std::string text = std::string(texts[i % 6]) + " (visit " + std::to_string(i) + ")";
    const std::string label = i % 2 ? "positive" : "negative";
    swapped += text + "\t" + label + "\n";
    header += label + "\t" + text + "\n";
  }
  const auto swapped_path = (dir() / "swapped.tsv").string();
  const auto header_path = (dir() / "header.tsv").string();
  gyre::write_file_atomic(swapped_path, swapped);
  gyre::write_file_atomic(header_path, header);
  const auto out = (dir() / "never").string();
  for (const auto& cmd : std::vector<std::vector<std::string>>{
           {"train", "--train", swapped_path, "--out", out},
           {"vocab", "--train", swapped_path, "--out", (dir() / "v.json").string()},
           {"eval", trained_run(), "--test", swapped_path}}) {
    const auto r = gyre_cli(cmd);
    INFO(cmd.front() << ": " << r.err);
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err,
               StartsWith("gyre: error: " + swapped_path + ":1: the label column looks like free text"));
    CHECK_THAT(r.err, Contains("are the columns swapped?"));
  }
  for (const auto& cmd : std::vector<std::vector<std::string>>{
           {"train", "--train", header_path, "--out", out},
           {"vocab", "--train", header_path, "--out", (dir() / "v.json").string()},
           {"eval", trained_run(), "--test", header_path}}) {
    const auto r = gyre_cli(cmd);
    INFO(cmd.front() << ": " << r.err);
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Contains(header_path + ":1: looks like a header line ('category<TAB>message')"));
  }
  CHECK_FALSE(fs::exists(out));
}

TEST_CASE(
    "CSV input: train, eval and vocab choose the columns by header name, and errors give line and column",
    "[cli]") {
  fs::create_directories(dir());
  // Spreadsheet-style export: quoted texts holding commas, quotes and a line break.
  std::string csv = "id,message,category\r\n";
  for (int i = 0; i < 20; ++i) {
    const std::string n = std::to_string(i);
    csv += n + ",\"can someone fix my kettle " + n + ", on friday?\",book\r\n";
    csv += n + ",\"please cancel the \"\"repair\"\" visit " + n + "\nfor monday\",cancel\r\n";
  }
  const auto path = (dir() / "messages.csv").string();
  gyre::write_file_atomic(path, csv);
  const auto out = (dir() / "csv-run").string();
  fs::remove_all(out);

  const auto no_columns = gyre_cli({"train", "--train", path, "--out", out});
  CHECK(no_columns.exit_code == 2);
  CHECK_THAT(no_columns.err,
             Contains(path + ":1: no column named 'text' in the header (columns: id, message, "
                             "category)") &&
                 Contains("--text-column NAME"));
  const auto t =
      gyre_cli({"train", "--train", path, "--text-column", "message", "--label-column", "category",
                "--epochs", "1", "--hidden-size", "8", "--embedding-size", "8", "--quiet", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  // eval reads the columns the run was trained with.
  const auto e = gyre_cli({"eval", out, "--test", path});
  INFO(e.err);
  REQUIRE(e.exit_code == 0);
  CHECK_THAT(e.out, Contains("(40 examples)"));
  const auto v = gyre_cli({"vocab", "--train", path, "--text-column", "message", "--label-column", "category",
                           "--out", (dir() / "csv-vocab.json").string()});
  INFO(v.err);
  REQUIRE(v.exit_code == 0);
  CHECK_THAT(v.out, Contains("(csv, classify)") && Contains("examples          40"));

  // A quote closed too early: file, line and column.
  const auto broken = (dir() / "broken.csv").string();
  gyre::write_file_atomic(broken, "message,category\n\"fine\" thanks,praise\n");
  const auto b =
      gyre_cli({"vocab", "--train", broken, "--text-column", "message", "--label-column", "category"});
  CHECK(b.exit_code == 2);
  CHECK_THAT(b.err, Contains(broken + ":2: column 7: text after the closing quote"));
}

TEST_CASE("predict reads labelled TSV, CSV and pre-tokenized input, keeping the user's tokens", "[cli]") {
  const std::string run = trained_run();
  fs::create_directories(dir());
  const auto tsv = (dir() / "labelled.tsv").string();
  gyre::write_file_atomic(tsv, "label\ttext\nbook\tcan you fix my kettle\ncancel\tcancel the visit please\n");
  const auto r = gyre_cli({"predict", run, "--input", tsv, "--input-format", "tsv"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(gyre::test::line_count(r.out) == 2);  // the header line gives no record
  CHECK(r.out.find("!error") == std::string::npos);
  const auto headed = (dir() / "headed.tsv").string();
  gyre::write_file_atomic(headed, "category\tmessage\nbook\tcan you fix my kettle\n");
  const auto h = gyre_cli({"predict", run, "--input", headed, "--input-format", "tsv", "--on-error", "fail"});
  CHECK(h.exit_code == 2);
  CHECK_THAT(h.err, Contains(headed + ":1: looks like a header line ('category<TAB>message')"));

  const auto csv = (dir() / "messages-in.csv").string();
  gyre::write_file_atomic(csv,
                          "id,message\n1,\"fix my kettle, please\"\n2,\"cancel\nthe visit\"\n3,cancel\n");
  const auto c = gyre_cli({"predict", run, "--input", csv, "--input-format", "csv", "--text-column",
                           "message", "--format", "jsonl"});
  INFO(c.err);
  REQUIRE(c.exit_code == 0);
  REQUIRE(gyre::test::line_count(c.out) == 3);  // one record per CSV record, the line break kept inside
  CHECK_THAT(c.out, Contains("{\"labels\":") && Contains("\"line\":2,") && Contains("\"line\":5,"));
  const auto nocol = gyre_cli({"predict", run, "--input", csv, "--input-format", "csv"});
  CHECK(nocol.exit_code == 2);
  CHECK_THAT(nocol.err, Contains(csv + ":1: no column named 'text' in the header (columns: id, message)"));

  SECTION("a tagger on the user's own tokens: columns and {\"tokens\": [...]}") {
    // Invented booking messages; "KÖ-7" is one token here, where the words tokenizer would cut it.
    std::string columns;
    for (int i = 0; i < 12; ++i)
      columns +=
          "fix\tO\nmy\tO\nkettle\tB-appliance\non\tO\nfriday\tB-date\n\nthe\tO\ntoaster\tB-appliance\n"
          "needs\tO\na\tO\nfuse\tB-part\n\n";
    const auto train = (dir() / "slots.tsv").string();
    gyre::write_file_atomic(train, columns);
    const auto tagger = (dir() / "tagger").string();
    fs::remove_all(tagger);
    const auto t = gyre_cli({"train", "--train", train, "--dev", train, "--epochs", "1", "--hidden-size", "8",
                             "--embedding-size", "8", "--quiet", "--out", tagger});
    INFO(t.err);
    REQUIRE(t.exit_code == 0);
    const auto in = (dir() / "mine.columns").string();
    gyre::write_file_atomic(in, "Fix\tO\nthe\nKÖ-7\tB-part\n\nkettle\nfriday\n");
    const auto p =
        gyre_cli({"predict", tagger, "--input", in, "--input-format", "columns", "--format", "jsonl"});
    INFO(p.err);
    REQUIRE(p.exit_code == 0);
    REQUIRE(gyre::test::line_count(p.out) == 2);  // two sentences
    CHECK_THAT(p.out, Contains("\"tokens\":[\"Fix\",\"the\",\"KÖ-7\"]") && Contains("\"line\":1,"));
    CHECK_THAT(p.out, Contains("\"tokens\":[\"kettle\",\"friday\"]") && Contains("\"line\":5,"));
    // The user's tokens have no running text to point into: no byte ranges, spans are the tokens.
    CHECK_THAT(p.out, !Contains("token_bytes") && !Contains("byte_start"));
    const auto j = (dir() / "mine.jsonl").string();
    gyre::write_file_atomic(j, "{\"tokens\": [\"KÖ-7\", \"friday\"]}\n{\"text\": \"no tokens key\"}\n");
    const auto q = gyre_cli({"predict", tagger, "--input", j, "--input-format", "tagged-jsonl"});
    INFO(q.err);
    REQUIRE(q.exit_code == 0);
    REQUIRE(gyre::test::line_count(q.out) == 2);
    CHECK_THAT(q.out, StartsWith("KÖ-7/") && Contains(" friday/"));
    CHECK_THAT(q.out, Contains("!error\texpected a JSON object with a \"tokens\" array of strings"));
  }
}

TEST_CASE("train --resume DIR --epochs N extends a finished run as if it had been trained N epochs",
          "[cli]") {
  const std::string train = corpus();
  const auto whole = (dir() / "two-epochs").string(), extended = (dir() / "one-then-two").string();
  fs::remove_all(whole);
  fs::remove_all(extended);
  const std::vector<std::string> common = {"--train",          train, "--hidden-size", "8",
                                           "--embedding-size", "8",   "--quiet"};
  auto train_args = [&](const std::string& out, const std::string& epochs) {
    std::vector<std::string> a = {"train"};
    a.insert(a.end(), common.begin(), common.end());
    a.insert(a.end(), {"--epochs", epochs, "--out", out});
    return a;
  };
  REQUIRE(gyre_cli(train_args(whole, "2")).exit_code == 0);
  REQUIRE(gyre_cli(train_args(extended, "1")).exit_code == 0);
  const auto r = gyre_cli({"train", "--resume", extended, "--epochs", "2", "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(gyre::test::line_count(gyre::read_file(fs::path(extended) / "log.jsonl")) == 2);
  CHECK_THAT(gyre::read_file(fs::path(extended) / "config.json"), Contains("\"epochs\": 2,"));
  // Same seed, same thread count: the extended run's last weights are the two-epoch run's, so
  // every probability printed (full float precision in JSON Lines) is the same.
  const auto a = gyre_cli({"predict", (fs::path(whole) / "resume.bin").string(), "--input", train,
                           "--input-format", "tsv", "--format", "jsonl", "--top-k", "2"});
  const auto b = gyre_cli({"predict", (fs::path(extended) / "resume.bin").string(), "--input", train,
                           "--input-format", "tsv", "--format", "jsonl", "--top-k", "2"});
  REQUIRE(a.exit_code == 0);
  REQUIRE(b.exit_code == 0);
  CHECK(gyre::test::line_count(a.out) == 40);
  CHECK(a.out == b.out);

  const auto shorter = gyre_cli({"train", "--resume", extended, "--epochs", "1"});
  CHECK(shorter.exit_code == 2);
  CHECK_THAT(shorter.err, Contains("has already done 2 epochs"));
  const auto other = gyre_cli({"train", "--resume", extended, "--hidden-size", "16"});
  require_one_line_error(other);
  CHECK_THAT(other.err, Contains("only --epochs"));
}

TEST_CASE("the end-of-epoch line is short and names each loss once, and a CRF's train loss is per token",
          "[cli]") {
  const std::string train = corpus();
  const auto out = (dir() / "epoch-line").string();
  fs::remove_all(out);
  const auto r = gyre_cli({"train", "--train", train, "--epochs", "1", "--hidden-size", "8",
                           "--embedding-size", "8", "--out", out});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  std::string epoch_line;
  std::size_t start = 0;
  while (start < r.err.size()) {
    const auto end = r.err.find('\n', start);
    const std::string line = r.err.substr(start, end - start);
    if (line.find("train loss") != std::string::npos) epoch_line = line;
    start = end == std::string::npos ? r.err.size() : end + 1;
  }
  INFO(epoch_line);
  REQUIRE_THAT(epoch_line, StartsWith("epoch 1/1  "));
  CHECK(epoch_line.size() <= 110);
  CHECK(epoch_line.find("loss") != epoch_line.rfind("loss"));  // "train loss" and "dev loss"
  CHECK(epoch_line.find("loss", epoch_line.find("dev loss") + 8) == std::string::npos);
  CHECK_THAT(epoch_line, Contains("macro F1") && !Contains("macro_f1"));

  // 12-token sentences, 16 of them: one optimizer step (batch size 32), so the epoch's train loss
  // is the loss at initialisation. With near-zero scores a CRF's loss, log Z - score(gold path),
  // is about n ln(T) for n tokens and T tags (every path about equally likely; Lafferty et al.
  // 2001's likelihood): per token about ln(5) = 1.61, per sentence about 12 ln(5) = 19.3.
  std::string columns;
  for (int i = 0; i < 16; ++i) {
    columns +=
        "please\tO\nsend\tO\nsomeone\tO\nto\tO\nfix\tO\nthe\tO\nkettle\tB-appliance\nat\tO\nnine\tB-"
        "time\non\tO\n";
    columns += "friday\tB-date\nmorning\tI-date\n\n";
  }
  const auto slots = (dir() / "long-slots.tsv").string();
  gyre::write_file_atomic(slots, columns);
  const auto crf = (dir() / "crf").string();
  fs::remove_all(crf);
  const auto c = gyre_cli({"train", "--train", slots, "--dev", slots, "--output", "crf", "--epochs", "1",
                           "--hidden-size", "8", "--embedding-size", "8", "--quiet", "--out", crf});
  INFO(c.err);
  REQUIRE(c.exit_code == 0);
  const auto log = nlohmann::json::parse(gyre::read_file(fs::path(crf) / "log.jsonl"));
  const double train_loss = log["train_loss"].get<double>(), dev_loss = log["dev"]["loss"].get<double>();
  INFO("train " << train_loss << " dev " << dev_loss);
  CHECK(train_loss < 1.5 * std::log(5.0));
  CHECK(train_loss > 0.5 * std::log(5.0));
  CHECK(dev_loss < 1.5 * std::log(5.0));  // the dev loss is per token too
}

TEST_CASE("the multi-label threshold is a setting stored in the model", "[cli]") {
  fs::create_directories(dir());
  std::string jsonl;
  for (int i = 0; i < 12; ++i) {
    const std::string n = std::to_string(i);
    jsonl += "{\"text\": \"kettle " + n +
             " broken and the bill is wrong\", \"labels\": [\"book\", \"billing\"]}\n";
    jsonl += "{\"text\": \"please send the invoice " + n + "\", \"labels\": [\"billing\"]}\n";
  }
  const auto path = (dir() / "multi.jsonl").string();
  gyre::write_file_atomic(path, jsonl);
  const auto out = (dir() / "multi").string();
  fs::remove_all(out);
  const auto t = gyre_cli({"train", "--train", path, "--multi-label-threshold", "0.3", "--epochs", "1",
                           "--hidden-size", "8", "--embedding-size", "8", "--quiet", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  const auto i = gyre_cli({"inspect", out, "--no-tensors"});
  REQUIRE(i.exit_code == 0);
  CHECK_THAT(i.out, Contains("multi-label threshold 0.3"));
  const auto bad = gyre_cli({"train", "--train", path, "--multi-label-threshold", "1", "--out", out + "-x"});
  require_one_line_error(bad);
  CHECK_THAT(bad.err, Contains("--multi-label-threshold"));
}

TEST_CASE(
    "multi-label thresholds are tuned per label on dev, stored, and used alike by eval, predict and "
    "the runtime, and --multi-label-threshold replaces them",
    "[cli]") {
  using nlohmann::json;
  fs::create_directories(dir());
  // Invented service messages: "billing" on most, "repair" on half, "urgent" on a quarter. One epoch
  // of a tiny model leaves "urgent" below 0.5 everywhere (F1 0 at 0.5), so tuning must move it.
  auto corpus_of = [](int from, int to) {
    std::string jsonl;
    for (int i = from; i < to; ++i) {
      const std::string n = std::to_string(i);
      std::vector<std::string> labels;
      if (i % 5 != 0) labels.push_back("billing");
      if (i % 2 == 0) labels.push_back("repair");
      if (i % 4 == 1) labels.push_back("urgent");
      if (labels.empty()) labels.push_back("billing");
      json line{{"text", (i % 2 == 0 ? "the kettle leaks again " : "the invoice is wrong ") + n +
                             (i % 4 == 1 ? " asap please" : "")},
                {"labels", labels}};
      jsonl += line.dump() + "\n";
    }
    return jsonl;
  };
  const auto train = (dir() / "ml-train.jsonl").string(), dev = (dir() / "ml-dev.jsonl").string();
  gyre::write_file_atomic(train, corpus_of(0, 48));
  gyre::write_file_atomic(dev, corpus_of(100, 140));
  const auto out = (dir() / "ml-tuned").string();
  fs::remove_all(out);
  const auto t = gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "1", "--hidden-size", "8",
                           "--embedding-size", "8", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  CHECK_THAT(t.err, Contains("label thresholds: ") && Contains("(tuned on dev); dev macro F1 "));
  const json metrics = json::parse(gyre::read_file(fs::path(out) / "metrics.json"));
  REQUIRE(metrics.contains("label_thresholds"));
  const json& tuned = metrics["label_thresholds"]["thresholds"];
  const std::vector<std::string> labels = {"billing", "repair", "urgent"};
  REQUIRE(tuned.size() == labels.size());

  // Every dev probability (calibrated, as the thresholds were tuned on), by the run's library model.
  const auto p = gyre_cli(
      {"predict", out, "--input", dev, "--input-format", "jsonl", "--format", "jsonl", "--top-k", "3"});
  INFO(p.err);
  REQUIRE(p.exit_code == 0);
  std::vector<std::map<std::string, float>> probs;
  std::vector<std::set<std::string>> chosen;
  {
    std::istringstream lines(p.out);
    for (std::string line; std::getline(lines, line);) {
      const json r = json::parse(line);
      probs.emplace_back();
      for (const auto& e : r["top"])
        probs.back()[e["label"].get<std::string>()] = e["probability"].get<float>();
      chosen.emplace_back(r["labels"].begin(), r["labels"].end());
    }
  }
  REQUIRE(probs.size() == 40);
  std::vector<std::set<std::string>> gold;
  {
    std::istringstream lines(gyre::read_file(dev));
    for (std::string line; std::getline(lines, line);) {
      const json r = json::parse(line);
      gold.emplace_back(r["labels"].begin(), r["labels"].end());
    }
  }
  // Brute-force reference: per label, F1 = 2TP / (2TP + FP + FN) (van Rijsbergen 1979) at every
  // threshold that changes a decision (each dev probability, and one above them all); the tuned
  // threshold must reach the best, and keep 0.5 when 0.5 reaches it.
  auto f1_at = [&](const std::string& label, float threshold) {
    double tp = 0, fp = 0, fn = 0;
    for (std::size_t i = 0; i < probs.size(); ++i) {
      const bool g = gold[i].count(label) > 0, c = probs[i].at(label) >= threshold;
      tp += g && c;
      fp += !g && c;
      fn += g && !c;
    }
    return tp == 0 ? 0.0 : 2 * tp / (2 * tp + fp + fn);
  };
  std::size_t moved = 0;
  for (const auto& label : labels) {
    const float threshold = tuned.at(label).get<float>();
    double best = f1_at(label, 0.999999f);
    for (const auto& row : probs) best = std::max(best, f1_at(label, row.at(label)));
    INFO(label << " threshold " << threshold << " best F1 " << best);
    CHECK(threshold > 0.0f);
    CHECK(threshold < 1.0f);
    CHECK_THAT(f1_at(label, threshold), Catch::Matchers::WithinAbs(best, 1e-12));
    if (f1_at(label, 0.5f) == best) CHECK(threshold == 0.5f);
    moved += threshold != 0.5f;
    // predict chose exactly the labels at or above their own threshold.
    for (std::size_t i = 0; i < probs.size(); ++i)
      CHECK((chosen[i].count(label) > 0) == (probs[i].at(label) >= threshold));
  }
  CHECK(moved > 0);
  const auto i = gyre_cli({"inspect", out, "--no-tensors"});
  REQUIRE(i.exit_code == 0);
  CHECK_THAT(i.out, Contains("thresholds   per label (tuned on dev): billing "));

  // The exported model (run by the embedded runtime) chooses the same labels.
  const auto exported = (dir() / "ml-tuned.gyre").string();
  REQUIRE(gyre_cli({"export", out, "--out", exported, "--no-check"}).exit_code == 0);
  const auto pe = gyre_cli(
      {"predict", exported, "--input", dev, "--input-format", "jsonl", "--format", "jsonl", "--top-k", "3"});
  REQUIRE(pe.exit_code == 0);
  {
    std::istringstream lines(pe.out);
    std::size_t n = 0;
    for (std::string line; std::getline(lines, line); ++n) {
      const json r = json::parse(line);
      CHECK(std::set<std::string>(r["labels"].begin(), r["labels"].end()) == chosen.at(n));
    }
    CHECK(n == chosen.size());
  }

  // eval shows the thresholds in use; --multi-label-threshold replaces them (library and runtime).
  const auto e = gyre_cli({"eval", out, "--test", dev});
  INFO(e.err);
  REQUIRE(e.exit_code == 0);
  CHECK_THAT(e.out, Contains("decision thresholds per label: billing "));
  for (const auto& model : {out, exported}) {
    const auto g = gyre_cli({"eval", model, "--test", dev, "--multi-label-threshold", "0.5"});
    INFO(g.err);
    REQUIRE(g.exit_code == 0);
    CHECK_THAT(g.out, Contains("decision threshold 0.50") && !Contains("per label"));
    const auto q = gyre_cli({"predict", model, "--input", dev, "--input-format", "jsonl", "--format", "jsonl",
                             "--top-k", "3", "--multi-label-threshold", "0.5"});
    REQUIRE(q.exit_code == 0);
    std::istringstream lines(q.out);
    std::size_t n = 0;
    for (std::string line; std::getline(lines, line); ++n) {
      const json r = json::parse(line);
      std::set<std::string> want;
      for (const auto& label : labels)
        if (probs.at(n).at(label) >= 0.5f) want.insert(label);
      CHECK(std::set<std::string>(r["labels"].begin(), r["labels"].end()) == want);
    }
  }
  // Only multi-label models take it; and train can keep one threshold for all labels.
  const auto softmax = gyre_cli({"predict", trained_run(), "--multi-label-threshold", "0.4"});
  require_one_line_error(softmax);
  CHECK_THAT(softmax.err, Contains("--multi-label-threshold: ") && Contains("is not a multi-label model"));
  const auto plain = (dir() / "ml-plain").string();
  fs::remove_all(plain);
  REQUIRE(gyre_cli({"train", "--train", train, "--dev", dev, "--epochs", "1", "--hidden-size", "8",
                    "--embedding-size", "8", "--no-tune-label-thresholds", "--quiet", "--out", plain})
              .exit_code == 0);
  CHECK_FALSE(json::parse(gyre::read_file(fs::path(plain) / "metrics.json")).contains("label_thresholds"));
  CHECK_THAT(gyre_cli({"inspect", plain, "--no-tensors"}).out, !Contains("per label (tuned on dev)"));
}

TEST_CASE("a misspelt value of any command's option gets the closest value, a renamed option its new name",
          "[cli]") {
  const auto f = gyre_cli({"predict", "runs/none", "--format", "jsnol"});
  require_one_line_error(f);
  CHECK_THAT(f.err, Contains("--format: 'jsnol' is not one of tsv, jsonl; did you mean 'jsonl'?") &&
                        Contains("gyre predict --help"));
  const auto p = gyre_cli({"export", "runs/none", "--out", "x.gyre", "--precision", "int9"});
  require_one_line_error(p);
  CHECK_THAT(p.err, Contains("did you mean 'int8'?"));
  const auto d = gyre_cli({"eval", "runs/none", "--data", "test.tsv"});
  require_one_line_error(d);
  CHECK_THAT(d.err, Contains("unknown option '--data'; did you mean '--test'"));
}

TEST_CASE("train and eval --no-baseline skip the linear baseline, which both show by default", "[cli]") {
  using nlohmann::json;
  const std::string with = trained_run();
  CHECK(json::parse(gyre::read_file(fs::path(with) / "metrics.json")).contains("baseline"));
  const auto out = (dir() / "no-baseline").string();
  fs::remove_all(out);
  const auto t = gyre_cli({"train", "--train", corpus(), "--epochs", "1", "--hidden-size", "8",
                           "--embedding-size", "8", "--no-baseline", "--out", out});
  INFO(t.err);
  REQUIRE(t.exit_code == 0);
  CHECK_THAT(t.out, !Contains("linear baseline"));
  CHECK_FALSE(json::parse(gyre::read_file(fs::path(out) / "metrics.json")).contains("baseline"));
  for (const bool skip : {false, true}) {
    const auto report = (dir() / (skip ? "eval-skip.json" : "eval.json")).string();
    std::vector<std::string> args{"eval", with, "--test", corpus(), "--json", report};
    if (skip) args.push_back("--no-baseline");
    const auto e = gyre_cli(args);
    INFO(e.err);
    REQUIRE(e.exit_code == 0);
    CHECK(json::parse(gyre::read_file(report)).contains("linear_baseline") == !skip);
    CHECK((e.out.find("linear baseline") != std::string::npos) == !skip);
  }
}

#endif
