// The runtime with an n-gram part (docs/model-format.md "N-gram part"): probabilities equal a
// double-precision reference written from the definition (model_builder.hpp: network logits plus
// mix * (W x + b), then the softmax of the sum divided by the temperature), on every entry point
// that has the words; calls that only have ids refuse; batched results equal the one-text calls;
// occlusion leaves out the occluded token's n-grams; quantised files stay close.

#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "gyre/runtime/model.hpp"
#include "gyre/runtime/ngram_part_file.hpp"
#include "gyre_runtime.h"
#include "model_builder.hpp"

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using gyre::Span;
using gyre::runtime::Context;
using gyre::runtime::DType;
using gyre::runtime::Error;
using gyre::runtime::Model;
using gyre::runtime::NgramPart;
using gyre::test::RefModel;

namespace {

const std::vector<std::string> kWords = {"kettle", "descaling", "appointment", "tomorrow", "please",
                                         "cancel", "refund",    "noisy",       "dryer",    "thanks"};

// Texts split on spaces (the models use the whitespace tokenizer without normalization, so the
// words are the tokens). "marrowby", "warranty" and "again" are outside the vocabulary (id 1) but
// in the part's keys: only the words carry them.
const char* kTexts[] = {
    "kettle descaling please",
    "cancel the appointment tomorrow please",
    "noisy dryer again",
    "refund refund refund thanks",
    "warranty for the kettle in marrowby",
    "thanks",
    "",
    "please please cancel cancel appointment appointment tomorrow noisy noisy dryer kettle",
};
const char* kTrainingTexts[] = {
    "kettle descaling please",
    "cancel the appointment tomorrow",
    "noisy dryer again",
    "refund thanks",
    "warranty for the kettle in marrowby",
    "please cancel",
    "dryer descaling tomorrow please thanks",
};

std::vector<std::string> split(const std::string& text) {
  std::vector<std::string> out;
  std::istringstream in(text);
  for (std::string w; in >> w;) out.push_back(w);
  return out;
}

/// A part over the keys of kTrainingTexts, weights uniform in [-2, 2], biases in [-0.5, 0.5].
NgramPart make_part(int order, std::size_t classes, std::uint32_t seed, float mix) {
  std::vector<std::string> keys;
  for (const char* t : kTrainingTexts) gyre::runtime::ngram_keys(split(t), order, keys);
  std::sort(keys.begin(), keys.end());
  keys.erase(std::unique(keys.begin(), keys.end()), keys.end());
  std::mt19937 rng(seed);
  std::uniform_real_distribution<float> w(-2.0f, 2.0f), b(-0.5f, 0.5f);
  std::vector<float> weights(keys.size() * classes), bias(classes);
  for (float& v : weights) v = w(rng);
  for (float& v : bias) v = b(rng);
  return NgramPart(order, std::move(keys), std::move(weights), std::move(bias), mix);
}

RefModel make_model(const char* cell, bool bidir, const char* pooling, int order, std::uint32_t seed) {
  RefModel r;
  r.cell = cell;
  r.bidir = bidir;
  r.pooling = pooling;
  r.words = kWords;
  r.V = kWords.size() + 2;
  r.randomize(seed);
  r.ngram = make_part(order, r.C(), seed + 1, 0.9f);
  return r;
}

struct Loaded {
  std::vector<unsigned char> bytes;
  Model model;
  explicit Loaded(const RefModel& r, DType dt = DType::kF32)
      : bytes(r.file(dt)), model(Model::from_buffer(bytes.data(), bytes.size(), "ngram.gyre")) {}
};

std::vector<std::uint32_t> ids_of(const Model& m, const std::vector<std::string>& words) {
  std::vector<std::uint32_t> ids;
  for (const auto& w : words) ids.push_back(m.token_id(w));
  return ids;
}

// Tolerance 1e-5 absolute on probabilities: the parity bar of the runtime against its references
// (float kernels against a double evaluation of the same equations).
constexpr double kTol = 1e-5;

}  // namespace

