// The encoded-corpus arena (issue 13, "Scale"): exact content, bounds, and the same batches as
// the vector of examples it replaces in training.

#include <catch2/catch.hpp>

#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/data/encoded_corpus.hpp"

using gyre::data::EncodedCorpus;
using gyre::data::EncodedExample;

namespace {

// Seeded random examples: 1..30 tokens, classify (one label) or tag (one tag per token) targets,
// optionally 0..4 characters per token (a token without characters occurs).
std::vector<EncodedExample> make_examples(std::size_t n, std::uint64_t seed, bool tags, bool chars) {
  gyre::Rng rng(seed);
  std::vector<EncodedExample> out(n);
  for (std::size_t i = 0; i < n; ++i) {
    auto& ex = out[i];
    const auto len = 1 + rng.below(30);
    if (chars) ex.char_offsets.push_back(0);
    for (std::uint64_t t = 0; t < len; ++t) {
      ex.ids.push_back(static_cast<std::int32_t>(2 + rng.below(500)));
      if (tags) ex.targets.push_back(static_cast<std::int32_t>(rng.below(5)));
      if (chars) {
        const auto c = rng.below(5);
        for (std::uint64_t k = 0; k < c; ++k)
          ex.char_ids.push_back(static_cast<std::int32_t>(2 + rng.below(90)));
        ex.char_offsets.push_back(static_cast<std::int32_t>(ex.char_ids.size()));
      }
    }
    if (!tags) ex.targets = {static_cast<std::int32_t>(i % 4)};
    if (!tags && i % 7 == 0) ex.targets.push_back(3);  // multi-label rows too
    ex.source_line = 10 + 3 * i;
    ex.cut = i % 5 == 0;
  }
  return out;
}

void check_same(const EncodedExample& a, const EncodedExample& b) {
  CHECK(a.ids == b.ids);
  CHECK(a.targets == b.targets);
  CHECK(a.source_line == b.source_line);
  CHECK(a.cut == b.cut);
  CHECK(a.char_ids == b.char_ids);
  CHECK(a.char_offsets == b.char_offsets);
}

}  // namespace

TEST_CASE("encoded corpus: every example reads back exactly", "[data][arena]") {
  for (const bool tags : {false, true})
    for (const bool chars : {false, true}) {
      INFO("tags " << tags << ", chars " << chars << ", seed 5");
      const auto examples = make_examples(300, 5, tags, chars);
      const EncodedCorpus corpus(examples);
      REQUIRE(corpus.size() == examples.size());
      CHECK(corpus.has_characters() == chars);
      std::size_t tokens = 0;
      for (std::size_t i = 0; i < examples.size(); ++i) {
        const auto& ex = examples[i];
        tokens += ex.ids.size();
        const auto ids = corpus.ids(i);
        CHECK(std::vector<std::int32_t>(ids.begin(), ids.end()) == ex.ids);
        CHECK(corpus.length(i) == ex.ids.size());
        const auto targets = corpus.targets(i);
        CHECK(std::vector<std::int32_t>(targets.begin(), targets.end()) == ex.targets);
        CHECK(corpus.source_line(i) == ex.source_line);
        CHECK(corpus.cut(i) == ex.cut);
        const auto all_chars = corpus.example_char_ids(i);
        CHECK(std::vector<std::int32_t>(all_chars.begin(), all_chars.end()) == ex.char_ids);
        if (chars)
          for (std::size_t t = 0; t < ex.ids.size(); ++t) {
            const auto c = corpus.char_ids(i, t);
            CHECK(std::vector<std::int32_t>(c.begin(), c.end()) ==
                  std::vector<std::int32_t>(ex.char_ids.begin() + ex.char_offsets[t],
                                            ex.char_ids.begin() + ex.char_offsets[t + 1]));
          }
        check_same(corpus.example(i), ex);
      }
      CHECK(corpus.token_count() == tokens);
      // Memory: the arrays hold the tokens and a few words per example, nothing per example on
      // the heap: ids and targets 4 B each, two offsets and the line 8 B each per example (+1
      // offset each), a bit for `cut`; with characters 4 B per character and an 8 B offset per
      // token (+1). Exact after shrink_to_fit up to the cut bits' 64-bit words (the layout).
      EncodedCorpus shrunk(examples);
      shrunk.shrink_to_fit();
      std::size_t targets = 0, char_count = 0;
      for (const auto& ex : examples) {
        targets += ex.targets.size();
        char_count += ex.char_ids.size();
      }
      const std::size_t n = examples.size();
      const std::size_t expected =
          4 * tokens + 4 * targets + 8 * (2 * (n + 1) + n) + (chars ? 4 * char_count + 8 * (tokens + 1) : 0);
      CHECK(shrunk.bytes() >= expected + n / 8);
      CHECK(shrunk.bytes() <= expected + n / 8 + 8);
    }
}

