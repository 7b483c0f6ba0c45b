// Corpus readers: the four formats of DESIGN.md "Files", format detection, and every error path
// (the message must name file and line).

#include <catch2/catch.hpp>

#include <filesystem>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/reader.hpp"

using namespace gyre::data;

namespace {

std::filesystem::path write_corpus(const std::string& name, const std::string& content) {
  const auto dir = std::filesystem::path(GYRE_TEST_TMP_DIR) / "data_reader";
  std::filesystem::create_directories(dir);
  const auto path = dir / name;
  gyre::write_file_atomic(path, content);
  return path;
}

// Expects a ParseError whose message starts with "<path>:<line>: " and contains fragment.
void require_parse_error(const std::string& name, const std::string& content, CorpusFormat format,
                         std::size_t line, const std::string& fragment) {
  const auto path = write_corpus(name, content);
  ReadOptions options;
  options.format = format;
  INFO(name << ": expecting line " << line << " and '" << fragment << "'");
  try {
    load_corpus(path, options);
    FAIL("no ParseError");
  } catch (const gyre::ParseError& e) {
    CHECK(e.line() == line);
    CHECK_THAT(e.what(), Catch::StartsWith(path.string() + ":" + std::to_string(line) + ": "));
    CHECK_THAT(e.what(), Catch::Contains(fragment));
  }
}

}  // namespace

TEST_CASE("TSV: header, CRLF, BOM, tabs inside the text, blank lines", "[reader]") {
  const auto path = write_corpus("a.tsv",
                                 "\xEF\xBB\xBFlabel\ttext\r\n"
                                 "book\tCan you fix my kettle on Friday?\r\n"
                                 "\n"
                                 "cancel\tplease cancel\tthe visit\n"
                                 "praise\t\xC3\x89tonnant, merci");
  ReadReport report;
  const auto ex = load_corpus(path, {}, &report);
  CHECK(report.format == CorpusFormat::kTsv);
  CHECK(report.task == Task::kClassify);
  CHECK(report.examples == 3);
  CHECK(report.skipped == 0);
  REQUIRE(ex.size() == 3);
  CHECK(ex[0].labels == std::vector<std::string>{"book"});
  CHECK(ex[0].text == "Can you fix my kettle on Friday?");
  CHECK(ex[0].line == 2);
  CHECK(ex[1].text == "please cancel\tthe visit");
  CHECK(ex[1].line == 4);
  CHECK(ex[2].text == "\xC3\x89tonnant, merci");
  CHECK(ex[2].line == 5);
}

TEST_CASE("JSON Lines: single and multi-label", "[reader]") {
  const auto path =
      write_corpus("a.jsonl",
                   "{\"text\": \"The coil buzzes\", \"label\": \"complaint\", \"id\": 7}\n"
                   "\r\n"
                   "{\"labels\": [\"billing\", \"complaint\"], \"text\": \"Charged twice \\u00e9\"}\r\n"
                   "{\"text\": \"thanks\", \"labels\": []}\n");
  ReadReport report;
  const auto ex = load_corpus(path, {}, &report);
  CHECK(report.format == CorpusFormat::kJsonl);
  REQUIRE(ex.size() == 3);
  CHECK(ex[0].labels == std::vector<std::string>{"complaint"});
  CHECK(ex[1].labels == std::vector<std::string>{"billing", "complaint"});
  CHECK(ex[1].text == "Charged twice \xC3\xA9");
  CHECK(ex[1].line == 3);
  CHECK(ex[2].labels.empty());
}

TEST_CASE("tagging columns and tagging JSON Lines", "[reader]") {
  const auto cols = write_corpus("a.conll",
                                 "fix\tO\r\n"
                                 "kettle\tB-appliance\n"
                                 "\n"
                                 "\n"
                                 "on\tO\n"
                                 "Main\tB-street\n"
                                 "Street\tI-street\n");
  ReadReport report;
  auto ex = load_corpus(cols, {}, &report);
  CHECK(report.format == CorpusFormat::kColumns);
  CHECK(report.task == Task::kTag);
  REQUIRE(ex.size() == 2);
  CHECK(ex[0].tokens == std::vector<std::string>{"fix", "kettle"});
  CHECK(ex[0].tags == std::vector<std::string>{"O", "B-appliance"});
  CHECK(ex[0].text == "fix kettle");
  CHECK(ex[0].line == 1);
  CHECK(ex[1].text == "on Main Street");
  CHECK(ex[1].line == 5);

  const auto jl =
      write_corpus("tags.jsonl", R"({"tokens": ["at", "9", "am"], "tags": ["O", "B-time", "I-time"]})"
                                 "\n");
  ex = load_corpus(jl, {}, &report);
  CHECK(report.format == CorpusFormat::kTaggedJsonl);
  CHECK(report.task == Task::kTag);
  REQUIRE(ex.size() == 1);
  CHECK(ex[0].text == "at 9 am");
  CHECK(ex[0].tags.size() == 3);
}

