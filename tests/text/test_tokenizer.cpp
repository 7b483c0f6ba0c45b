// Tokenizer behaviour: normalization against the Unicode data files and UAX #15's examples,
// segmentation per UAX #29, settings JSON, errors, thread safety.

#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/text/tokenizer.hpp"
#include "runtime/detail/segment.hpp"

#ifdef GYRE_RUNTIME_HAS_ICU
#include <unicode/normalizer2.h>
#include <unicode/uchar.h>
#include <unicode/unistr.h>
#endif

using gyre::text::Tokenizer;
using gyre::text::TokenizerMode;
using gyre::text::TokenizerSettings;
using Tokens = std::vector<std::string>;

#include "support/utf8.hpp"

namespace {

using gyre::test::utf8;

TokenizerSettings raw(TokenizerMode mode) {
  TokenizerSettings s;
  s.mode = mode;
  s.nfkc = false;
  s.case_fold = false;
  return s;
}

}  // namespace

TEST_CASE("is_valid_utf8 follows Unicode Table 3-7", "[tokenizer]") {
  using gyre::text::is_valid_utf8;
  CHECK(is_valid_utf8(""));
  CHECK(is_valid_utf8("plain ascii text that is longer than eight bytes"));
  CHECK(is_valid_utf8("\xC3\xA9\xE2\x82\xAC\xF0\x9F\x98\x80"));  // é € 😀
  CHECK(is_valid_utf8("\xF4\x8F\xBF\xBF"));                      // U+10FFFF, the last code point
  CHECK_FALSE(is_valid_utf8("\xC0\x80"));                        // overlong NUL
  CHECK_FALSE(is_valid_utf8("\xE0\x80\xAF"));                    // overlong '/'
  CHECK_FALSE(is_valid_utf8("\xED\xA0\x80"));                    // surrogate U+D800
  CHECK_FALSE(is_valid_utf8("\xF4\x90\x80\x80"));                // U+110000
  CHECK_FALSE(is_valid_utf8("abc\xC3"));                         // truncated
  CHECK_FALSE(is_valid_utf8("\x80"));                            // lone continuation
  CHECK_FALSE(is_valid_utf8("12345678\xFF"));                    // after the 8-byte fast path
  CHECK(gyre::runtime::first_invalid_utf8("12345678ab\xFE") == 10);
}

TEST_CASE("mode names round-trip and unknown names are refused", "[tokenizer]") {
  for (auto m : {TokenizerMode::kWords, TokenizerMode::kChars, TokenizerMode::kWhitespace})
    CHECK(gyre::text::tokenizer_mode_from_string(gyre::text::to_string(m)) == m);
  CHECK_THROWS_WITH(gyre::text::tokenizer_mode_from_string("bytes"),
                    Catch::Contains("unknown tokenizer mode 'bytes'"));
}

TEST_CASE("invalid UTF-8 is refused, and tokenize_at names file and line", "[tokenizer]") {
  const Tokenizer tok(TokenizerSettings{});
  Tokens out{"stale"};
  CHECK_THROWS_AS(tok.tokenize("ok \xED\xA0\x80", out), gyre::runtime::Error);
  CHECK(out.empty());
  // Bytes are counted from 1 in messages, as the corpus reader counts them (issue 10 item 8).
  CHECK_THROWS_WITH(tok.normalize("\xFF"), Catch::Contains("invalid UTF-8 at byte 1 of the text"));
  CHECK_THROWS_WITH(tok.normalize("ab\xFF"), Catch::Contains("invalid UTF-8 at byte 3 of the text"));
  try {
    gyre::text::tokenize_at(tok, "bad \xC0\x80", "train.tsv", 17, out);
    FAIL("no exception");
  } catch (const gyre::ParseError& e) {
    CHECK(e.line() == 17);
    CHECK_THAT(e.what(), Catch::StartsWith("train.tsv:17: invalid UTF-8 at byte 5"));
  }
}

TEST_CASE("white space list matches Unicode PropList.txt", "[tokenizer]") {
  // ref: /usr/share/unicode/PropList.txt (Unicode 15.0, Debian unicode-data), property White_Space.
  const std::filesystem::path path = "/usr/share/unicode/PropList.txt";
  // A dependency of the test suite (tools/install-deps.sh): missing means failed, not skipped.
  INFO(path << " is missing: run tools/install-deps.sh (Debian package unicode-data)");
  REQUIRE(std::filesystem::exists(path));
  std::vector<bool> ws(0x110000, false);
  std::ifstream in(path);
  std::string line;
  std::size_t ranges = 0;
  while (std::getline(in, line)) {
    if (line.find("; White_Space") == std::string::npos || line[0] == '#') continue;
    const std::string range = line.substr(0, line.find(' '));
    const auto dots = range.find("..");
    const auto lo = std::stoul(range.substr(0, dots), nullptr, 16);
    const auto hi = dots == std::string::npos ? lo : std::stoul(range.substr(dots + 2), nullptr, 16);
    for (auto c = lo; c <= hi; ++c) ws[c] = true;
    ++ranges;
  }
  REQUIRE(ranges >= 10);
  std::size_t mismatches = 0;
  for (char32_t c = 0; c < 0x110000; ++c)
    if (gyre::runtime::detail::is_white_space(c) != ws[c]) ++mismatches;
  CHECK(mismatches == 0);
}

