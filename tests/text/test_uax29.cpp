// Conformance of the runtime's raw segmenter (no normalization, whitespace kept) with the Unicode
// Consortium's own test files for UAX #29 "Unicode Text Segmentation":
//   /usr/share/unicode/auxiliary/WordBreakTest.txt and GraphemeBreakTest.txt, Unicode 15.0.0,
//   from Debian's package unicode-data 15.0.0-1 (installed by tools/install-deps.sh).
// Each line reads "÷ 0061 × 0308 ÷ 0020 ÷  # comment": ÷ = boundary, × = no boundary.
// ICU's root locale follows CLDR, which tailors a few rules; every line where ICU differs from the
// file is listed below with the tailoring that explains it, and any other difference fails.

#include <catch2/catch.hpp>

#include <cstdint>
#include <filesystem>
#include <fstream>
#include <map>
#include <sstream>
#include <string>
#include <vector>

#include "runtime/detail/segment.hpp"

#include "support/utf8.hpp"

namespace {

namespace fs = std::filesystem;
using gyre::runtime::detail::break_boundaries;
using gyre::runtime::detail::BreakKind;

const fs::path kUnicodeDir = "/usr/share/unicode/auxiliary";

using gyre::test::append_utf8;

struct TestLine {
  std::size_t line = 0;
  std::string spec;                            // the part before '#', trimmed
  std::string text;                            // UTF-8
  std::vector<std::size_t> expected;           // byte offsets of ÷
  std::vector<std::size_t> code_point_starts;  // byte offset of each code point, then text.size()
};

std::vector<TestLine> parse_test_file(const fs::path& path) {
  std::ifstream in(path);
  REQUIRE(in);
  std::vector<TestLine> out;
  std::string raw;
  std::size_t line_no = 0;
  while (std::getline(in, raw)) {
    ++line_no;
    std::string spec = raw.substr(0, raw.find('#'));
    while (!spec.empty() && (spec.back() == ' ' || spec.back() == '\t')) spec.pop_back();
    if (spec.empty()) continue;
    TestLine t;
    t.line = line_no;
    t.spec = spec;
    std::istringstream words(spec);
    std::string w;
    while (words >> w) {
      if (w == "\xC3\xB7") {  // ÷ U+00F7
        t.expected.push_back(t.text.size());
      } else if (w == "\xC3\x97") {  // × U+00D7
      } else {
        t.code_point_starts.push_back(t.text.size());
        append_utf8(t.text, static_cast<std::uint32_t>(std::stoul(w, nullptr, 16)));
      }
    }
    t.code_point_starts.push_back(t.text.size());
    out.push_back(std::move(t));
  }
  return out;
}

// Renders boundaries the way the test file does, for messages and for the exception table.
std::string render(const TestLine& t, const std::vector<std::size_t>& boundaries) {
  std::string out;
  std::size_t b = 0;
  for (std::size_t i = 0; i < t.code_point_starts.size(); ++i) {
    const std::size_t at = t.code_point_starts[i];
    while (b < boundaries.size() && boundaries[b] < at) ++b;
    const bool brk = b < boundaries.size() && boundaries[b] == at;
    out += brk ? "\xC3\xB7" : "\xC3\x97";
    if (i + 1 < t.code_point_starts.size()) {
      // Recover the hex from the spec: the i-th code point token.
      std::istringstream words(t.spec);
      std::string w;
      std::size_t k = 0;
      while (words >> w) {
        if (w == "\xC3\xB7" || w == "\xC3\x97") continue;
        if (k++ == i) break;
      }
      out += " " + w + " ";
    }
  }
  return out;
}

// Lines of the Unicode 15.0 test files where ICU 72's root locale differs, keyed by the test
// line (before '#'), with ICU's segmentation and the reason.
struct Tailoring {
  const char* icu;
  const char* reason;
};

// CLDR root removes U+003A COLON, U+FE55 SMALL COLON and U+FF1A FULLWIDTH COLON from MidLetter
// (CLDR's segmentations/root.xml: "$MidLetter = [\p{Word_Break=MidLetter} - [\: \uFE55 \uFF1A]]",
// kept in ICU's word.txt), so WB6/WB7 no longer join letters across a colon, e.g. "a:b".
constexpr const char* kColonTailoring =
    "CLDR root removes ':' (U+003A) from MidLetter, so WB6/WB7 do not apply across a colon";

const std::map<std::string, Tailoring>& word_tailorings() {
  // The 15 lines of WordBreakTest.txt (Unicode 15.0) with a colon between letters; line numbers
  // are for information only (the key is the test line itself).
  static const std::map<std::string, Tailoring> table = {
      // WordBreakTest.txt:1253
      {"÷ 0061 × 003A × 0041 ÷", {"÷ 0061 ÷ 003A ÷ 0041 ÷", kColonTailoring}},
      // WordBreakTest.txt:1254
      {"÷ 0061 × 003A × 0308 × 0041 ÷", {"÷ 0061 ÷ 003A × 0308 ÷ 0041 ÷", kColonTailoring}},
      // WordBreakTest.txt:1267
      {"÷ 0061 × 003A × 05D0 ÷", {"÷ 0061 ÷ 003A ÷ 05D0 ÷", kColonTailoring}},
      // WordBreakTest.txt:1268
      {"÷ 0061 × 003A × 0308 × 05D0 ÷", {"÷ 0061 ÷ 003A × 0308 ÷ 05D0 ÷", kColonTailoring}},
      // WordBreakTest.txt:1283
      {"÷ 0061 × 003A × 0061 × 2060 ÷", {"÷ 0061 ÷ 003A ÷ 0061 × 2060 ÷", kColonTailoring}},
      // WordBreakTest.txt:1284
      {"÷ 0061 × 003A × 0308 × 0061 × 2060 ÷", {"÷ 0061 ÷ 003A × 0308 ÷ 0061 × 2060 ÷", kColonTailoring}},
      // WordBreakTest.txt:1285
      {"÷ 0061 × 003A × 0061 ÷ 003A ÷", {"÷ 0061 ÷ 003A ÷ 0061 ÷ 003A ÷", kColonTailoring}},
      // WordBreakTest.txt:1286
      {"÷ 0061 × 003A × 0308 × 0061 ÷ 003A ÷", {"÷ 0061 ÷ 003A × 0308 ÷ 0061 ÷ 003A ÷", kColonTailoring}},
      // WordBreakTest.txt:1287
      {"÷ 0061 × 003A × 0061 ÷ 0027 ÷", {"÷ 0061 ÷ 003A ÷ 0061 ÷ 0027 ÷", kColonTailoring}},
      // WordBreakTest.txt:1288
      {"÷ 0061 × 003A × 0308 × 0061 ÷ 0027 ÷", {"÷ 0061 ÷ 003A × 0308 ÷ 0061 ÷ 0027 ÷", kColonTailoring}},
      // WordBreakTest.txt:1289
      {"÷ 0061 × 003A × 0061 ÷ 0027 × 2060 ÷", {"÷ 0061 ÷ 003A ÷ 0061 ÷ 0027 × 2060 ÷", kColonTailoring}},
      // WordBreakTest.txt:1290
      {"÷ 0061 × 003A × 0308 × 0061 ÷ 0027 × 2060 ÷",
       {"÷ 0061 ÷ 003A × 0308 ÷ 0061 ÷ 0027 × 2060 ÷", kColonTailoring}},
      // WordBreakTest.txt:1291
      {"÷ 0061 × 003A × 0061 ÷ 002C ÷", {"÷ 0061 ÷ 003A ÷ 0061 ÷ 002C ÷", kColonTailoring}},
      // WordBreakTest.txt:1292
      {"÷ 0061 × 003A × 0308 × 0061 ÷ 002C ÷", {"÷ 0061 ÷ 003A × 0308 ÷ 0061 ÷ 002C ÷", kColonTailoring}},
      // WordBreakTest.txt:1712
      {"÷ 0041 × 003A × 0041 ÷", {"÷ 0041 ÷ 003A ÷ 0041 ÷", kColonTailoring}},

  };
  return table;
}

const std::map<std::string, Tailoring>& grapheme_tailorings() {
  static const std::map<std::string, Tailoring> table = {};
  return table;
}

void check_file(const fs::path& path, BreakKind kind, const std::map<std::string, Tailoring>& tailorings) {
  // A dependency of the test suite: missing means failed, not skipped.
  INFO(path.string() << " is missing: run tools/install-deps.sh (Debian package unicode-data)");
  REQUIRE(fs::exists(path));
  const auto lines = parse_test_file(path);
  REQUIRE(lines.size() > 500);
  std::size_t agree = 0, tailored = 0;
  std::map<std::string, bool> tailoring_seen;
  for (const auto& t : lines) {
    const auto got = break_boundaries(t.text, kind);
    const auto it = tailorings.find(t.spec);
    if (it == tailorings.end()) {
      INFO(path.filename().string() << ":" << t.line << "\n  file: " << t.spec
                                    << "\n  ICU:  " << render(t, got));
      CHECK(got == t.expected);
      if (got == t.expected) ++agree;
    } else {
      INFO(path.filename().string() << ":" << t.line << " is listed as tailored (" << it->second.reason
                                    << ")");
      CHECK(render(t, got) == it->second.icu);
      CHECK(got != t.expected);
      ++tailored;
      tailoring_seen[t.spec] = true;
    }
  }
  // Every listed exception must occur in the file.
  for (const auto& [spec, tailoring] : tailorings) {
    INFO("listed tailoring not found in " << path.string() << ": " << spec);
    CHECK(tailoring_seen.count(spec) == 1);
  }
  CHECK(agree + tailored == lines.size());
  CHECK(tailored == tailorings.size());
}

}  // namespace

TEST_CASE("word boundaries follow WordBreakTest.txt (Unicode 15.0) except CLDR tailorings", "[uax29]") {
  check_file(kUnicodeDir / "WordBreakTest.txt", BreakKind::kWord, word_tailorings());
}

TEST_CASE("grapheme clusters follow GraphemeBreakTest.txt (Unicode 15.0)", "[uax29]") {
  check_file(kUnicodeDir / "GraphemeBreakTest.txt", BreakKind::kGrapheme, grapheme_tailorings());
}