TEST_CASE("format detection", "[reader]") {
  CHECK(detect_format(write_corpus("d1", "\n{\"text\": \"x\", \"label\": \"y\"}\n")) == CorpusFormat::kJsonl);
  CHECK(detect_format(write_corpus("d2", "{\"tokens\": [\"x\"], \"tags\": [\"O\"]}\n")) ==
        CorpusFormat::kTaggedJsonl);
  CHECK(detect_format(write_corpus("d3", "a\tO\nb\tB-x\n\nc\tO\n")) == CorpusFormat::kColumns);
  CHECK(detect_format(write_corpus("d4", "pos\tgood work\n\nneg\tbad\n")) ==
        CorpusFormat::kTsv);                                                                // space in text
  CHECK(detect_format(write_corpus("d5", "pos\tgood\nneg\tbad\n")) == CorpusFormat::kTsv);  // no separator
  CHECK_THROWS_AS(detect_format(write_corpus("d6", "\n \n")), gyre::ParseError);
  CHECK_THROWS_AS(detect_format(std::filesystem::path(GYRE_TEST_TMP_DIR) / "no-such-file"), gyre::IoError);
  CHECK(corpus_format_from_string("tagged-jsonl") == CorpusFormat::kTaggedJsonl);
  CHECK(corpus_format_from_string("csv") == CorpusFormat::kCsv);
  CHECK_THROWS_AS(corpus_format_from_string("xml"), gyre::ConfigError);
  // A first line with a comma and no TAB is a CSV header row.
  CHECK(detect_format(write_corpus("d7", "text,label\n\"a, b\",x\n")) == CorpusFormat::kCsv);
}

TEST_CASE("bad records name file and line", "[reader]") {
  const auto tsv = CorpusFormat::kTsv, jsonl = CorpusFormat::kJsonl;
  require_parse_error("e1.tsv", "a\tok\nb\tfine\nno tab here\n", tsv, 3, "expected TAB");
  require_parse_error("e2.tsv", "a\tok\r\nb\t  \r\n", tsv, 2, "empty text");
  require_parse_error("e3.tsv", "a\tok\n\tno label\n", tsv, 2, "empty label");
  require_parse_error("e4.tsv", "a\tok\nb\tbad \xC3(\n", tsv, 2, "invalid UTF-8 at byte 7");
  require_parse_error("e5.jsonl", "{\"text\": \"a\", \"label\": \"x\"}\n{\"text\": \"a\", \"label\": }\n",
                      jsonl, 2, "bad JSON");
  require_parse_error("e6.jsonl", "{\"label\": \"x\"}\n", jsonl, 1, "missing key \"text\"");
  require_parse_error("e7.jsonl", "\n{\"text\": \"hello\"}\n", jsonl, 2, "missing key \"label\"");
  require_parse_error("e8.jsonl", "{\"text\": \"\", \"label\": \"x\"}\n", jsonl, 1, "empty text");
  require_parse_error("e9.jsonl", "[1, 2]\n", jsonl, 1, "expected a JSON object");
  require_parse_error("e10.jsonl", "{\"text\": \"a\", \"label\": 3}\n", jsonl, 1,
                      "\"label\" must be a string");
  require_parse_error("e11.jsonl", "{\"text\": \"a\", \"label\": \"x\", \"labels\": [\"y\"]}\n", jsonl, 1,
                      "not both");
  require_parse_error("e12.jsonl", "{\"text\": \"a\", \"labels\": [\"y\", \"y\"]}\n", jsonl, 1, "repeated");
  require_parse_error("e13.jsonl", "{\"text\": \"a\xFF\", \"label\": \"x\"}\n", jsonl, 1, "invalid UTF-8");
  require_parse_error("e14.jsonl", "{\"tokens\": [\"a\", \"b\"], \"tags\": [\"O\"]}\n",
                      CorpusFormat::kTaggedJsonl, 1, "tokens/tags length mismatch: 2 tokens but 1 tags");
  require_parse_error("e15.jsonl", "{\"tokens\": [], \"tags\": []}\n", CorpusFormat::kTaggedJsonl, 1,
                      "empty text");
  require_parse_error("e16.jsonl", "{\"tokens\": [\"a\"]}\n", CorpusFormat::kTaggedJsonl, 1,
                      "missing key \"tags\"");
  require_parse_error("e17.conll", "a\tO\n\nb\tO\nc O\n", CorpusFormat::kColumns, 4,
                      "expected TAB between token and tag");
  require_parse_error("e18.conll", "a\tO\tX\n", CorpusFormat::kColumns, 1, "exactly one TAB");
  require_parse_error("e19.conll", "a\tO\n \tO\n", CorpusFormat::kColumns, 2, "empty token");
  require_parse_error("e20.conll", "a\t\n", CorpusFormat::kColumns, 1, "empty tag");
  require_parse_error("e21.conll", "a\tO\n\xC0\x80\tO\n", CorpusFormat::kColumns, 2, "invalid UTF-8");
  // Tags must be O or B-/I-/E-/S- plus a type (issue 10 item 9: 'X-foo' exited 1 with no line).
  require_parse_error("e22.conll", "a\tO\nb\tB-date\n\nc\tO\nd\tX-foo\n", CorpusFormat::kColumns, 5,
                      "malformed tag 'X-foo'");
  require_parse_error("e23.conll", "a\tB-\n", CorpusFormat::kColumns, 1, "malformed tag 'B-'");
  require_parse_error("e24.jsonl",
                      "{\"tokens\": [\"a\"], \"tags\": [\"O\"]}\n"
                      "{\"tokens\": [\"a\", \"b\"], \"tags\": [\"O\", \"date\"]}\n",
                      CorpusFormat::kTaggedJsonl, 2, "\"tags\"[1]: malformed tag 'date'");
}