#ifdef GYRE_RUNTIME_HAS_ICU

TEST_CASE("NFKC reproduces the examples of UAX #15", "[tokenizer]") {
  TokenizerSettings s;
  s.case_fold = false;
  const Tokenizer tok(s);
  // ref: UAX #15 (Unicode 15.0) Figure 6 "Compatibility Equivalence" and Figure 5/Table 6.
  CHECK(tok.normalize("\xEF\xAC\x81") == "fi");                    // U+FB01 LATIN SMALL LIGATURE FI -> f i
  CHECK(tok.normalize("2\xE2\x81\xB5") == "25");                   // 2 U+2075 SUPERSCRIPT FIVE -> 2 5
  CHECK(tok.normalize("\xE1\xBA\x9B\xCC\xA3") == "\xE1\xB9\xA9");  // U+1E9B U+0323 -> U+1E69 (Table 6)
  CHECK(tok.normalize("\xE2\x84\xAB") == "\xC3\x85");              // U+212B ANGSTROM SIGN -> U+00C5
  CHECK(tok.normalize("e\xCC\x81") == "\xC3\xA9");                 // e + U+0301 composes to U+00E9
  CHECK(tok.normalize("\xEF\xBC\xA1\xEF\xBC\x91") == "A1");        // fullwidth A, 1 (UnicodeData <wide>)
}

TEST_CASE("case folding follows CaseFolding.txt (C + F mappings)", "[tokenizer]") {
  // ref: /usr/share/unicode/CaseFolding.txt (Unicode 15.0): full case folding = statuses C and F.
  const std::filesystem::path path = "/usr/share/unicode/CaseFolding.txt";
  // A dependency of the test suite (tools/install-deps.sh): missing means failed, not skipped.
  INFO(path << " is missing: run tools/install-deps.sh (Debian package unicode-data)");
  REQUIRE(std::filesystem::exists(path));
  TokenizerSettings s;
  s.nfkc = false;
  const Tokenizer tok(s);
  std::ifstream in(path);
  std::string line;
  std::size_t checked = 0, wrong = 0;
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    std::istringstream fields(line);
    std::string code, status, mapping;
    std::getline(fields, code, ';');
    std::getline(fields, status, ';');
    std::getline(fields, mapping, ';');
    if (status != " C" && status != " F") continue;
    std::string expected;
    std::istringstream cps(mapping);
    std::string cp;
    while (cps >> cp) expected += utf8(static_cast<char32_t>(std::stoul(cp, nullptr, 16)));
    const std::string got = tok.normalize(utf8(static_cast<char32_t>(std::stoul(code, nullptr, 16))));
    if (got != expected) {
      ++wrong;
      UNSCOPED_INFO("CaseFolding.txt: " << line);
    }
    ++checked;
  }
  CHECK(checked > 1400);
  CHECK(wrong == 0);
  // ASCII shortcut: only A-Z change.
  CHECK(tok.normalize("Hello, WORLD! [x]_@") == "hello, world! [x]_@");
  // Final sigma folds to sigma (C entry 03C2), sharp s to "ss" (F entry 00DF).
  CHECK(tok.normalize("\xCF\x82") == "\xCF\x83");
  CHECK(tok.normalize("Stra\xC3\x9F"
                      "e") == "strasse");
}

TEST_CASE("ASCII shortcuts give what ICU gives for the same text", "[tokenizer]") {
  // Reference: ICU's NFKC and full case folding applied directly (UTF-16 API), which the
  // tokenizer skips for ASCII-only text. Seeded random strings over all ASCII bytes.
  gyre::Rng rng(20240601);
  UErrorCode status = U_ZERO_ERROR;
  const icu::Normalizer2* nfkc = icu::Normalizer2::getNFKCInstance(status);
  REQUIRE(U_SUCCESS(status));
  const Tokenizer tok(TokenizerSettings{});
  for (int trial = 0; trial < 2000; ++trial) {
    std::string s(static_cast<std::size_t>(rng.below(40)), ' ');
    for (char& c : s) c = static_cast<char>(rng.below(128));
    icu::UnicodeString u = nfkc->normalize(icu::UnicodeString::fromUTF8(s), status);
    u.foldCase(U_FOLD_CASE_DEFAULT);
    std::string expected;
    u.toUTF8String(expected);
    INFO("seed 20240601, trial " << trial);
    REQUIRE(tok.normalize(s) == expected);
  }
}

