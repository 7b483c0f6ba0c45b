// CSV corpora (RFC 4180) read as Python's csv module reads them: the fixtures and the expected
// records come from tools/make_csv_fixtures.py (python3 csv, strict=True).

#include <catch2/catch.hpp>

#include <filesystem>
#include <sstream>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/csv.hpp"
#include "gyre/data/reader.hpp"

using namespace gyre::data;
using nlohmann::json;

namespace {

const std::string kDir = std::string(GYRE_FIXTURES_DIR) + "/csv/";

json expected() {
  return json::parse(gyre::read_file(kDir + "expected.json"));
}

ReadOptions csv_options(const json& case_) {
  ReadOptions o;
  o.format = CorpusFormat::kCsv;
  o.text_column = case_["text_column"].get<std::string>();
  o.label_column = case_["label_column"].get<std::string>();
  return o;
}

}  // namespace

TEST_CASE("CSV: records equal Python's csv module on tricky files", "[reader][csv]") {
  const json all = expected();
  for (const char* name : {"tricky", "renamed"}) {
    INFO(name);
    const json& c = all[name];
    REQUIRE(c.contains("records"));
    // gyre refuses an empty text (as in every format); with skip_bad_lines it is counted.
    std::vector<json> want, empty_lines;
    for (const auto& r : c["records"])
      (r["text"].get<std::string>().empty() ? empty_lines : want).push_back(r);
    ReadOptions options = csv_options(c);
    options.skip_bad_lines = true;
    ReadReport report;
    const auto got = load_corpus(kDir + name + ".csv", options, &report);
    CHECK(report.format == CorpusFormat::kCsv);
    REQUIRE(got.size() == want.size());
    for (std::size_t i = 0; i < got.size(); ++i) {
      INFO("record " << i);
      CHECK(got[i].text == want[i]["text"].get<std::string>());
      REQUIRE(got[i].labels.size() == 1);
      CHECK(got[i].labels[0] == want[i]["label"].get<std::string>());
      CHECK(got[i].line == want[i]["line"].get<std::size_t>());
    }
    REQUIRE(report.skipped == empty_lines.size());
    for (std::size_t i = 0; i < empty_lines.size(); ++i)
      CHECK(report.first_skipped_lines[i] == empty_lines[i]["line"].get<std::size_t>());
  }
  // Without the skip policy the empty text stops the read at its line and column.
  try {
    load_corpus(kDir + "tricky.csv", csv_options(all["tricky"]));
    FAIL("no ParseError");
  } catch (const gyre::ParseError& e) {
    CHECK(e.line() == 13);
    CHECK_THAT(e.what(), Catch::Contains("tricky.csv:13: column 3: empty text ('text')"));
  }
}

TEST_CASE("CSV: files Python refuses are refused with file, line and column", "[reader][csv]") {
  const json all = expected();
  struct Case {
    const char* name;
    std::size_t line;
    const char* fragment;
  };
  // Python names the line where it noticed; gyre the line and column of the cause (the opening
  // quote of a field never closed; the character after a closing quote).
  for (const Case& k : {Case{"unterminated", 3, "column 1: quoted field is never closed"},
                        Case{"after_quote", 2, "column 9: text after the closing quote"},
                        Case{"extra_field", 3, "3 fields but the header (line 1) has 2"}}) {
    INFO(k.name);
    REQUIRE(all[k.name].contains("error"));  // python3's csv refuses it too
    try {
      load_corpus(kDir + k.name + ".csv", csv_options(all[k.name]));
      FAIL("no ParseError");
    } catch (const gyre::ParseError& e) {
      CHECK(e.line() == k.line);
      CHECK_THAT(e.what(), Catch::Contains(std::string(k.name) + ".csv:" + std::to_string(k.line) + ": "));
      CHECK_THAT(e.what(), Catch::Contains(k.fragment));
    }
  }
}

TEST_CASE("CSV: columns are chosen by header name, detection is by content", "[reader][csv]") {
  const auto dir = std::filesystem::path(GYRE_TEST_TMP_DIR) / "data_csv";
  std::filesystem::create_directories(dir);
  const auto path = dir / "reviews.txt";  // the extension is not used
  gyre::write_file_atomic(path, "message,category\n\"fine, thanks\",praise\n");
  CHECK(detect_format(path) == CorpusFormat::kCsv);
  try {
    load_corpus(path);
    FAIL("no ParseError");
  } catch (const gyre::ParseError& e) {
    CHECK(e.line() == 1);
    CHECK_THAT(e.what(),
               Catch::Contains("no column named 'text' in the header (columns: message, category)"));
    CHECK_THAT(e.what(), Catch::Contains("--text-column NAME"));
  }
  ReadOptions o;
  o.text_column = "message";
  o.label_column = "category";
  const auto got = load_corpus(path, o);
  REQUIRE(got.size() == 1);
  CHECK(got[0].text == "fine, thanks");
  CHECK(got[0].labels == std::vector<std::string>{"praise"});
  // The same two options choose the keys of JSON Lines records.
  const auto jsonl = dir / "reviews.jsonl";
  gyre::write_file_atomic(jsonl, "{\"message\": \"all good\", \"category\": \"praise\"}\n");
  const auto j = load_corpus(jsonl, o);
  REQUIRE(j.size() == 1);
  CHECK(j[0].text == "all good");
  CHECK(j[0].labels == std::vector<std::string>{"praise"});
}

TEST_CASE("CSV reader: quoting state machine on small inputs", "[reader][csv]") {
  // Expected values follow RFC 4180 section 2 rules 5-7 (quotes, commas and line breaks inside
  // quoted fields; "" is a quote) and Python's csv module for a lone CR (a record end).
  std::istringstream in("a,\"b,c\",\"d\"\"e\"\r\n\"x\ny\",,z\rlast");
  CsvReader r(in, "mem");
  std::vector<std::string> f;
  REQUIRE(r.next(f));
  CHECK(f == std::vector<std::string>{"a", "b,c", "d\"e"});
  CHECK(r.line() == 1);
  REQUIRE(r.next(f));
  CHECK(f == std::vector<std::string>{"x\ny", "", "z"});
  CHECK(r.line() == 2);
  REQUIRE(r.next(f));
  CHECK(f == std::vector<std::string>{"last"});
  CHECK(r.line() == 4);
  CHECK_FALSE(r.next(f));
}