TEST_CASE("n-gram part: probabilities equal the double reference on text, tokens and ids with words",
          "[runtime][ngram]") {
  struct Case {
    const char* cell;
    bool bidir;
    const char* pooling;
    int order;
    double temperature;  // 0: none in the file
  };
  const Case cases[] = {{"lstm", false, "mean", 2, 0},
                        {"gru", true, "last", 1, 0},
                        {"lstm", true, "max", 3, 1.8},
                        {"gru", false, "mean", 2, 0.7}};
  std::uint32_t seed = 500;
  for (const auto& c : cases) {
    RefModel r = make_model(c.cell, c.bidir, c.pooling, c.order, seed += 7);
    if (c.temperature > 0) r.temperature = {c.temperature};
    Loaded l(r);
    REQUIRE(l.model.architecture().has_ngram_part());
    RefModel plain = r;
    plain.ngram = NgramPart();
    Loaded lp(plain);
    Context ctx(l.model), ctx_plain(lp.model);
    double part_effect = 0;
    for (const char* text : kTexts) {
      INFO(c.cell << " order " << c.order << " T " << c.temperature << " text \"" << text << "\"");
      const auto words = split(text);
      const auto ids = ids_of(l.model, words);
      const auto want = r.classify_words(ids, words);
      auto same = [&](const gyre::runtime::ClassifyResult& got) {
        REQUIRE(got.probabilities.size() == want.size());
        for (std::size_t k = 0; k < want.size(); ++k)
          REQUIRE_THAT(got.probabilities[k], WithinAbs(want[k], kTol));
      };
      same(ctx.classify(text));
      same(ctx.classify_tokens(words));
      same(ctx.classify_ids(ids, {}, {}, words));
      // The logits the result reports are the blended ones (before the temperature).
      const auto& res = ctx.classify_tokens(words);
      const auto net = r.logits(ids);
      const auto part = r.ngram_scores(words);
      for (std::size_t k = 0; k < r.C(); ++k) REQUIRE_THAT(res.logits[k], WithinAbs(net[k] + part[k], 1e-4));
      // Raw outputs (set_calibrated(false)): the softmax of the blended logits.
      ctx.set_calibrated(false);
      const auto raw = r.classify_words(ids, words, /*calibrated=*/false);
      const auto& got_raw = ctx.classify(text);
      for (std::size_t k = 0; k < r.C(); ++k) REQUIRE_THAT(got_raw.probabilities[k], WithinAbs(raw[k], kTol));
      ctx.set_calibrated(true);
      const auto& p = ctx_plain.classify(text);
      const auto& q = ctx.classify(text);
      for (std::size_t k = 0; k < r.C(); ++k)
        part_effect = std::max(part_effect, double(std::fabs(p.probabilities[k] - q.probabilities[k])));
    }
    CHECK(part_effect > 0.05);  // the part changes the answer (weights up to 2, mix 0.9)
  }
}

TEST_CASE("n-gram part: calls that have only ids refuse, never run without the part", "[runtime][ngram]") {
  RefModel r = make_model("lstm", false, "mean", 2, 77);
  Loaded l(r);
  Context ctx(l.model);
  const std::vector<std::uint32_t> ids = {2, 3, 4};
  const std::vector<Span<const std::uint32_t>> batch = {ids};
  CHECK_THROWS_WITH(ctx.classify_ids(ids), Contains("classify_ids") && Contains("n-gram part"));
  CHECK_THROWS_WITH(ctx.classify_batch_ids(batch), Contains("n-gram part"));
  CHECK_THROWS_WITH(ctx.occlusion_ids(ids, 0), Contains("n-gram part"));
  CHECK_THROWS_WITH(ctx.push_id(2), Contains("n-gram part"));
  const std::vector<std::string> two = {"kettle", "please"};
  CHECK_THROWS_WITH(ctx.classify_ids(ids, {}, {}, two), Contains("2 words given for 3 token ids"));
  // A model without a part refuses words it would ignore.
  RefModel plain = r;
  plain.ngram = NgramPart();
  Loaded lp(plain);
  Context cp(lp.model);
  const std::vector<std::string> three = {"kettle", "please", "x"};
  CHECK_THROWS_WITH(cp.classify_ids(ids, {}, {}, three), Contains("no n-gram part"));
}