TEST_CASE("digit folding maps every Nd digit to 0", "[tokenizer]") {
  TokenizerSettings s;
  s.fold_digits = true;
  const Tokenizer tok(s);
  // U+0663 ARABIC-INDIC DIGIT THREE and U+0967 DEVANAGARI DIGIT ONE are Nd (UnicodeData.txt);
  // U+00BD VULGAR FRACTION ONE HALF is No, and NFKC turns it into "1⁄2" first.
  CHECK(tok.normalize("Room 42, \xD9\xA3\xE0\xA5\xA7") == "room 00, 00");
  CHECK(tok.normalize("\xC2\xBD") ==
        "0\xE2\x81\x84"
        "0");
  CHECK(tok.tokenize("call 555-0199 at 9:30") == Tokens{"call", "000", "-", "0000", "at", "0", ":", "00"});
}

TEST_CASE("words mode: UAX #29 words, whitespace dropped, punctuation optional", "[tokenizer]") {
  const Tokenizer tok(TokenizerSettings{});
  // WB6/WB7 keep "can't" together, WB11/WB12 keep "3.14" and "1,000" (UAX #29 rules).
  CHECK(tok.tokenize("Can't pay 3.14 or 1,000 EUR?!") ==
        Tokens{"can't", "pay", "3.14", "or", "1,000", "eur", "?", "!"});
  CHECK(tok.tokenize("  \t\n ") == Tokens{});
  CHECK(tok.tokenize("") == Tokens{});
  // Non-ASCII letters: NFKC + case folding, then words.
  CHECK(tok.tokenize("\xC3\x89t\xC3\xA9 \xCE\x9A\xCE\xB1\xCE\xBB\xCE\xB7") ==
        Tokens{"\xC3\xA9t\xC3\xA9", "\xCE\xBA\xCE\xB1\xCE\xBB\xCE\xB7"});
  // Emoji with a ZWJ sequence stays one token (WB3c); symbols are not punctuation.
  CHECK(tok.tokenize("ok \xF0\x9F\x91\xA9\xE2\x80\x8D\xF0\x9F\x94\xA7 +") ==
        Tokens{"ok", "\xF0\x9F\x91\xA9\xE2\x80\x8D\xF0\x9F\x94\xA7", "+"});

  TokenizerSettings s;
  s.keep_punctuation = false;
  const Tokenizer drop(s);
  CHECK(drop.tokenize("Hello, world... (really) +1 \xC2\xBF\xC2\xA1") ==
        Tokens{"hello", "world", "really", "+", "1"});

  s.max_tokens = 2;
  CHECK(Tokenizer(s).tokenize("one, two three") == Tokens{"one", "two"});
}

TEST_CASE("chars mode: grapheme clusters, one space between words", "[tokenizer]") {
  const Tokenizer tok(raw(TokenizerMode::kChars));
  // e + U+0301 is one extended grapheme cluster (GB9); flag = two regional indicators (GB12).
  CHECK(tok.tokenize("  e\xCC\x81 \t a\xF0\x9F\x87\xAB\xF0\x9F\x87\xB7 ") ==
        Tokens{"e\xCC\x81", " ", "a", "\xF0\x9F\x87\xAB\xF0\x9F\x87\xB7"});
  TokenizerSettings s = raw(TokenizerMode::kChars);
  s.keep_punctuation = false;
  s.max_tokens = 4;
  CHECK(Tokenizer(s).tokenize("a, b! c") == Tokens{"a", " ", "b"});  // never ends on the space
}

#endif  // GYRE_RUNTIME_HAS_ICU

TEST_CASE("whitespace mode splits on Unicode White_Space", "[tokenizer]") {
  const Tokenizer tok(raw(TokenizerMode::kWhitespace));
  // U+00A0 NO-BREAK SPACE, U+3000 IDEOGRAPHIC SPACE and U+2029 are White_Space (PropList.txt).
  CHECK(tok.tokenize(" A\xC2\xA0"
                     "b,\xE3\x80\x80"
                     "c\xE2\x80\xA9\n") == Tokens{"A", "b,", "c"});
  TokenizerSettings s = raw(TokenizerMode::kWhitespace);
  s.max_tokens = 1;
  CHECK(Tokenizer(s).tokenize("x y z") == Tokens{"x"});
#ifdef GYRE_RUNTIME_HAS_ICU
  s.max_tokens = 0;
  s.keep_punctuation = false;
  CHECK(Tokenizer(s).tokenize("a , b ... c-d") == Tokens{"a", "b", "c-d"});
#endif
}

