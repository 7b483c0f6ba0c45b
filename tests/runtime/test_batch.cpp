// Batched calls (Context::classify_batch / tag_batch and their _tokens / _ids variants): each
// text's result must equal the one-text call on it within 1e-5 (the requirement of the batched
// runtime call, issue 13), across cells, depths, directions, poolings, outputs, weight types,
// ragged and empty texts, temperatures and character encoders. The one-text calls themselves are
// checked against the double-precision reference of model_builder.hpp and against python3-torch
// fixtures in test_inference.cpp / test_torch_parity.cpp; here they are the reference.
//
// The kernels sum every output in the same order for any number of rows, so a text's result must
// also not depend on its batch mates at all: that is checked for exact equality.

#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <random>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/runtime/model.hpp"
#include "model_builder.hpp"

using Catch::Matchers::Contains;
using gyre::Span;
using gyre::runtime::ClassifyResult;
using gyre::runtime::Context;
using gyre::runtime::DType;
using gyre::runtime::Error;
using gyre::runtime::Model;
using gyre::runtime::TagResult;
using gyre::test::RefModel;

namespace {

constexpr double kTol = 1e-5;  // the batched call's requirement (issue 13)

struct Loaded {
  std::vector<unsigned char> bytes;
  Model model;
  explicit Loaded(const RefModel& r, DType dt = DType::kF32)
      : bytes(r.file(dt)), model(Model::from_buffer(bytes.data(), bytes.size(), "batch.gyre")) {}
};

/// Ragged lengths with empty texts, a single token and the longest text in the middle.
std::vector<std::vector<std::uint32_t>> ragged_ids(std::mt19937& rng, std::size_t V) {
  std::uniform_int_distribution<std::uint32_t> u(0, static_cast<std::uint32_t>(V - 1));  // 0 = padding too
  std::vector<std::vector<std::uint32_t>> texts;
  for (std::size_t n : {3u, 0u, 1u, 13u, 7u, 7u, 0u, 2u, 11u, 5u}) {
    std::vector<std::uint32_t> ids(n);
    for (auto& i : ids) i = u(rng);
    texts.push_back(ids);
  }
  return texts;
}

template <class T>
std::vector<Span<const T>> spans_of(const std::vector<std::vector<T>>& v) {
  std::vector<Span<const T>> out;
  for (const auto& x : v) out.emplace_back(x.data(), x.size());
  return out;
}

template <class A, class B>
void require_close(const A& got, const B& want, double tol, const char* what) {
  REQUIRE(got.size() == want.size());
  for (std::size_t i = 0; i < got.size(); ++i) {
    INFO(what << "[" << i << "]: batched " << got[i] << ", one by one " << want[i]);
    REQUIRE(std::fabs(static_cast<double>(got[i]) - static_cast<double>(want[i])) <= tol);
  }
}

/// Copies of the parts of a ClassifyResult (they point into the Context).
struct Classified {
  std::vector<float> probabilities, logits, features;
  std::vector<std::uint32_t> chosen;
  std::uint32_t best = 0;
  std::size_t tokens = 0;
  explicit Classified(const ClassifyResult& r)
      : probabilities(r.probabilities.begin(), r.probabilities.end()),
        logits(r.logits.begin(), r.logits.end()),
        features(r.features.begin(), r.features.end()),
        chosen(r.chosen.begin(), r.chosen.end()),
        best(r.best),
        tokens(r.token_count) {}
  bool operator==(const Classified& o) const {
    return probabilities == o.probabilities && logits == o.logits && features == o.features &&
           chosen == o.chosen && best == o.best && tokens == o.tokens;
  }
};

void require_same(const Classified& got, const Classified& want) {
  require_close(got.probabilities, want.probabilities, kTol, "probabilities");
  require_close(got.logits, want.logits, kTol, "logits");
  require_close(got.features, want.features, kTol, "features");
  REQUIRE(got.best == want.best);
  REQUIRE(got.chosen == want.chosen);
  REQUIRE(got.tokens == want.tokens);
}

struct SpanCopy {
  std::uint32_t begin, end;
  std::string type;
  std::size_t byte_begin, byte_end;
  bool operator==(const SpanCopy& o) const {
    return begin == o.begin && end == o.end && type == o.type && byte_begin == o.byte_begin &&
           byte_end == o.byte_end;
  }
};

struct Tagged {
  std::vector<std::string> tokens;
  std::vector<std::size_t> token_bytes;  // begin, end per token
  std::vector<std::uint32_t> tags;
  std::vector<float> probabilities;
  std::vector<SpanCopy> spans;
  explicit Tagged(const TagResult& r)
      : tokens(r.tokens.begin(), r.tokens.end()),
        tags(r.tags.begin(), r.tags.end()),
        probabilities(r.probabilities.begin(), r.probabilities.end()) {
    for (const auto& b : r.token_bytes) {
      token_bytes.push_back(b.begin);
      token_bytes.push_back(b.end);
    }
    for (const auto& s : r.spans)
      spans.push_back({s.begin, s.end, std::string(s.type), s.byte_begin, s.byte_end});
  }
  bool operator==(const Tagged& o) const {
    return tokens == o.tokens && token_bytes == o.token_bytes && tags == o.tags &&
           probabilities == o.probabilities && spans == o.spans;
  }
};

void require_same(const Tagged& got, const Tagged& want) {
  REQUIRE(got.tokens == want.tokens);
  REQUIRE(got.token_bytes == want.token_bytes);
  REQUIRE(got.tags == want.tags);
  require_close(got.probabilities, want.probabilities, kTol, "tag probabilities");
  REQUIRE(got.spans == want.spans);
}

}  // namespace

