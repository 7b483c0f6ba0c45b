// Token byte ranges: each token's bytes in the original text, through NFKC, case folding and
// digit folding (issue 11 item 2). Expected offsets are worked by hand from the UTF-8 encodings
// (RFC 3629) and the normalization data: NFKC decompositions from UnicodeData.txt (<wide> for
// full-width forms, <compat> for ligatures), canonical composition of e + U+0301 (UAX #15), full
// case folding from CaseFolding.txt, word boundaries from UAX #29.

#include <catch2/catch.hpp>

#include <cstdint>
#include <random>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/text/tokenizer.hpp"

#ifdef GYRE_RUNTIME_HAS_ICU

using gyre::runtime::ByteRange;
using gyre::text::Tokenizer;
using gyre::text::TokenizerMode;
using gyre::text::TokenizerSettings;
using Strings = std::vector<std::string>;

namespace {

struct Tokenized {
  Strings tokens;
  std::vector<ByteRange> ranges;
  Strings sources;  // text.substr(range) per token
  std::vector<std::size_t> begins;
};

Tokenized run(const Tokenizer& tok, std::string_view text) {
  Tokenized t;
  tok.tokenize(text, t.tokens, t.ranges);
  REQUIRE(t.ranges.size() == t.tokens.size());
  std::size_t prev_begin = 0, prev_end = 0;
  for (const ByteRange& r : t.ranges) {
    // Ascending, non-empty, inside the text; non-overlapping, except that tokens cut from one
    // normalization piece (chars mode: "fi" from U+FB01) share that piece's range exactly.
    const bool shares_previous = r.begin == prev_begin && r.end == prev_end && prev_end > 0;
    REQUIRE((r.begin >= prev_end || shares_previous));
    REQUIRE(r.begin < r.end);
    REQUIRE(r.end <= text.size());
    prev_begin = r.begin;
    prev_end = r.end;
    t.sources.emplace_back(text.substr(r.begin, r.end - r.begin));
    t.begins.push_back(r.begin);
  }
  return t;
}

}  // namespace

TEST_CASE("token bytes of ASCII text are the tokens' own positions", "[tokenizer][offsets]") {
  const Tokenizer tok(TokenizerSettings{});  // words, NFKC, case folding
  const std::string text = "can you come on 14/03 at 10:30 to fix the KC-450X";
  const Tokenized t = run(tok, text);
  // Folding changes letters, never lengths, in ASCII: each source folds to its token.
  for (std::size_t i = 0; i < t.tokens.size(); ++i) CHECK(tok.normalize(t.sources[i]) == t.tokens[i]);
  CHECK(t.sources.back() == "450X");
  CHECK(t.tokens.back() == "450x");
  CHECK(t.begins.back() == 45);  // "KC-450X" starts at byte 42
  SECTION("CRLF line ends are whitespace and keep later offsets exact") {
    const Tokenized c = run(tok, "Kettle\r\nbroken\r\n");
    CHECK(c.tokens == Strings{"kettle", "broken"});
    CHECK(c.sources == Strings{"Kettle", "broken"});
    CHECK(c.begins == std::vector<std::size_t>{0, 8});
  }
}

TEST_CASE("token bytes through NFKC: full-width forms, ligatures, combining marks", "[tokenizer][offsets]") {
  const Tokenizer tok(TokenizerSettings{});
  SECTION("full-width digits and solidus (<wide> decompositions, 3 bytes -> 1)") {
    // "on " then U+FF11 U+FF14 U+FF0F U+FF10 U+FF13, three bytes each.
    const Tokenized t = run(tok, "on \xEF\xBC\x91\xEF\xBC\x94\xEF\xBC\x8F\xEF\xBC\x90\xEF\xBC\x93");
    CHECK(t.tokens == Strings{"on", "14", "/", "03"});
    CHECK(t.begins == std::vector<std::size_t>{0, 3, 9, 12});
    CHECK(t.ranges.back().end == 18);
    CHECK(t.sources[1] == "\xEF\xBC\x91\xEF\xBC\x94");
  }
  SECTION("full-width letters: NFKC and case folding both change them") {
    // U+FF2B U+FF23 "-" U+FF14 U+FF15 U+FF10 U+FF38 -> "kc", "-", "450x".
    const std::string text = "\xEF\xBC\xAB\xEF\xBC\xA3-\xEF\xBC\x94\xEF\xBC\x95\xEF\xBC\x90\xEF\xBC\xB8";
    const Tokenized t = run(tok, text);
    CHECK(t.tokens == Strings{"kc", "-", "450x"});
    CHECK(t.begins == std::vector<std::size_t>{0, 6, 7});
    CHECK(t.ranges.back().end == 19);
  }
  SECTION("ligatures U+FB01 and U+FB02 (<compat> fi, fl)") {
    const Tokenized t = run(tok, "\xEF\xAC\x81x the \xEF\xAC\x82oor");
    CHECK(t.tokens == Strings{"fix", "the", "floor"});
    CHECK(t.sources == Strings{"\xEF\xAC\x81x", "the", "\xEF\xAC\x82oor"});
    CHECK(t.begins == std::vector<std::size_t>{0, 5, 9});
  }
  SECTION("combining mark composed by NFKC (e + U+0301 -> U+00E9), then case folding") {
    const Tokenized t = run(tok, "Cafe\xCC\x81 ok");
    CHECK(t.tokens == Strings{"caf\xC3\xA9", "ok"});
    CHECK(t.sources == Strings{"Cafe\xCC\x81", "ok"});
    CHECK(t.begins == std::vector<std::size_t>{0, 7});
  }
  SECTION("case folding that lengthens: U+0130 -> i + U+0307 (CaseFolding.txt, F)") {
    const Tokenized t = run(tok, "at \xC4\xB0stanbul");
    CHECK(t.tokens == Strings{"at", "i\xCC\x87stanbul"});
    CHECK(t.sources == Strings{"at", "\xC4\xB0stanbul"});
  }
  SECTION("emoji, a ZWJ sequence (one word by UAX #29 WB3c), CRLF") {
    // U+1F469 U+200D U+1F527: 4 + 3 + 4 bytes.
    const std::string text = "ok \xF0\x9F\x91\xA9\xE2\x80\x8D\xF0\x9F\x94\xA7\r\n\xEF\xAC\x81x";
    const Tokenized t = run(tok, text);
    CHECK(t.tokens == Strings{"ok", "\xF0\x9F\x91\xA9\xE2\x80\x8D\xF0\x9F\x94\xA7", "fix"});
    CHECK(t.begins == std::vector<std::size_t>{0, 3, 16});
    CHECK(t.ranges[1].end == 14);
    CHECK(t.ranges[2].end == 20);
  }
}

