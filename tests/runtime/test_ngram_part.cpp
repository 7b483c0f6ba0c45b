// The n-gram part's features and scores (include/gyre/runtime/ngram_part.hpp). The weighting is
// "sublinear tf" then L2 normalisation (Manning, Raghavan & Schuetze 2008, section 6.4.1: wf =
// 1 + log tf; python3-sklearn's TfidfVectorizer(use_idf=False, sublinear_tf=True, norm="l2")
// computes the same); expected values below are worked by hand from that formula.

#include <catch2/catch.hpp>

#include <cmath>
#include <string>
#include <vector>

#include "gyre/runtime/error.hpp"
#include "gyre/runtime/ngram_part.hpp"

using gyre::runtime::NgramPart;
using gyre::runtime::NgramScratch;

namespace {
std::string join(std::initializer_list<std::string> items) {
  std::string out;
  for (const auto& item : items) {
    if (!out.empty()) out += gyre::runtime::kNgramJoin;
    out += item;
  }
  return out;
}
}  // namespace

TEST_CASE("n-gram keys: unigrams, then padded higher orders in order of appearance", "[runtime][ngram]") {
  const std::string b(gyre::runtime::kNgramBegin);
  const std::string e(gyre::runtime::kNgramEnd);
  std::vector<std::string> keys;
  gyre::runtime::ngram_keys({"a", "b", "a"}, 2, keys);
  const std::vector<std::string> want2 = {
      "a", "b", "a", join({b, "a"}), join({"a", "b"}), join({"b", "a"}), join({"a", e})};
  CHECK(keys == want2);
  keys.clear();
  gyre::runtime::ngram_keys({"x"}, 3, keys);
  // order 3 over [<b>, x, </e>]: one trigram; bigrams <b> x and x </e>.
  const std::vector<std::string> want3 = {"x", join({b, "x"}), join({"x", e}), join({b, "x", e})};
  CHECK(keys == want3);
  keys.clear();
  gyre::runtime::ngram_keys({}, 4, keys);
  CHECK(keys.empty());
  CHECK_THROWS_AS(gyre::runtime::ngram_keys({"a"}, 0, keys), gyre::runtime::Error);
  CHECK_THROWS_AS(gyre::runtime::ngram_keys({"a"}, gyre::runtime::kMaxNgramOrder + 1, keys),
                  gyre::runtime::Error);
}

TEST_CASE("n-gram features: 1 + ln(count), unknown keys dropped, unit L2 norm", "[runtime][ngram]") {
  // Known keys (sorted bytewise): "a", "a\x01b", "b", "zzz" (never occurs). Two classes.
  std::vector<std::string> keys = {"a", join({"a", "b"}), "b", "zzz"};
  const std::vector<float> w = {1.0F,  -1.0F,  // a
                                0.5F,  0.25F,  // a b
                                -2.0F, 3.0F,   // b
                                9.0F,  9.0F};  // zzz
  const NgramPart part(2, keys, w, {0.1F, -0.2F}, 0.5F);
  NgramScratch scratch;
  std::vector<std::int32_t> index;
  std::vector<float> value;
  // "a b a": a twice, b once, bigram "a b" once; "b a", "<b> a", "a </e>" are unknown.
  part.features({"a", "b", "a"}, index, value, scratch);
  const double va = 1.0 + std::log(2.0);
  const double norm = std::sqrt(va * va + 1.0 + 1.0);
  REQUIRE(index == std::vector<std::int32_t>{0, 1, 2});
  CHECK(value[0] == Approx(va / norm).epsilon(1e-6));
  CHECK(value[1] == Approx(1.0 / norm).epsilon(1e-6));
  CHECK(value[2] == Approx(1.0 / norm).epsilon(1e-6));
  float logits[2] = {1.0F, 2.0F};
  part.add_scores({"a", "b", "a"}, logits, scratch);
  const double z0 = 0.1 + (va * 1.0 + 0.5 - 2.0) / norm;
  const double z1 = -0.2 + (va * -1.0 + 0.25 + 3.0) / norm;
  CHECK(logits[0] == Approx(1.0 + 0.5 * z0).epsilon(1e-6));
  CHECK(logits[1] == Approx(2.0 + 0.5 * z1).epsilon(1e-6));
  // No known key: x = 0, only the bias counts.
  float only_bias[2] = {0.0F, 0.0F};
  part.add_scores({"q"}, only_bias, scratch);
  CHECK(only_bias[0] == Approx(0.05).epsilon(1e-6));
  CHECK(only_bias[1] == Approx(-0.1).epsilon(1e-6));
  CHECK(part.find("zzz") == 3);
  CHECK(part.find("zz") == -1);
}

TEST_CASE("n-gram part: malformed contents are refused", "[runtime][ngram]") {
  using gyre::runtime::Error;
  CHECK_THROWS_AS(NgramPart(2, {"b", "a"}, {0, 0, 0, 0}, {0, 0}, 1.0F), Error);   // unsorted
  CHECK_THROWS_AS(NgramPart(2, {"a", "a"}, {0, 0, 0, 0}, {0, 0}, 1.0F), Error);   // repeated
  CHECK_THROWS_AS(NgramPart(2, {"a", "b"}, {0, 0, 0}, {0, 0}, 1.0F), Error);      // weights short
  CHECK_THROWS_AS(NgramPart(2, {"a"}, {0, 0}, {0, 0}, 0.0F), Error);              // mix 0
  CHECK_THROWS_AS(NgramPart(0, {"a"}, {0, 0}, {0, 0}, 1.0F), Error);              // order 0
  CHECK_THROWS_AS(NgramPart(2, {""}, {0, 0}, {0, 0}, 1.0F), Error);               // empty key
  CHECK_THROWS_AS(NgramPart(2, {"a"}, {std::nanf(""), 0}, {0, 0}, 1.0F), Error);  // NaN weight
  CHECK(NgramPart().empty());
}
