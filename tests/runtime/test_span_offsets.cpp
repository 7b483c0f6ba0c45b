// Spans keep the user's text (issue 11 item 2): after Context::tag(text), and in `gyre predict`'s
// TSV and JSON Lines, a span's bytes are a substring of the input, through NFKC and case folding.
//
// The tagger here is built by hand so that its tags are known: a one-layer LSTM whose input and
// output gates are open (b = +10), forget gate shut (b = -10) and candidate g = tanh(5 x), so
// h_t ~ tanh(tanh(5 x_t)) depends on the current token only (Hochreiter & Schmidhuber 1997,
// gate equations in docs/model-format.md). Token vectors are one-hot per type (date, time,
// model code) and zero for every other token; the readout scores I-<type> as 10 * h[type] and O
// as a constant 3, so each known token is I-<type> and everything else O.

#include <catch2/catch.hpp>

#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <map>
#include <sstream>
#include <string>
#include <vector>

#include "gyre/runtime/model.hpp"
#include "model_builder.hpp"
#include "runtime/detail/json.hpp"

#ifdef GYRE_RUNTIME_HAS_ICU

using gyre::runtime::Context;
using gyre::runtime::Model;
using Strings = std::vector<std::string>;

namespace {

// Words of each span type; "10:30" and "14/03" are listed whole too, in case a word-break
// tailoring keeps them together.
const std::map<std::string, std::size_t> kWordType = {
    {"14", 0}, {"/", 0},     {"03", 0}, {"14/03", 0}, {"10", 1},   {":", 1},
    {"30", 1}, {"10:30", 1}, {"kc", 2}, {"-", 2},     {"450x", 2},
};

std::vector<unsigned char> span_model_bytes() {
  gyre::test::RefModel r;
  r.task = "tag";
  r.scheme = "bio";
  r.labels = {"O", "B-date", "I-date", "B-time", "I-time", "B-model", "I-model"};
  r.tokenizer_mode = "words";
  r.normalize = true;
  r.E = 3;
  r.H = 3;
  for (const auto& [word, type] : kWordType) r.words.push_back(word);
  r.V = r.words.size() + 2;
  r.randomize(1);  // shapes; every value is set below
  for (auto& [name, v] : r.w) std::fill(v.begin(), v.end(), 0.0);
  auto& emb = r.w.at("tokens.vectors");
  for (std::size_t i = 0; i < r.words.size(); ++i) emb[(i + 2) * 3 + kWordType.at(r.words[i])] = 1.0;
  auto& wi = r.w.at("rnn.l0.fwd.w_input");  // rows [i f g o], H = 3 each
  for (std::size_t k = 0; k < 3; ++k) wi[(6 + k) * 3 + k] = 5.0;
  auto& b = r.w.at("rnn.l0.fwd.b_input");
  for (std::size_t k = 0; k < 3; ++k) {
    b[0 + k] = 10.0;   // input gate open
    b[3 + k] = -10.0;  // forget gate shut
    b[9 + k] = 10.0;   // output gate open
  }
  auto& ro = r.w.at("readout.w");  // [7 x 3]
  auto& rb = r.w.at("readout.b");
  rb[0] = 3.0;
  for (std::size_t type = 0; type < 3; ++type) {
    rb[1 + 2 * type] = -10.0;              // B-<type> never wins
    ro[(2 + 2 * type) * 3 + type] = 10.0;  // I-<type> = 10 * h[type]
  }
  return r.file();
}

Strings span_texts(std::string_view text, const gyre::runtime::TagResult& r) {
  Strings out;
  for (const auto& s : r.spans) {
    REQUIRE(s.byte_begin < s.byte_end);
    REQUIRE(s.byte_end <= text.size());
    // The span runs from its first token's first byte to its last token's last byte.
    REQUIRE(s.byte_begin == r.token_bytes[s.begin].begin);
    REQUIRE(s.byte_end == r.token_bytes[s.end - 1].end);
    out.push_back(std::string(s.type) + "=" +
                  std::string(text.substr(s.byte_begin, s.byte_end - s.byte_begin)));
  }
  return out;
}

// Inputs where normalization changes lengths, with the spans that must come out.
struct Case {
  std::string text;
  Strings spans;
};

std::vector<Case> cases() {
  return {
      // The example of issue 11: the normalized tokens would read "14 / 03", "10 : 30", "kc - 450x".
      {"can you come on 14/03 at 10:30 to fix the KC-450X", {"date=14/03", "time=10:30", "model=KC-450X"}},
      // Full-width digits, colon and letters (NFKC <wide>), a ligature U+FB01 before them.
      {"\xEF\xAC\x81x on \xEF\xBC\x91\xEF\xBC\x94/03 at 10\xEF\xBC\x9A\xEF\xBC\x93\xEF\xBC\x90 the "
       "\xEF\xBC\xAB\xEF\xBC\xA3-450X",
       {"date=\xEF\xBC\x91\xEF\xBC\x94/03", "time=10\xEF\xBC\x9A\xEF\xBC\x93\xEF\xBC\x90",
        "model=\xEF\xBC\xAB\xEF\xBC\xA3-450X"}},
      // A combining mark (e + U+0301), a ZWJ emoji sequence and CRLF before the spans.
      {"cafe\xCC\x81 \xF0\x9F\x91\xA9\xE2\x80\x8D\xF0\x9F\x94\xA7\r\non 14/03\r\nKC-450X",
       {"date=14/03", "model=KC-450X"}},
  };
}

}  // namespace

