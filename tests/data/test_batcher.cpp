#include <catch2/catch.hpp>

#include <algorithm>
#include <set>

#include "gyre/data/batcher.hpp"

using gyre::data::EncodedExample;

namespace {
std::vector<EncodedExample> make_examples(std::size_t n, std::uint64_t seed) {
  gyre::Rng rng(seed);
  std::vector<EncodedExample> out(n);
  for (std::size_t i = 0; i < n; ++i) {
    const auto len = 1 + rng.below(40);
    for (std::uint64_t t = 0; t < len; ++t)
      out[i].ids.push_back(static_cast<std::int32_t>(2 + rng.below(50)));
    out[i].targets = {static_cast<std::int32_t>(i % 3)};
  }
  return out;
}
}  // namespace

TEST_CASE("plan_batches covers every example once, deterministically", "[data]") {
  const auto examples = make_examples(1000, 3);
  gyre::data::BatchPlanOptions opt;
  opt.batch_size = 32;
  const auto a = gyre::data::plan_batches(examples, opt, 7, 0);
  const auto b = gyre::data::plan_batches(examples, opt, 7, 0);
  const auto c = gyre::data::plan_batches(examples, opt, 7, 1);
  REQUIRE(a == b);
  REQUIRE(a != c);
  std::multiset<std::size_t> seen;
  for (const auto& batch : a) {
    REQUIRE(batch.size() <= 32);
    seen.insert(batch.begin(), batch.end());
  }
  REQUIRE(seen.size() == 1000);
  REQUIRE(std::set<std::size_t>(seen.begin(), seen.end()).size() == 1000);
}

TEST_CASE("bucketing reduces padding", "[data]") {
  const auto examples = make_examples(2000, 5);
  auto padding_fraction = [&](int bucket_batches) {
    gyre::data::BatchPlanOptions opt;
    opt.bucket_batches = bucket_batches;
    gyre::data::Batch batch;
    std::size_t tokens = 0, padded = 0;
    for (const auto& idx : gyre::data::plan_batches(examples, opt, 1, 0)) {
      gyre::data::fill_batch(examples, idx, batch);
      tokens += batch.tokens();
      padded += batch.padded();
    }
    return 1.0 - static_cast<double>(tokens) / static_cast<double>(padded);
  };
  const double unbucketed = padding_fraction(1);
  const double bucketed = padding_fraction(32);
  // Uniform lengths 1..40 in random batches of 32 waste about half the grid; sorted chunks
  // of 32 batches waste only a few percent.
  REQUIRE(unbucketed > 0.35);
  REQUIRE(bucketed < 0.1);
}

TEST_CASE("fill_batch lays out time-major with zero padding", "[data]") {
  std::vector<EncodedExample> ex(2);
  ex[0].ids = {5, 6, 7};
  ex[1].ids = {8};
  const std::vector<std::size_t> idx{0, 1};
  gyre::data::Batch batch;
  gyre::data::fill_batch(ex, idx, batch);
  REQUIRE(batch.max_len == 3);
  REQUIRE(batch.ids == std::vector<std::int32_t>{5, 8, 6, 0, 7, 0});
  REQUIRE(batch.tokens() == 4);
  gyre::data::fill_batch(ex, idx, batch, 2);
  REQUIRE(batch.ids == std::vector<std::int32_t>{5, 8, 6, 0});
}

TEST_CASE("windows are aligned at each sequence's end", "[data]") {
  std::vector<EncodedExample> ex(3);
  for (int t = 0; t < 10; ++t) ex[0].ids.push_back(10 + t);
  for (int t = 0; t < 4; ++t) ex[1].ids.push_back(30 + t);
  ex[2].ids = {50, 51, 52, 53, 54, 55, 56};
  const std::vector<std::size_t> idx{0, 1, 2};
  gyre::data::Batch batch;
  gyre::data::fill_batch(ex, idx, batch);
  const auto windows = gyre::data::make_windows(batch, 4);
  REQUIRE(windows.size() == 3);
  // sequence 0 (len 10): [0,2) [2,6) [6,10); sequence 1 (len 4): -, -, [0,4); sequence 2 (len 7): -, [0,3),
  // [3,7)
  REQUIRE(windows[0].lengths == std::vector<int>{2, 0, 0});
  REQUIRE(windows[1].lengths == std::vector<int>{4, 0, 3});
  REQUIRE(windows[2].lengths == std::vector<int>{4, 4, 4});
  REQUIRE(windows[2].start == std::vector<int>{6, 0, 3});
  REQUIRE(windows[2].last);
  REQUIRE_FALSE(windows[0].last);
  std::vector<std::int32_t> ids;
  gyre::data::window_ids(batch, windows[1], ids);
  REQUIRE(ids == std::vector<std::int32_t>{12, 0, 50, 13, 0, 51, 14, 0, 52, 15, 0, 0});
  // Every token lands in exactly one window.
  for (int b = 0; b < 3; ++b) {
    int total = 0;
    for (const auto& w : windows) total += w.lengths[static_cast<std::size_t>(b)];
    REQUIRE(total == batch.lengths[static_cast<std::size_t>(b)]);
  }
  REQUIRE(gyre::data::make_windows(batch, 0).size() == 1);
  REQUIRE(gyre::data::make_windows(batch, 10).size() == 1);
  // The reusing form: a batch with fewer windows leaves the vector's later entries in place and
  // returns its own count; its windows are those the fresh form makes.
  std::vector<gyre::data::Window> reused;
  REQUIRE(gyre::data::make_windows(batch, 4, reused) == 3);
  REQUIRE(gyre::data::make_windows(batch, 10, reused) == 1);
  REQUIRE(reused.size() == 3);
  const auto one = gyre::data::make_windows(batch, 10);
  REQUIRE(reused[0].lengths == one[0].lengths);
  REQUIRE(reused[0].start == one[0].start);
  REQUIRE(reused[0].max_len == one[0].max_len);
  REQUIRE(reused[0].last);
  REQUIRE(gyre::data::make_windows(batch, 4, reused) == 3);
  REQUIRE(reused[1].lengths == windows[1].lengths);
  REQUIRE(reused[2].start == windows[2].start);
}