TEST_CASE("encoded corpus: reserved exactly, filling it leaves no slack", "[data][arena]") {
  for (const bool tags : {false, true}) {
    INFO("tags " << tags << ", seed 8");
    const auto examples = make_examples(257, 8, tags, false);
    std::size_t tokens = 0, targets = 0;
    for (const auto& ex : examples) {
      tokens += ex.ids.size();
      targets += ex.targets.size();
    }
    EncodedCorpus corpus;
    corpus.reserve(examples.size(), tokens, targets);
    const std::size_t reserved = corpus.bytes();
    for (const auto& ex : examples) corpus.add(ex);
    // Nothing grew past the reservation, and shrink_to_fit finds no slack to drop (the layout:
    // 4 B per id and target, 8 B per offset and line, the cut bits in 64-bit words).
    CHECK(corpus.bytes() == reserved);
    const std::size_t n = examples.size();
    CHECK(corpus.bytes() >= 4 * tokens + 4 * targets + 8 * (2 * (n + 1) + n) + n / 8);
    CHECK(corpus.bytes() <= 4 * tokens + 4 * targets + 8 * (2 * (n + 1) + n) + n / 8 + 8);
    const std::size_t filled = corpus.bytes();
    corpus.shrink_to_fit();
    CHECK(corpus.bytes() == filled);
    for (std::size_t i = 0; i < n; ++i) check_same(corpus.example(i), examples[i]);
  }
}

TEST_CASE("encoded corpus: out-of-range reads and inconsistent examples are refused", "[data][arena]") {
  const auto examples = make_examples(3, 9, true, true);
  EncodedCorpus corpus(examples);
  CHECK_THROWS_AS(corpus.ids(3), gyre::Error);
  CHECK_THROWS_AS(corpus.targets(3), gyre::Error);
  CHECK_THROWS_AS(corpus.source_line(3), gyre::Error);
  CHECK_THROWS_AS(corpus.cut(3), gyre::Error);
  CHECK_THROWS_AS(corpus.example(3), gyre::Error);
  CHECK_THROWS_AS(corpus.char_ids(0, examples[0].ids.size()), gyre::Error);
  CHECK_THROWS_AS(corpus.char_ids(3, 0), gyre::Error);
  CHECK_NOTHROW(corpus.char_ids(2, examples[2].ids.size() - 1));

  EncodedExample no_tokens;
  no_tokens.targets = {0};
  CHECK_THROWS_AS(corpus.add(no_tokens), gyre::Error);
  EncodedExample no_chars;  // the corpus has characters: every example must
  no_chars.ids = {4, 5};
  no_chars.targets = {0, 1};
  CHECK_THROWS_AS(corpus.add(no_chars), gyre::Error);
  EncodedExample bad_offsets = examples[0];
  bad_offsets.char_offsets.pop_back();
  CHECK_THROWS_AS(corpus.add(bad_offsets), gyre::Error);
  bad_offsets = examples[0];
  bad_offsets.char_offsets.back() += 1;  // past the end of char_ids
  CHECK_THROWS_AS(corpus.add(bad_offsets), gyre::Error);
  CHECK(corpus.size() == 3);  // refused examples add nothing

  const EncodedCorpus plain(make_examples(2, 4, false, false));
  CHECK_THROWS_AS(plain.char_ids(0, 0), gyre::Error);
  CHECK(plain.example_char_ids(1).empty());
}

TEST_CASE("encoded corpus: the same batch plans and batches as the vector of examples", "[data][arena]") {
  for (const bool chars : {false, true}) {
    INFO("chars " << chars << ", seed 11");
    const auto examples = make_examples(500, 11, true, chars);
    const EncodedCorpus corpus(examples);
    gyre::data::BatchPlanOptions opt;
    opt.batch_size = 16;
    opt.bucket_batches = 4;
    gyre::data::BatchPlan reused;  // the trainer's form: one plan's storage for every epoch
    for (std::uint64_t epoch = 0; epoch < 3; ++epoch) {
      const auto plan = gyre::data::plan_batches(corpus, opt, 21, epoch);
      REQUIRE(plan == gyre::data::plan_batches(examples, opt, 21, epoch));
      gyre::data::plan_batches(corpus, opt, 21, epoch, reused);
      REQUIRE(reused.batches == plan);
      gyre::data::Batch a, b;
      for (const auto& indices : plan)
        for (const int max_length : {0, 7}) {
          gyre::data::fill_batch(corpus, indices, a, max_length);
          gyre::data::fill_batch(examples, indices, b, max_length);
          CHECK(a.batch == b.batch);
          CHECK(a.max_len == b.max_len);
          CHECK(a.ids == b.ids);
          CHECK(a.lengths == b.lengths);
          CHECK(a.examples == b.examples);
          CHECK(a.char_ids == b.char_ids);
          CHECK(a.char_offsets == b.char_offsets);
        }
    }
  }
}