TEST_CASE("tokenize says whether max_tokens cut the text", "[tokenizer]") {
  // Cut only when a token that would have been kept follows the last one kept: exactly N tokens,
  // or N tokens then whitespace or dropped punctuation, is not a cut.
  Tokens out;
  TokenizerSettings s = raw(TokenizerMode::kWhitespace);
  s.max_tokens = 2;
  const Tokenizer ws(s);
  CHECK(ws.tokenize("x y z", out));
  CHECK(out == Tokens{"x", "y"});
  CHECK_FALSE(ws.tokenize("x y", out));
  CHECK_FALSE(ws.tokenize(" x  y \t ", out));
  CHECK(out == Tokens{"x", "y"});
  CHECK_FALSE(ws.tokenize("x", out));
  s.max_tokens = 0;
  CHECK_FALSE(Tokenizer(s).tokenize("a b c d e f", out));
#ifdef GYRE_RUNTIME_HAS_ICU
  TokenizerSettings w;
  w.max_tokens = 3;
  w.keep_punctuation = false;
  const Tokenizer words(w);
  CHECK_FALSE(words.tokenize("one, two three!!", out));
  CHECK(out == Tokens{"one", "two", "three"});
  CHECK(words.tokenize("one two three ... four", out));
  CHECK(out == Tokens{"one", "two", "three"});
  TokenizerSettings c = raw(TokenizerMode::kChars);
  c.max_tokens = 3;  // "a", " ", "b"
  const Tokenizer chars(c);
  CHECK_FALSE(chars.tokenize("a b ", out));
  CHECK(chars.tokenize("a bc", out));
  CHECK(out == Tokens{"a", " ", "b"});
  c.max_tokens = 2;  // "a" then a space that needs a cluster after it: stops at "a"
  CHECK(Tokenizer(c).tokenize("a b", out));
  CHECK(out == Tokens{"a"});
#endif
}

TEST_CASE("tokenize reuses the output vector and is thread-safe", "[tokenizer]") {
  const Tokenizer tok(TokenizerSettings{});
  const std::vector<std::string> texts = {
      "The kettle's coil failed twice!", "Ça coûte 12,50 €.", "\xE6\x97\xA5\xE6\x9C\xAC\xE8\xAA\x9E test",
      "\xD0\x9F\xD1\x80\xD0\xB8\xD0\xB2\xD0\xB5\xD1\x82, \xD0\xBC\xD0\xB8\xD1\x80"};
  std::vector<Tokens> expected;
  for (const auto& t : texts) expected.push_back(tok.tokenize(t));
  Tokens out{"a", "b", "c", "d", "e", "f", "g", "h", "i", "j"};
  tok.tokenize(texts[0], out);
  CHECK(out == expected[0]);

  std::vector<int> failures(4, 0);
  std::vector<std::thread> threads;
  for (std::size_t w = 0; w < failures.size(); ++w)
    threads.emplace_back([&, w] {
      Tokens local;
      for (int rep = 0; rep < 500; ++rep)
        for (std::size_t i = 0; i < texts.size(); ++i) {
          tok.tokenize(texts[(i + w) % texts.size()], local);
          if (local != expected[(i + w) % texts.size()]) ++failures[w];
        }
    });
  for (auto& t : threads) t.join();
  for (int f : failures) CHECK(f == 0);
}

TEST_CASE("tokenizer settings JSON", "[tokenizer]") {
  TokenizerSettings s;
  s.mode = TokenizerMode::kChars;
  s.nfkc = false;
  s.fold_digits = true;
  s.keep_punctuation = false;
  s.max_tokens = 300;
  const nlohmann::json j = s;
  CHECK(
      j.dump() ==
      R"({"case_fold":true,"fold_digits":true,"keep_punctuation":false,"max_tokens":300,"mode":"chars","nfkc":false})");
  CHECK(j.get<TokenizerSettings>() == s);
  CHECK(nlohmann::json::object().get<TokenizerSettings>() == TokenizerSettings{});

  auto parse = [](const char* text) { return nlohmann::json::parse(text).get<TokenizerSettings>(); };
  CHECK_THROWS_WITH(parse(R"({"mode": "bytes"})"), Catch::Contains("tokenizer.mode"));
  CHECK_THROWS_WITH(parse(R"({"nfkc": 1})"), Catch::Contains("tokenizer.nfkc"));
  CHECK_THROWS_WITH(parse(R"({"max_tokens": -3})"), Catch::Contains("tokenizer.max_tokens"));
  CHECK_THROWS_WITH(parse(R"({"lowercase": true})"), Catch::Contains("tokenizer.lowercase"));
  CHECK_THROWS_AS(parse(R"([1])"), gyre::ConfigError);
}