TEST_CASE("classify_batch_ids equals classify_ids text by text", "[runtime][batch]") {
  std::mt19937 rng(20261202);
  int models = 0;
  for (const char* cell : {"lstm", "gru"})
    for (bool bidir : {false, true})
      for (std::size_t layers : {1u, 2u})
        for (const char* pooling : {"last", "mean", "max"})
          for (const char* output : {"softmax", "sigmoid"})
            for (DType dt : {DType::kF32, DType::kF16, DType::kI8}) {
              RefModel r;
              r.cell = cell;
              r.bidir = bidir;
              r.L = layers;
              r.pooling = pooling;
              r.output = output;
              // Gate rows G*H = 80 (LSTM) / 60 (GRU): a full block of four 16-row panels plus
              // a partial tail in the kernels, so every kernel path is crossed.
              r.E = 7;
              r.H = 20;
              r.V = 30;
              r.labels = {"alpha", "beta", "gamma", "delta"};
              const std::uint32_t seed = static_cast<std::uint32_t>(rng());
              // Calibrated models too: one temperature (softmax) or one per label (sigmoid).
              if (models % 2 == 1)
                r.temperature = std::string(output) == "softmax" ? std::vector<double>{1.7}
                                                                 : std::vector<double>{0.8, 1.3, 2.1, 0.6};
              r.randomize(seed);
              const Loaded l(r, dt);
              INFO(cell << (bidir ? " bi" : " uni") << " layers " << layers << " " << pooling << " " << output
                        << " " << gyre::runtime::to_string(dt) << " seed " << seed);
              const auto texts = ragged_ids(rng, r.V);
              Context one(l.model), many(l.model);
              for (bool calibrated : {true, false}) {
                one.set_calibrated(calibrated);
                many.set_calibrated(calibrated);
                const auto results = many.classify_batch_ids(spans_of(texts));
                REQUIRE(results.size() == texts.size());
                std::vector<Classified> batched;
                for (const auto& res : results) batched.emplace_back(res);
                for (std::size_t i = 0; i < texts.size(); ++i) {
                  INFO("text " << i << " of " << texts[i].size() << " tokens, calibrated " << calibrated);
                  require_same(batched[i], Classified(one.classify_ids(texts[i])));
                }
                // A batch of one, and the same texts in another order with other mates: every
                // result is identical to the first batch's, bit for bit.
                const auto single =
                    many.classify_batch_ids(spans_of(std::vector<std::vector<std::uint32_t>>{texts[3]}));
                REQUIRE(single.size() == 1);
                REQUIRE(Classified(single[0]) == batched[3]);
                std::vector<std::vector<std::uint32_t>> shuffled(texts.rbegin(), texts.rend() - 2);
                const auto again = many.classify_batch_ids(spans_of(shuffled));
                for (std::size_t i = 0; i < shuffled.size(); ++i)
                  REQUIRE(Classified(again[i]) == batched[texts.size() - 1 - i]);
              }
              ++models;
            }
  REQUIRE(models == 144);
}