TEST_CASE("tag(text): spans and tokens carry the bytes of the input", "[runtime][offsets]") {
  const auto bytes = span_model_bytes();
  const Model model = Model::from_buffer(bytes.data(), bytes.size());
  Context ctx(model);
  for (const Case& c : cases()) {
    INFO(c.text);
    const auto& r = ctx.tag(c.text);
    REQUIRE(r.token_bytes.size() == r.tokens.size());
    CHECK(span_texts(c.text, r) == c.spans);
    // Each token's source bytes normalize to the token.
    for (std::size_t i = 0; i < r.tokens.size(); ++i) {
      const auto& tb = r.token_bytes[i];
      CHECK(model.tokenizer().normalize(c.text.substr(tb.begin, tb.end - tb.begin)) == r.tokens[i]);
    }
  }
  SECTION("tag_tokens and tag_ids have no text: no token bytes, spans at 0, 0") {
    const Strings tokens = {"on", "14", "/", "03"};
    const auto& r = ctx.tag_tokens(tokens);
    CHECK(r.token_bytes.size() == 0);
    REQUIRE(r.spans.size() == 1);
    CHECK((r.spans[0].begin == 1 && r.spans[0].end == 4));
    CHECK((r.spans[0].byte_begin == 0 && r.spans[0].byte_end == 0));
  }
}

#ifdef GYRE_CLI_PATH
namespace {
std::string run_predict(const std::string& model, const std::string& input, const std::string& format) {
  const std::string dir = GYRE_TEST_TMP_DIR;
  std::system(("mkdir -p '" + dir + "'").c_str());
  const std::string in = dir + "/span_offsets_in.txt", out = dir + "/span_offsets_out.txt";
  std::ofstream(in, std::ios::binary) << input;
  const std::string cmd = "'" + std::string(GYRE_CLI_PATH) + "' predict '" + model + "' --input '" + in +
                          "' --format " + format + " > '" + out + "'";
  REQUIRE(std::system(cmd.c_str()) == 0);
  std::ifstream f(out, std::ios::binary);
  std::stringstream ss;
  ss << f.rdbuf();
  return ss.str();
}
}  // namespace

TEST_CASE("gyre predict prints the input's own span text and byte offsets", "[runtime][offsets][cli]") {
  const auto bytes = span_model_bytes();
  const std::string model = std::string(GYRE_TEST_TMP_DIR) + "/span_offsets.gyre";
  std::system((std::string("mkdir -p '") + GYRE_TEST_TMP_DIR + "'").c_str());
  std::ofstream(model, std::ios::binary)
      .write(reinterpret_cast<const char*>(bytes.data()), static_cast<std::streamsize>(bytes.size()));
  // predict reads lines, so the CRLF case is given as JSON Lines with "\r\n" inside the text; a
  // text line's own final CR is not part of its text.
  const auto all = cases();
  std::string jsonl_input;
  for (const Case& c : all) {
    auto record = gyre::runtime::detail::Json::object();
    record.set("text", gyre::runtime::detail::Json::string(c.text));
    jsonl_input += record.dump() + "\n";
  }

  SECTION("JSON Lines: spans with byte_start/byte_end and the original text; token_bytes") {
    const std::string dir = GYRE_TEST_TMP_DIR;
    const std::string in = dir + "/span_offsets_in.jsonl", out = dir + "/span_offsets_out.jsonl";
    std::ofstream(in, std::ios::binary) << jsonl_input;
    const std::string cmd = "'" + std::string(GYRE_CLI_PATH) + "' predict '" + model + "' --input '" + in +
                            "' --input-format jsonl --format jsonl > '" + out + "'";
    REQUIRE(std::system(cmd.c_str()) == 0);
    std::ifstream f(out, std::ios::binary);
    std::string line;
    std::size_t n = 0;
    while (std::getline(f, line)) {
      REQUIRE(n < all.size());
      const Case& c = all[n++];
      const auto j = gyre::runtime::detail::Json::parse(line);
      auto at = [](const gyre::runtime::detail::Json& o,
                   const char* key) -> const gyre::runtime::detail::Json& {
        const auto* v = o.find(key);
        REQUIRE(v != nullptr);
        return *v;
      };
      Strings got;
      for (const auto& s : at(j, "spans").items()) {
        const auto b = static_cast<std::size_t>(at(s, "byte_start").as_number());
        const auto e = static_cast<std::size_t>(at(s, "byte_end").as_number());
        CHECK(at(s, "text").as_string() == c.text.substr(b, e - b));
        got.push_back(at(s, "type").as_string() + "=" + at(s, "text").as_string());
      }
      CHECK(got == c.spans);
      REQUIRE(at(j, "token_bytes").size() == at(j, "tokens").size());
    }
    CHECK(n == all.size());
  }
  SECTION("TSV: type=original text, then the spans' byte ranges") {
    // The first two cases have no line breaks inside; a text line ending in CRLF keeps its offsets.
    const std::string out = run_predict(model, all[0].text + "\r\n" + all[1].text + "\n", "tsv");
    std::istringstream lines(out);
    std::string row;
    REQUIRE(std::getline(lines, row));
    CHECK(row.substr(row.find('\t') + 1) == "date=14/03; time=10:30; model=KC-450X\t16-21 25-30 42-49");
    REQUIRE(std::getline(lines, row));
    const std::string spans = row.substr(row.find('\t') + 1);
    CHECK(spans.substr(0, spans.find('\t')) ==
          all[1].spans[0] + "; " + all[1].spans[1] + "; " + all[1].spans[2]);
  }
}
#endif  // GYRE_CLI_PATH

#endif  // GYRE_RUNTIME_HAS_ICU