TEST_CASE("n-gram part: batched calls equal the one-text calls exactly", "[runtime][ngram][batch]") {
  for (const auto dt : {DType::kF32, DType::kI8}) {
    RefModel r = make_model("gru", true, "mean", 2, 91);
    Loaded l(r, dt);
    Context one(l.model), many(l.model);
    std::vector<std::string_view> texts(std::begin(kTexts), std::end(kTexts));
    std::vector<std::vector<std::string>> words;
    for (const char* t : kTexts) words.push_back(split(t));
    std::vector<Span<const std::string>> token_spans;
    for (const auto& w : words) token_spans.emplace_back(w.data(), w.size());
    const auto a = many.classify_batch(texts);
    std::vector<std::vector<float>> got;
    for (const auto& res : a) got.emplace_back(res.probabilities.begin(), res.probabilities.end());
    const auto b = many.classify_batch_tokens(token_spans);
    for (std::size_t i = 0; i < texts.size(); ++i) {
      INFO("text " << i << " dtype " << gyre::runtime::to_string(dt));
      const auto& want = one.classify(texts[i]);
      for (std::size_t k = 0; k < r.C(); ++k) {
        REQUIRE(got[i][k] == want.probabilities[k]);  // same arithmetic, same order: bit-identical
        REQUIRE(b[i].probabilities[k] == want.probabilities[k]);
      }
      REQUIRE(b[i].best == want.best);
    }
  }
}

TEST_CASE("n-gram part: occlusion also leaves out the token's n-grams", "[runtime][ngram]") {
  RefModel r = make_model("lstm", true, "mean", 3, 123);
  Loaded l(r);
  Context ctx(l.model);
  for (const char* text : {"cancel the appointment tomorrow please", "warranty for the kettle in marrowby"}) {
    const auto words = split(text);
    const auto ids = ids_of(l.model, words);
    for (std::uint32_t target = 0; target < r.C(); ++target) {
      const auto scores = ctx.occlusion(text, target);
      const std::vector<float> s(scores.begin(), scores.end());
      const auto with_words = ctx.occlusion_ids(ids, {}, {}, words, target);
      REQUIRE(s.size() == words.size());
      const double whole = r.classify_words(ids, words)[target];
      for (std::size_t t = 0; t < words.size(); ++t) {
        INFO(text << " target " << target << " token " << t);
        auto occluded = ids;
        occluded[t] = 0;  // the padding id, as for the network alone
        const double want = whole - r.classify_words(occluded, words, true, t)[target];
        REQUIRE_THAT(s[t], WithinAbs(want, 2 * kTol));
        REQUIRE(with_words[t] == s[t]);
      }
    }
  }
}

TEST_CASE("n-gram part: step-wise push equals classify_tokens of the prefix", "[runtime][ngram]") {
  RefModel r = make_model("gru", false, "max", 2, 321);
  Loaded l(r);
  Context step(l.model), whole(l.model);
  const auto words = split("warranty for the kettle in marrowby please");
  step.reset();
  const auto& empty = whole.classify_tokens({});
  const auto d0 = step.distribution();
  for (std::size_t k = 0; k < r.C(); ++k) REQUIRE_THAT(d0[k], WithinAbs(empty.probabilities[k], kTol));
  for (std::size_t t = 0; t < words.size(); ++t) {
    const auto d = step.push(words[t]);
    const std::vector<std::string> prefix(words.begin(), words.begin() + static_cast<long>(t) + 1);
    const auto want = r.classify_words(ids_of(l.model, prefix), prefix);
    INFO("step " << t);
    for (std::size_t k = 0; k < r.C(); ++k) REQUIRE_THAT(d[k], WithinAbs(want[k], kTol));
  }
}

