// Vocabulary, label set and vocab.json.

#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <string>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/text/vocab.hpp"

using namespace gyre::text;

namespace {
std::filesystem::path tmp_dir() {
  auto dir = std::filesystem::path(GYRE_TEST_TMP_DIR) / "text_vocab";
  std::filesystem::create_directories(dir);
  return dir;
}
}  // namespace

TEST_CASE("vocabulary order: reserved ids, then count desc, then bytes", "[vocab]") {
  VocabBuilder b;
  // Counts: b=3, a=3, c=2, "É"=2 (bytes C3 89 sort after 'c'), d=1.
  for (const char* t : {"b", "a", "c", "b", "\xC3\x89", "a", "d", "b", "c", "a", "\xC3\x89"}) b.add(t);
  CHECK(b.types() == 5);
  CHECK(b.tokens() == 11);

  const Vocab v = b.build();
  REQUIRE(v.size() == 7);
  CHECK(v.token(Vocab::kPad) == "<pad>");
  CHECK(v.token(Vocab::kUnk) == "<unk>");
  CHECK(v.token(2) == "a");
  CHECK(v.token(3) == "b");
  CHECK(v.token(4) == "c");
  CHECK(v.token(5) == "\xC3\x89");
  CHECK(v.token(6) == "d");
  CHECK(v.count(3) == 3);
  CHECK(v.count(Vocab::kPad) == 0);
  CHECK(v.id("c") == 4);
  CHECK(v.id("zzz") == Vocab::kUnk);
  CHECK(v.id("<pad>") == Vocab::kUnk);  // text never yields the padding id
  CHECK_THROWS_AS(v.token(7), gyre::Error);
  CHECK_THROWS_AS(v.token(-1), gyre::Error);

  SECTION("min_count and max_size") {
    const Vocab m = b.build(2);
    CHECK(m.size() == 6);
    CHECK(m.id("d") == Vocab::kUnk);
    const Vocab s = b.build(1, 4);
    CHECK(s.size() == 4);
    CHECK(s.token(3) == "b");
    CHECK(b.build(1, 2).size() == 2);
    CHECK_THROWS_AS(b.build(1, 1), gyre::Error);
  }
  SECTION("order does not depend on insertion order") {
    VocabBuilder r;
    for (const char* t : {"\xC3\x89", "d", "c", "c", "\xC3\x89", "a", "a", "a", "b", "b", "b"}) r.add(t);
    CHECK(r.build() == v);
  }
  SECTION("the reserved spellings are never vocabulary entries") {
    VocabBuilder r;
    r.add("<unk>", 10);
    r.add("x");
    CHECK(r.build().size() == 3);
    CHECK_THROWS_AS(Vocab({"<pad>"}, {1}), gyre::Error);
    CHECK_THROWS_AS(Vocab({"x", "x"}, {1, 1}), gyre::Error);
  }
}

TEST_CASE("label set: sorted names, find, id with file and line", "[vocab]") {
  const LabelSet labels(LabelCounts{{"refund", 4}, {"booking", 10}, {"Complaint", 2}});
  REQUIRE(labels.size() == 3);
  CHECK(labels.name(0) == "Complaint");  // byte order: uppercase first
  CHECK(labels.name(1) == "booking");
  CHECK(labels.name(2) == "refund");
  CHECK(labels.count(1) == 10);
  CHECK(labels.find("refund") == 2);
  CHECK_FALSE(labels.find("praise").has_value());
  CHECK(labels.id("booking", "dev.tsv", 3) == 1);
  try {
    labels.id("praise", "dev.tsv", 42);
    FAIL("no exception");
  } catch (const gyre::ParseError& e) {
    CHECK(std::string(e.what()) == "dev.tsv:42: label 'praise' was not seen in training");
  }
  CHECK_THROWS_AS(labels.name(3), gyre::Error);
}

TEST_CASE("vocab.json saves and reloads identically", "[vocab]") {
  VocabFile f;
  f.tokenizer.mode = TokenizerMode::kChars;
  f.tokenizer.fold_digits = true;
  f.tokenizer.max_tokens = 77;
  VocabBuilder b;
  for (const char* t : {"kettle", "coil", "kettle", "\"quoted\"", "tab\there", "\xE4\xBF\xAE"}) b.add(t);
  f.vocab = b.build();
  f.labels = LabelSet(LabelCounts{{"cancel", 3}, {"book", 5}});
  const auto path = tmp_dir() / "vocab.json";
  save_vocab_file(path, f);
  const VocabFile g = load_vocab_file(path);
  CHECK(g.tokenizer == f.tokenizer);
  CHECK(g.vocab == f.vocab);
  CHECK(g.labels == f.labels);
  CHECK(g.vocab.id("tab\there") == f.vocab.id("tab\there"));
  // Saving the reloaded file gives the same bytes.
  const auto path2 = tmp_dir() / "vocab2.json";
  save_vocab_file(path2, g);
  CHECK(gyre::read_file(path) == gyre::read_file(path2));
}

TEST_CASE("corrupt vocab.json files are refused with the reason", "[vocab]") {
  const auto path = tmp_dir() / "bad.json";
  auto load_text = [&](const std::string& text) {
    gyre::write_file_atomic(path, text);
    return load_vocab_file(path);
  };
  const std::string head =
      R"({"format": "gyre-vocab", "version": 1, "tokenizer": {}, "labels": [["a", 1]], )";
  CHECK_NOTHROW(load_text(head + R"("tokens": [["<pad>", 0], ["<unk>", 0], ["x", 2]]})"));
  CHECK_THROWS_WITH(load_text("{not json"), Catch::Contains("not valid JSON"));
  CHECK_THROWS_WITH(load_text(R"({"format": "other"})"), Catch::Contains("not a gyre vocabulary file"));
  CHECK_THROWS_WITH(load_text(R"({"format": "gyre-vocab", "version": 9})"),
                    Catch::Contains("version 9 is not supported"));
  CHECK_THROWS_WITH(load_text(head + "\"x\": 1}"), Catch::Contains("missing \"tokens\""));
  CHECK_THROWS_WITH(load_text(head + R"("tokens": [["x", 2]]})"), Catch::Contains("must start with"));
  CHECK_THROWS_WITH(load_text(head + R"("tokens": [["<pad>", 0], ["<unk>", 0], ["x", 2], ["x", 1]]})"),
                    Catch::Contains("duplicate token 'x'"));
  CHECK_THROWS_WITH(load_text(head + R"("tokens": [["<pad>", 0], ["<unk>", 0], ["x", -2]]})"),
                    Catch::Contains("tokens[2]"));
  CHECK_THROWS_WITH(
      load_text(
          R"({"format": "gyre-vocab", "version": 1, "tokenizer": {"mode": 3}, "labels": [], "tokens": []})"),
      Catch::Contains("tokenizer.mode"));
  CHECK_THROWS_WITH(
      load_text(R"({"format": "gyre-vocab", "version": 1, "tokenizer": {}, "labels": [["b", 1], ["a", 1]],
                                  "tokens": [["<pad>", 0], ["<unk>", 0]]})"),
      Catch::Contains("sorted"));
  CHECK_THROWS_AS(load_vocab_file(tmp_dir() / "missing.json"), gyre::IoError);
  for (const char* text :
       {"", "[]",
        "{\"format\": \"gyre-vocab\", \"version\": 1, \"tokenizer\": [], \"labels\": 3, \"tokens\": {}}"})
    CHECK_THROWS_AS(load_text(text), gyre::FormatError);
}