TEST_CASE("token bytes through digit folding", "[tokenizer][offsets]") {
  TokenizerSettings s;
  s.fold_digits = true;
  const Tokenizer tok(s);
  // U+0663 ARABIC-INDIC DIGIT THREE (Nd, 2 bytes, no NFKC decomposition) folds to "0".
  const Tokenized a = run(tok, "\xD9\xA3 Apples");
  CHECK(a.tokens == Strings{"0", "apples"});
  CHECK(a.begins == std::vector<std::size_t>{0, 3});
  CHECK(a.ranges[0].end == 2);
  // Full-width "12": NFKC gives "12" (6 bytes -> 2), then digit folding "00".
  const Tokenized b = run(tok, "x \xEF\xBC\x91\xEF\xBC\x92 y");
  CHECK(b.tokens == Strings{"x", "00", "y"});
  CHECK(b.begins == std::vector<std::size_t>{0, 2, 9});
}

TEST_CASE("chars mode: clusters of one NFKC piece share its bytes, the space token spans the run",
          "[tokenizer][offsets]") {
  TokenizerSettings s;
  s.mode = TokenizerMode::kChars;
  const Tokenizer tok(s);
  // U+FB01 becomes the two clusters "f" "i": both come from its three bytes.
  const Tokenized t = run(tok, "\xEF\xAC\x81 \r\n a");
  CHECK(t.tokens == Strings{"f", "i", " ", "a"});
  REQUIRE(t.ranges.size() == 4);
  CHECK((t.ranges[0].begin == 0 && t.ranges[0].end == 3));
  CHECK((t.ranges[1].begin == 0 && t.ranges[1].end == 3));
  CHECK((t.ranges[2].begin == 3 && t.ranges[2].end == 7));  // " \r\n " -> one " " token
  CHECK((t.ranges[3].begin == 7 && t.ranges[3].end == 8));
}

TEST_CASE("token bytes without normalization, and after a max_tokens cut", "[tokenizer][offsets]") {
  TokenizerSettings s;
  s.mode = TokenizerMode::kWhitespace;
  s.nfkc = false;
  s.case_fold = false;
  s.max_tokens = 2;
  const Tokenized t = run(Tokenizer(s),
                          " \xEF\xAC\x81 B\xC2\xA0"
                          "c d");
  CHECK(t.tokens == Strings{"\xEF\xAC\x81", "B"});
  CHECK(t.begins == std::vector<std::size_t>{1, 5});
}

TEST_CASE("every token's source bytes normalize to the token (random mixed text, fixed seed)",
          "[tokenizer][offsets]") {
  // Pieces whose normalization never straddles a word boundary, so the property is exact.
  const std::vector<std::string> pieces = {
      "a",
      "Z",
      "kettle",
      "450",
      " ",
      "  ",
      "\r\n",
      "\t",
      "-",
      ".",
      ",",
      "/",
      "\xEF\xAC\x81",                                  // U+FB01 ligature fi
      "\xEF\xBC\x91",                                  // U+FF11 full-width 1
      "\xEF\xBC\xAB",                                  // U+FF2B full-width K
      "e\xCC\x81",                                     // e + combining acute
      "\xC4\xB0",                                      // U+0130 capital I with dot above
      "\xC3\x9F",                                      // U+00DF sharp s (folds to ss)
      "\xD9\xA3",                                      // U+0663 Arabic-Indic three
      "\xF0\x9F\x91\xA9\xE2\x80\x8D\xF0\x9F\x94\xA7",  // ZWJ emoji sequence
      "\xE2\x84\xAB",                                  // U+212B ANGSTROM SIGN -> U+00C5 -> folded U+00E5
  };
  const std::uint32_t seed = 20261202;
  INFO("seed " << seed);
  std::mt19937 rng(seed);
  for (const bool fold_digits : {false, true}) {
    TokenizerSettings s;
    s.fold_digits = fold_digits;
    const Tokenizer tok(s);
    for (int rep = 0; rep < 300; ++rep) {
      std::string text;
      const int n = 1 + static_cast<int>(rng() % 12);
      for (int i = 0; i < n; ++i) text += pieces[rng() % pieces.size()];
      const Tokenized t = run(tok, text);
      INFO("text '" << text << "'");
      for (std::size_t i = 0; i < t.tokens.size(); ++i) CHECK(tok.normalize(t.sources[i]) == t.tokens[i]);
      Strings plain;
      tok.tokenize(text, plain);
      CHECK(plain == t.tokens);  // asking for ranges changes no token
    }
  }
}

#endif  // GYRE_RUNTIME_HAS_ICU