TEST_CASE("n-gram part: f16 and int8 files stay close to f32", "[runtime][ngram][quantized]") {
  RefModel r = make_model("lstm", true, "mean", 2, 4711);
  r.E = 24;
  r.H = 32;
  r.randomize(4711);
  Loaded f32(r), f16(r, DType::kF16), i8(r, DType::kI8);
  Context c32(f32.model), c16(f16.model), c8(i8.model);
  // The part's scores alone: weights read back from each file, scores from NgramPart.
  const auto part_of = [](const Loaded& l) {
    const auto& f = l.model.file();
    return gyre::runtime::read_ngram_part(gyre::runtime::parse_model_header(f.header_json(), f.name()), f);
  };
  const NgramPart p32 = part_of(f32), p16 = part_of(f16), p8 = part_of(i8);
  gyre::runtime::NgramScratch scratch;
  double score16 = 0, score8 = 0, max16 = 0, max8 = 0;
  int agree16 = 0, agree8 = 0, n = 0;
  std::mt19937 rng(99);
  std::vector<std::string> pool = kWords;
  for (const char* extra : {"the", "for", "in", "marrowby", "warranty", "again"}) pool.emplace_back(extra);
  for (int rep = 0; rep < 300; ++rep, ++n) {
    std::vector<std::string> words(1 + rng() % 12);
    for (auto& w : words) w = pool[rng() % pool.size()];
    std::vector<float> s32(r.C(), 0.0f), s16(r.C(), 0.0f), s8(r.C(), 0.0f);
    p32.add_scores(words.data(), words.size(), s32.data(), scratch);
    p16.add_scores(words.data(), words.size(), s16.data(), scratch);
    p8.add_scores(words.data(), words.size(), s8.data(), scratch);
    const auto& a = c32.classify_tokens(words);
    const std::vector<float> q32(a.probabilities.begin(), a.probabilities.end());
    const auto best = a.best;
    const auto& b = c16.classify_tokens(words);
    agree16 += b.best == best;
    for (std::size_t k = 0; k < r.C(); ++k) {
      score16 = std::max(score16, double(std::fabs(s16[k] - s32[k])));
      score8 = std::max(score8, double(std::fabs(s8[k] - s32[k])));
      max16 = std::max(max16, double(std::fabs(b.probabilities[k] - q32[k])));
    }
    const auto& c = c8.classify_tokens(words);
    agree8 += c.best == best;
    for (std::size_t k = 0; k < r.C(); ++k)
      max8 = std::max(max8, double(std::fabs(c.probabilities[k] - q32[k])));
  }
  INFO("part scores: max |s16 - s32| = "
       << score16 << ", max |s8 - s32| = " << score8 << "; probabilities: max |p16 - p32| = " << max16
       << ", max |p8 - p32| = " << max8 << "; agreement " << agree16 << ", " << agree8 << " of " << n);
  // Bounds: binary16 rounds each weight (|w| <= 2) by at most 2^-11 relative, int8 by half a step of
  // max|column| / 127 (one scale per class); x has unit norm over at most ~30 keys and mix is 0.9,
  // so the score errors stay below mix * sqrt(keys) * the weight error (Cauchy-Schwarz). The
  // probability bounds are those of the quantised network test (test_inference.cpp), measured.
  CHECK(score16 <= 0.9 * std::sqrt(30.0) * 2.0 * std::ldexp(1.0, -11));
  CHECK(score8 <= 0.9 * std::sqrt(30.0) * 0.5 * 2.0 / 127.0);
  CHECK(max16 < 5e-3);
  CHECK(max8 < 5e-2);
  CHECK(agree16 >= n * 99 / 100);
  CHECK(agree8 >= n * 95 / 100);
}

TEST_CASE("n-gram part: an int8 file's part stays int8 in memory and scores as its f32 reading",
          "[runtime][ngram][quantized]") {
  RefModel r = make_model("gru", false, "mean", 3, 2024);
  Loaded f32(r), i8(r, DType::kI8), f16(r, DType::kF16);
  const auto& f = i8.model.file();
  const auto h = gyre::runtime::parse_model_header(f.header_json(), f.name());
  const NgramPart dequantised = gyre::runtime::read_ngram_part(h, f);  // f32, as the library reads it
  const NgramPart& kept = i8.model.ngram_part();                       // what the runtime computes with
  REQUIRE_FALSE(dequantised.quantized());
  REQUIRE(kept.quantized());
  const std::size_t K = kept.features(), C = static_cast<std::size_t>(kept.classes());
  CHECK(kept.weights().empty());
  CHECK(kept.qweights().size() == K * C);
  CHECK(kept.weight_bytes() == K * C + 4 * C);
  CHECK(dequantised.weight_bytes() == 4 * K * C);
  // f32 and f16 files keep f32 weights.
  CHECK_FALSE(f32.model.ngram_part().quantized());
  CHECK_FALSE(f16.model.ngram_part().quantized());
  for (std::size_t k = 0; k < K; ++k)
    for (std::size_t c = 0; c < C; ++c) REQUIRE(kept.weight(k, c) == dequantised.weights()[k * C + c]);
  // Scores and token shares equal the f32 reading bit for bit (same dequantisation, same order).
  gyre::runtime::NgramScratch scratch;
  for (const char* text : kTexts) {
    const auto words = split(text);
    std::vector<float> a(C, 0.0F), b(C, 0.0F);
    kept.add_scores(words, a.data(), scratch);
    dequantised.add_scores(words, b.data(), scratch);
    for (std::size_t c = 0; c < C; ++c) REQUIRE(a[c] == b[c]);
    std::vector<float> sa(words.size()), sb(words.size());
    const float ba = kept.token_shares(words.data(), words.size(), 1, sa.data(), scratch);
    const float bb = dequantised.token_shares(words.data(), words.size(), 1, sb.data(), scratch);
    REQUIRE(ba == bb);
    for (std::size_t t = 0; t < words.size(); ++t) REQUIRE(sa[t] == sb[t]);
  }
  // Bad int8 parts are refused.
  CHECK_THROWS_AS(
      NgramPart(1, {"a"}, std::vector<std::int8_t>{1, 2}, std::vector<float>{1.0F}, {0.0F, 0.0F}, 1.0F),
      Error);  // one scale for two classes
  CHECK_THROWS_AS(NgramPart(1, {"a"}, std::vector<std::int8_t>{1}, std::vector<float>{NAN}, {0.0F}, 1.0F),
                  Error);
  CHECK_THROWS_AS(
      NgramPart(1, {"a", "b"}, std::vector<std::int8_t>{1}, std::vector<float>{1.0F}, {0.0F}, 1.0F),
      Error);  // one weight for two keys
}