TEST_CASE("tag_batch_ids equals tag_ids text by text", "[runtime][batch]") {
  std::mt19937 rng(7051);
  for (const char* cell : {"lstm", "gru"})
    for (bool bidir : {false, true})
      for (std::size_t layers : {1u, 2u})
        for (const char* output : {"softmax", "crf"})
          for (const char* scheme : {"bio", "none"})
            for (DType dt : {DType::kF32, DType::kF16, DType::kI8}) {
              RefModel r;
              r.task = "tag";
              r.cell = cell;
              r.bidir = bidir;
              r.L = layers;
              r.output = output;
              r.scheme = scheme;
              r.labels = std::string(scheme) == "bio"
                             ? std::vector<std::string>{"O", "B-date", "I-date", "B-time", "I-time"}
                             : std::vector<std::string>{"O", "date", "time"};
              r.E = 6;
              r.H = 20;
              r.V = 25;
              if (bidir) r.temperature = {1.4};
              const std::uint32_t seed = static_cast<std::uint32_t>(rng());
              r.randomize(seed);
              const Loaded l(r, dt);
              INFO(cell << (bidir ? " bi" : " uni") << " layers " << layers << " " << output << " " << scheme
                        << " " << gyre::runtime::to_string(dt) << " seed " << seed);
              const auto texts = ragged_ids(rng, r.V);
              Context one(l.model), many(l.model);
              const auto results = many.tag_batch_ids(spans_of(texts));
              REQUIRE(results.size() == texts.size());
              std::vector<Tagged> batched;
              for (const auto& res : results) batched.emplace_back(res);
              std::size_t spans = 0;
              for (std::size_t i = 0; i < texts.size(); ++i) {
                INFO("text " << i << " of " << texts[i].size() << " tokens");
                require_same(batched[i], Tagged(one.tag_ids(texts[i])));
                spans += batched[i].spans.size();
              }
              if (std::string(scheme) == "bio") CHECK(spans > 0);  // random weights still give spans
              const auto single =
                  many.tag_batch_ids(spans_of(std::vector<std::vector<std::uint32_t>>{texts[8]}));
              REQUIRE(single.size() == 1);
              REQUIRE(Tagged(single[0]) == batched[8]);
            }
}

TEST_CASE("classify_batch and tag_batch on text equal classify and tag", "[runtime][batch]") {
  const std::vector<std::string_view> texts = {
      "w2 w3 w9 w4", "", "w5", "unknown w7 w7 w7 w2 w11 w3 w3 w8", "  w6   w10  ", "w2 w2"};
  std::vector<std::vector<std::string>> token_lists;
  for (const std::string_view t : texts) {
    std::vector<std::string> toks;
    std::size_t i = 0;
    while (i < t.size()) {
      const std::size_t j = t.find(' ', i);
      const std::size_t e = j == std::string_view::npos ? t.size() : j;
      if (e > i) toks.emplace_back(t.substr(i, e - i));
      i = e + 1;
    }
    token_lists.push_back(toks);
  }
  SECTION("classifier") {
    RefModel r;
    r.L = 2;
    r.bidir = true;
    r.pooling = "mean";
    r.H = 9;
    r.temperature = {2.5};
    r.randomize(11);
    const Loaded l(r);
    Context one(l.model), many(l.model);
    const auto results = many.classify_batch(texts);
    REQUIRE(results.size() == texts.size());
    std::vector<Classified> batched(results.begin(), results.end());
    for (std::size_t i = 0; i < texts.size(); ++i) {
      INFO("text " << i);
      require_same(batched[i], Classified(one.classify(texts[i])));
      REQUIRE(batched[i].tokens == token_lists[i].size());
    }
    const auto by_tokens = many.classify_batch_tokens(spans_of(token_lists));
    for (std::size_t i = 0; i < texts.size(); ++i) REQUIRE(Classified(by_tokens[i]) == batched[i]);
  }
  SECTION("tagger") {
    RefModel r;
    r.task = "tag";
    r.output = "crf";
    r.labels = {"O", "B-date", "I-date"};
    r.bidir = true;
    r.H = 9;
    r.randomize(12);
    const Loaded l(r);
    Context one(l.model), many(l.model);
    const auto results = many.tag_batch(texts);
    REQUIRE(results.size() == texts.size());
    std::vector<Tagged> batched(results.begin(), results.end());
    for (std::size_t i = 0; i < texts.size(); ++i) {
      INFO("text " << i);
      require_same(batched[i], Tagged(one.tag(texts[i])));
      REQUIRE(batched[i].tokens == token_lists[i]);
      for (std::size_t t = 0; t < batched[i].tokens.size(); ++t)  // bytes cut the token from the text
        REQUIRE(texts[i].substr(batched[i].token_bytes[2 * t],
                                batched[i].token_bytes[2 * t + 1] - batched[i].token_bytes[2 * t]) ==
                batched[i].tokens[t]);
    }
    const auto by_tokens = many.tag_batch_tokens(spans_of(token_lists));
    for (std::size_t i = 0; i < texts.size(); ++i) {
      INFO("text " << i);
      require_same(Tagged(by_tokens[i]), Tagged(one.tag_tokens(token_lists[i])));
    }
  }
}