TEST_CASE("a tagging file with one 3-column line stays a tagging file and names the line", "[reader]") {
  // Issue 10 item 4: one line with a third column used to make detection call the whole file a
  // classification TSV (its tags became 232 labels).
  std::string content;
  for (int s = 0; s < 30; ++s) content += "fix\tO\nthe\tO\nkettle\tB-appliance\n\n";
  content += "on\tO\nfriday\tB-date\textra\n\n";
  for (int s = 0; s < 30; ++s) content += "at\tO\nnine\tB-time\n\n";
  const auto path = write_corpus("three-columns.conll", content);
  CHECK(detect_format(path) == CorpusFormat::kColumns);
  require_parse_error("three-columns-auto.conll", content, CorpusFormat::kAuto, 122, "exactly one TAB");
  // A classification TSV with blank lines between records stays TSV.
  CHECK(detect_format(write_corpus("blank-separated.tsv",
                                   "book\tfix my kettle\n\ncancel\tno\n\npraise\tgreat work\n")) ==
        CorpusFormat::kTsv);
}

TEST_CASE("skip_bad_lines counts skipped records and keeps the first 10 line numbers", "[reader]") {
  std::string content;
  std::vector<std::size_t> bad_lines;
  for (std::size_t line = 1; line <= 40; ++line) {
    if (line % 3 == 0) {
      content += "missing tab\n";
      bad_lines.push_back(line);
    } else {
      content += "label\ttext " + std::to_string(line) + "\n";
    }
  }
  const auto path = write_corpus("skip.tsv", content);
  ReadOptions options;
  options.skip_bad_lines = true;
  ReadReport report;
  const auto ex = load_corpus(path, options, &report);
  CHECK(report.skipped == 13);
  CHECK(report.examples == 27);
  CHECK(ex.size() == 27);
  CHECK(report.first_skipped_lines == std::vector<std::size_t>(bad_lines.begin(), bad_lines.begin() + 10));

  SECTION("a bad tagging sentence is skipped once, whole") {
    const auto cols = write_corpus("skip.conll", "a\tO\nb\tO\n\nc\tO\nbad\nd\tO\nno tab\n\ne\tB-x\n");
    const auto tagged = load_corpus(cols, {CorpusFormat::kColumns, true}, &report);
    CHECK(report.skipped == 1);
    CHECK(report.first_skipped_lines == std::vector<std::size_t>{5});
    REQUIRE(tagged.size() == 2);
    CHECK(tagged[1].text == "e");
    CHECK(tagged[1].line == 9);
  }
}

TEST_CASE("read_corpus streams in file order and lets sink errors through", "[reader]") {
  std::string content;
  for (int i = 0; i < 5000; ++i)
    content += "l" + std::to_string(i % 7) + "\tmessage number " + std::to_string(i) + "\n";
  const auto path = write_corpus("stream.tsv", content);
  std::size_t n = 0;
  bool ordered = true;
  const auto report = read_corpus(path, {}, [&](Example&& ex) {
    ordered = ordered && ex.line == n + 1 && ex.text == "message number " + std::to_string(n);
    ++n;
  });
  CHECK(n == 5000);
  CHECK(ordered);
  CHECK(report.examples == 5000);
  CHECK_THROWS_WITH(read_corpus(path, {},
                                [](Example&& ex) {
                                  if (ex.line == 3)
                                    throw gyre::ParseError("stream.tsv", ex.line,
                                                           "label 'l2' was not seen in training");
                                }),
                    Catch::Contains("stream.tsv:3: label 'l2'"));
  CHECK_THROWS_AS(load_corpus(std::filesystem::path(GYRE_TEST_TMP_DIR) / "absent.tsv", {CorpusFormat::kTsv}),
                  gyre::IoError);
}