TEST_CASE("n-gram part: the C API reports it and gyre_classify applies it", "[runtime][ngram][c_api]") {
  RefModel r = make_model("lstm", false, "mean", 2, 606);
  Loaded l(r);
  gyre_model* model = nullptr;
  REQUIRE(gyre_model_load_buffer(l.bytes.data(), l.bytes.size(), &model) == GYRE_OK);
  CHECK(gyre_model_has_ngram_part(model) == 1);
  CHECK(gyre_model_has_ngram_part(nullptr) == 0);
  gyre_context* c = nullptr;
  REQUIRE(gyre_context_new(model, &c) == GYRE_OK);
  Context ctx(l.model);
  for (const char* text : kTexts) {
    const float* probs = nullptr;
    std::size_t n = 0, best = 0;
    REQUIRE(gyre_classify(c, text, std::strlen(text), &probs, &n, &best) == GYRE_OK);
    const auto& want = ctx.classify(text);
    REQUIRE(n == r.C());
    for (std::size_t k = 0; k < n; ++k) REQUIRE(probs[k] == want.probabilities[k]);
  }
  gyre_context_free(c);
  gyre_model_free(model);
  RefModel plain = r;
  plain.ngram = NgramPart();
  Loaded lp(plain);
  REQUIRE(gyre_model_load_buffer(lp.bytes.data(), lp.bytes.size(), &model) == GYRE_OK);
  CHECK(gyre_model_has_ngram_part(model) == 0);
  gyre_model_free(model);
}

TEST_CASE("n-gram part: token shares split each key's exact term over the tokens it covers",
          "[runtime][ngram]") {
  // Tokens a b a, order 2: keys a, b, a (order 1) and <s>+a, a+b, b+a, a+</s> (order 2); b+a is
  // not a key of the part. Expected shares worked out by hand from the rule (header of
  // NgramPart::token_shares): x = (1 + ln count) / norm over the known keys; key k's term
  // mix * W[c, k] * x_k goes 1/count to each occurrence and, within one, equally to its tokens.
  const std::string J(1, gyre::runtime::kNgramJoin);
  const std::string begin(gyre::runtime::kNgramBegin), end(gyre::runtime::kNgramEnd);
  const std::vector<std::string> keys = {begin + J + "a", "a", "a" + J + end, "a" + J + "b", "b"};
  REQUIRE(std::is_sorted(keys.begin(), keys.end()));
  const std::vector<double> w1 = {0.5, 2.0, -1.0, 0.25, 3.0}, w0 = {-0.2, 0.1, 0.4, 1.5, -2.0};
  std::vector<float> weights;  // feature-major: [k * C + c]
  for (std::size_t k = 0; k < keys.size(); ++k) {
    weights.push_back(static_cast<float>(w0[k]));
    weights.push_back(static_cast<float>(w1[k]));
  }
  const double mix = 1.5;
  const NgramPart part(2, keys, weights, {0.1F, -0.3F}, static_cast<float>(mix));
  const std::vector<std::string> tokens = {"a", "b", "a"};
  const double va = 1.0 + std::log(2.0), norm = std::sqrt(va * va + 4.0);
  const double x1 = 1.0 / norm, xa = va / norm;
  for (int label = 0; label < 2; ++label) {
    const auto& w = label == 0 ? w0 : w1;
    const double want[3] = {mix * (w[0] * x1 + w[1] * xa / 2 + w[3] * x1 / 2),
                            mix * (w[3] * x1 / 2 + w[4] * x1), mix * (w[1] * xa / 2 + w[2] * x1)};
    gyre::runtime::NgramScratch scratch;
    std::vector<float> shares(3, 99.0F);
    const float bias = part.token_shares(tokens.data(), tokens.size(), label, shares.data(), scratch);
    INFO("label " << label);
    CHECK_THAT(bias, WithinAbs(mix * (label == 0 ? 0.1 : -0.3), 1e-6));
    for (int t = 0; t < 3; ++t) CHECK_THAT(shares[static_cast<std::size_t>(t)], WithinAbs(want[t], 1e-6));
    // Complete: the shares and the bias add up to what the part adds to the logit.
    std::vector<float> logits(2, 0.0F);
    part.add_scores(tokens, logits.data(), scratch);
    CHECK_THAT(shares[0] + shares[1] + shares[2] + bias,
               WithinAbs(logits[static_cast<std::size_t>(label)], 1e-6));
  }
  // No tokens: no shares, the bias only; a label out of range is refused.
  gyre::runtime::NgramScratch scratch;
  float none = 0.0F;
  CHECK_THAT(part.token_shares(tokens.data(), 0, 1, &none, scratch), WithinAbs(mix * -0.3, 1e-6));
  std::vector<float> shares(3);
  CHECK_THROWS_AS(part.token_shares(tokens.data(), 3, 2, shares.data(), scratch), Error);
}