#ifdef GYRE_RUNTIME_HAS_ICU
TEST_CASE("batched calls on text keep byte offsets through NFKC and case folding", "[runtime][batch]") {
  RefModel r;
  r.task = "tag";
  r.tokenizer_mode = "words";
  r.normalize = true;
  r.labels = {"O", "B-date", "I-date"};
  r.words = {"on", "14", "/", "03", "ok", "file"};
  r.V = r.words.size() + 2;
  r.H = 6;
  r.randomize(5);
  const Loaded l(r);
  Context one(l.model), many(l.model);
  // Full-width digits and a ligature change length under NFKC; "ÉTÉ" under case folding.
  const std::vector<std::string_view> texts = {"on １４/03 ok", "ÉTÉ ﬁle １４", "", "OK on 14 / 03 ok ok"};
  const auto results = many.tag_batch(texts);
  for (std::size_t i = 0; i < texts.size(); ++i) {
    INFO("text " << i);
    require_same(Tagged(results[i]), Tagged(one.tag(texts[i])));
  }
}

TEST_CASE("batched calls of a character-encoder model equal the one-text calls", "[runtime][batch]") {
  for (const char* task : {"classify", "tag"})
    for (DType dt : {DType::kF32, DType::kI8}) {
      RefModel r;
      r.task = task;
      r.tokenizer_mode = "words";
      r.normalize = true;
      r.words = {"on", "14", "monday", "ok", "the", "kettle"};
      r.V = r.words.size() + 2;
      r.E = 5;
      r.H = 18;
      r.char_E = 4;
      r.char_F = 6;
      r.char_w = 3;
      r.characters = {"<pad>", "<unk>"};
      for (char c = 'a'; c <= 'z'; ++c) r.characters.emplace_back(1, c);
      for (char c = 'A'; c <= 'Z'; ++c) r.characters.emplace_back(1, c);
      for (char c = '0'; c <= '9'; ++c) r.characters.emplace_back(1, c);
      if (std::string(task) == "tag") {
        r.labels = {"O", "B-date", "I-date"};
        r.output = "crf";
        r.bidir = true;
      }
      r.randomize(77);
      const Loaded l(r, dt);
      REQUIRE(l.model.architecture().has_char_encoder());
      INFO(task << " " << gyre::runtime::to_string(dt));
      const std::vector<std::string_view> texts = {"On Monday 14", "", "the Kettle is OK", "x",
                                                   "Ünïcode ok ok 99"};
      const std::vector<std::vector<std::string>> tokens = {
          {"On", "Monday"}, {}, {"KETTLE", "ok", "ok", "q"}};
      Context one(l.model), many(l.model);
      if (std::string(task) == "classify") {
        const auto res = many.classify_batch(texts);
        std::vector<Classified> batched(res.begin(), res.end());
        for (std::size_t i = 0; i < texts.size(); ++i)
          require_same(batched[i], Classified(one.classify(texts[i])));
        const auto by_tokens = many.classify_batch_tokens(spans_of(tokens));
        std::vector<Classified> batched_tokens(by_tokens.begin(), by_tokens.end());
        for (std::size_t i = 0; i < tokens.size(); ++i)
          require_same(batched_tokens[i], Classified(one.classify_tokens(tokens[i])));
      } else {
        const auto res = many.tag_batch(texts);
        std::vector<Tagged> batched(res.begin(), res.end());
        for (std::size_t i = 0; i < texts.size(); ++i) require_same(batched[i], Tagged(one.tag(texts[i])));
        const auto by_tokens = many.tag_batch_tokens(spans_of(tokens));
        std::vector<Tagged> batched_tokens(by_tokens.begin(), by_tokens.end());
        for (std::size_t i = 0; i < tokens.size(); ++i)
          require_same(batched_tokens[i], Tagged(one.tag_tokens(tokens[i])));
      }
      // Ids with their characters: text i's character ids and offsets, as the one-text call takes them.
      const std::vector<std::vector<std::uint32_t>> ids = {{2, 3}, {}, {7, 1, 4}};
      const std::vector<std::vector<std::int32_t>> chars = {{2, 3, 40, 5}, {}, {10, 11, 12, 1, 1}};
      const std::vector<std::vector<std::int32_t>> offsets = {{0, 2, 4}, {0}, {0, 3, 3, 5}};
      if (std::string(task) == "classify") {
        const auto res = many.classify_batch_ids(spans_of(ids), spans_of(chars), spans_of(offsets));
        std::vector<Classified> batched(res.begin(), res.end());
        for (std::size_t i = 0; i < ids.size(); ++i)
          require_same(batched[i], Classified(one.classify_ids(ids[i], chars[i], offsets[i])));
        REQUIRE_THROWS_WITH(many.classify_batch_ids(spans_of(ids)), Contains("character encoder"));
      } else {
        const auto res = many.tag_batch_ids(spans_of(ids), spans_of(chars), spans_of(offsets));
        std::vector<Tagged> batched(res.begin(), res.end());
        for (std::size_t i = 0; i < ids.size(); ++i)
          require_same(batched[i], Tagged(one.tag_ids(ids[i], chars[i], offsets[i])));
        REQUIRE_THROWS_WITH(many.tag_batch_ids(spans_of(ids)), Contains("character encoder"));
      }
      // Character ids out of range, or offsets of the wrong length, name the text.
      const std::vector<std::vector<std::int32_t>> bad_offsets = {{0, 2, 4}, {0}, {0, 3, 5}};
      if (std::string(task) == "classify")
        REQUIRE_THROWS_WITH(many.classify_batch_ids(spans_of(ids), spans_of(chars), spans_of(bad_offsets)),
                            Contains("text 2: character offsets"));
      else
        REQUIRE_THROWS_WITH(many.tag_batch_ids(spans_of(ids), spans_of(chars), spans_of(bad_offsets)),
                            Contains("text 2: character offsets"));
    }
}
#endif  // GYRE_RUNTIME_HAS_ICU

TEST_CASE("batched calls refuse bad input and name the text", "[runtime][batch]") {
  RefModel r;
  r.randomize(3);
  const Loaded l(r);
  Context ctx(l.model);
  const std::vector<std::vector<std::uint32_t>> texts = {{2, 3}, {4, 99}};
  REQUIRE_THROWS_WITH(ctx.classify_batch_ids(spans_of(texts)), Contains("text 1: token id 99"));
  REQUIRE_THROWS_WITH(ctx.tag_batch_ids(spans_of(texts)), Contains("this model is a classifier"));
  const std::vector<std::string_view> bad_utf8 = {"w2", "w3 \xC3"};
  REQUIRE_THROWS_WITH(ctx.classify_batch(bad_utf8), Contains("text 1:") && Contains("UTF-8"));
  const std::vector<std::vector<std::int32_t>> chars = {{}, {}}, offsets = {{0, 0, 0}, {0, 0, 0}};
  REQUIRE_THROWS_WITH(
      ctx.classify_batch_ids(spans_of(std::vector<std::vector<std::uint32_t>>{{2, 3}, {4, 5}}),
                             spans_of(chars), spans_of(offsets)),
      Contains("no character encoder"));
  // An empty batch is no error: no results.
  REQUIRE(ctx.classify_batch_ids({}).empty());
  REQUIRE(ctx.classify_batch(Span<const std::string_view>()).empty());
  // The Context still works after a refused call.
  const auto ok = ctx.classify_batch_ids(spans_of(std::vector<std::vector<std::uint32_t>>{{2, 3}}));
  REQUIRE(ok.size() == 1);
  REQUIRE(Classified(ok[0]).probabilities ==
          Classified(ctx.classify_ids(std::vector<std::uint32_t>{2, 3})).probabilities);
}