TEST_CASE("n-gram keys: tokens holding join, marker or escape bytes are escaped, never ambiguous",
          "[runtime][ngram]") {
  using gyre::runtime::ngram_key_problem;
  using gyre::runtime::ngram_keys;
  const std::string J(1, gyre::runtime::kNgramJoin);
  // Before escaping, the one token "a<join>b" had the key of the bigram a+b, and a token "\x02"
  // that of the begin marker.
  std::vector<std::string> one, two;
  ngram_keys({"a" + J + "b"}, 2, one);
  ngram_keys({"a", "b"}, 2, two);
  for (const auto& k : one) CHECK(std::find(two.begin(), two.end(), k) == two.end());
  CHECK(one.front() ==
        "a\x04"
        "Ab");  // 0x01 -> 0x04 'A'
  std::vector<std::string> marks;
  ngram_keys({"\x02", "\x03\x04"}, 2, marks);
  const std::vector<std::string> want = {
      "\x04"
      "B",
      "\x04"
      "C\x04"
      "D",
      "\x02" + J + "\x04" + "B",
      "\x04"
      "B" +
          J + "\x04" + "C\x04" + "D",
      "\x04"
      "C\x04"
      "D" +
          J + "\x03"};
  CHECK(marks == want);
  // Every key made from any bytes passes the check; tokens without bytes 0x01-0x04 keep their keys.
  for (const auto& k : marks) CHECK(ngram_key_problem(k) == nullptr);
  for (const auto& k : two) CHECK(ngram_key_problem(k) == nullptr);
  CHECK(two.front() == "a");
  CHECK(two[2] == "\x02" + J + "a");
  // Keys that could only come from an unescaped token (a file written before escaping) are refused.
  for (const std::string& bad :
       std::vector<std::string>{std::string("\x02"), "a\x02", "a\x04", "a\x04Z", "a" + J + "\x02",
                                "\x03" + J + "a", std::string("\x03")}) {
    INFO("key bytes " << bad.size());
    CHECK(ngram_key_problem(bad) != nullptr);
    CHECK_THROWS_AS(NgramPart(2, {bad}, std::vector<float>{1.0F}, {0.0F}, 1.0F), Error);
  }
  try {
    NgramPart(2, {"a\x02"}, std::vector<float>{1.0F}, {0.0F}, 1.0F);
  } catch (const Error& e) {
    CHECK_THAT(e.what(), Contains("key 0") && Contains("retrain"));
  }
  // A part with escaped keys scores a text whose token holds those bytes.
  NgramPart part(2,
                 {"a\x04"
                  "Ab"},
                 std::vector<float>{2.0F}, {0.0F}, 1.0F);
  gyre::runtime::NgramScratch scratch;
  float logit = 0.0F;
  part.add_scores(std::vector<std::string>{"a" + J + "b"}, &logit, scratch);
  CHECK_THAT(logit, WithinAbs(2.0, 1e-6));
  logit = 0.0F;
  part.add_scores(std::vector<std::string>{"a", "b"}, &logit, scratch);
  CHECK_THAT(logit, WithinAbs(0.0, 1e-6));
}
