#include "gyre/data/batcher.hpp"

#include <algorithm>
#include <numeric>
#include <utility>

#include "gyre/core/error.hpp"
#include "gyre/data/encoded_corpus.hpp"

namespace gyre::data {

std::size_t Batch::tokens() const {
  std::size_t n = 0;
  for (int len : lengths) n += static_cast<std::size_t>(len);
  return n;
}

namespace {

// The batch plan and the batch contents over any example store: `length(i)`, `ids(i)` (a span),
// `has_chars(i)` and `chars(i, t)` (a span) read example i.
template <class Length>
void plan(std::size_t count, const Length& length, const BatchPlanOptions& options, std::uint64_t seed,
          std::uint64_t epoch, BatchPlan& out) {
  GYRE_CHECK(options.batch_size > 0, "batch_size must be positive");
  GYRE_CHECK(options.bucket_batches > 0, "bucket_batches must be positive");
  std::vector<std::size_t>& order = out.order;
  order.resize(count);
  std::iota(order.begin(), order.end(), std::size_t{0});
  Rng rng(seed ^ (0xD1B54A32D192ED03ULL * (epoch + 1)));
  if (options.shuffle) rng.shuffle(std::span<std::size_t>(order));

  const auto batch_size = static_cast<std::size_t>(options.batch_size);
  const std::size_t chunk = batch_size * static_cast<std::size_t>(options.bucket_batches);
  for (std::size_t begin = 0; begin < order.size(); begin += chunk) {
    const auto first = order.begin() + static_cast<std::ptrdiff_t>(begin);
    const auto last = order.begin() + static_cast<std::ptrdiff_t>(std::min(order.size(), begin + chunk));
    // stable_sort keeps the shuffled order among equal lengths: deterministic and still random.
    std::stable_sort(first, last, [&](std::size_t a, std::size_t b) { return length(a) < length(b); });
  }
  // Every batch's vector keeps room for a full batch: the shuffle below moves the short last
  // batch's vector to any place, which a full batch may take in the next epoch.
  std::vector<std::vector<std::size_t>>& batches = out.batches;
  batches.resize((order.size() + batch_size - 1) / batch_size);
  for (std::size_t i = 0; i < batches.size(); ++i) {
    const std::size_t begin = i * batch_size, end = std::min(order.size(), begin + batch_size);
    batches[i].reserve(batch_size);
    batches[i].assign(order.begin() + static_cast<std::ptrdiff_t>(begin),
                      order.begin() + static_cast<std::ptrdiff_t>(end));
  }
  if (options.shuffle) rng.shuffle(std::span<std::vector<std::size_t>>(batches));
}

template <class Ids, class HasChars, class Chars>
void fill(const Ids& ids_of, const HasChars& has_chars, const Chars& chars_of,
          std::span<const std::size_t> indices, Batch& batch, int max_length) {
  GYRE_CHECK(!indices.empty(), "a batch needs at least one example");
  batch.batch = static_cast<int>(indices.size());
  batch.lengths.resize(indices.size());
  batch.examples.assign(indices.begin(), indices.end());
  int longest = 0;
  for (std::size_t b = 0; b < indices.size(); ++b) {
    int len = static_cast<int>(ids_of(indices[b]).size());
    GYRE_CHECK(len > 0, "an encoded example has no tokens");
    if (max_length > 0) len = std::min(len, max_length);
    batch.lengths[b] = len;
    longest = std::max(longest, len);
  }
  batch.max_len = longest;
  const auto B = indices.size();
  batch.ids.assign(static_cast<std::size_t>(longest) * B, 0);
  for (std::size_t b = 0; b < B; ++b) {
    const auto ids = ids_of(indices[b]);
    for (int t = 0; t < batch.lengths[b]; ++t)
      batch.ids[static_cast<std::size_t>(t) * B + b] = ids[static_cast<std::size_t>(t)];
  }
  batch.ngram_scores.clear();
  batch.char_ids.clear();
  batch.char_offsets.clear();
  if (!has_chars(indices[0])) return;
  batch.char_offsets.reserve(batch.ids.size() + 1);
  batch.char_offsets.push_back(0);
  for (int t = 0; t < longest; ++t)
    for (std::size_t b = 0; b < B; ++b) {
      GYRE_CHECK(has_chars(indices[b]), "an encoded example lacks its characters");
      if (t < batch.lengths[b]) {
        const auto chars = chars_of(indices[b], static_cast<std::size_t>(t));
        batch.char_ids.insert(batch.char_ids.end(), chars.begin(), chars.end());
      }
      batch.char_offsets.push_back(static_cast<std::int32_t>(batch.char_ids.size()));
    }
}

}  // namespace

std::vector<std::vector<std::size_t>> plan_batches(std::span<const EncodedExample> examples,
                                                   const BatchPlanOptions& options, std::uint64_t seed,
                                                   std::uint64_t epoch) {
  BatchPlan out;
  plan(
      examples.size(), [&](std::size_t i) { return examples[i].ids.size(); }, options, seed, epoch, out);
  return std::move(out.batches);
}

std::vector<std::vector<std::size_t>> plan_batches(const EncodedCorpus& examples,
                                                   const BatchPlanOptions& options, std::uint64_t seed,
                                                   std::uint64_t epoch) {
  BatchPlan out;
  plan_batches(examples, options, seed, epoch, out);
  return std::move(out.batches);
}

void plan_batches(const EncodedCorpus& examples, const BatchPlanOptions& options, std::uint64_t seed,
                  std::uint64_t epoch, BatchPlan& plan_out) {
  plan(
      examples.size(), [&](std::size_t i) { return examples.length(i); }, options, seed, epoch, plan_out);
}

void fill_batch(std::span<const EncodedExample> examples, std::span<const std::size_t> indices, Batch& batch,
                int max_length) {
  fill([&](std::size_t i) { return std::span<const std::int32_t>(examples[i].ids); },
       [&](std::size_t i) {
         const auto& ex = examples[i];
         if (ex.char_offsets.empty()) return false;
         GYRE_CHECK(ex.char_offsets.size() == ex.ids.size() + 1, "an encoded example lacks its characters");
         return true;
       },
       [&](std::size_t i, std::size_t t) {
         const auto& ex = examples[i];
         const auto from = static_cast<std::size_t>(ex.char_offsets[t]);
         const auto to = static_cast<std::size_t>(ex.char_offsets[t + 1]);
         return std::span<const std::int32_t>(ex.char_ids).subspan(from, to - from);
       },
       indices, batch, max_length);
  // The n-gram part's scores of the rows (data::EncodedExample::ngram_scores), when they have them.
  if (const std::size_t classes = examples[indices[0]].ngram_scores.size(); classes > 0) {
    batch.ngram_scores.reserve(indices.size() * classes);
    for (std::size_t b = 0; b < indices.size(); ++b) {
      const auto& s = examples[indices[b]].ngram_scores;
      GYRE_CHECK(s.size() == classes, "an encoded example lacks its n-gram scores");
      batch.ngram_scores.insert(batch.ngram_scores.end(), s.begin(), s.end());
    }
  }
}

void fill_batch(const EncodedCorpus& examples, std::span<const std::size_t> indices, Batch& batch,
                int max_length) {
  fill([&](std::size_t i) { return examples.ids(i); }, [&](std::size_t) { return examples.has_characters(); },
       [&](std::size_t i, std::size_t t) { return examples.char_ids(i, t); }, indices, batch, max_length);
}

std::vector<Window> make_windows(const Batch& batch, int window) {
  std::vector<Window> windows;
  windows.resize(make_windows(batch, window, windows));
  return windows;
}

std::size_t make_windows(const Batch& batch, int window, std::vector<Window>& windows) {
  const int K = window > 0 ? window : batch.max_len;
  const int count = (batch.max_len + K - 1) / K;
  if (windows.size() < static_cast<std::size_t>(count)) windows.resize(static_cast<std::size_t>(count));
  for (int w = 0; w < count; ++w) {
    Window& win = windows[static_cast<std::size_t>(w)];
    win.max_len = 0;
    win.start.resize(static_cast<std::size_t>(batch.batch));
    win.lengths.resize(static_cast<std::size_t>(batch.batch));
    win.last = (w == count - 1);
    const int from_end = count - w;  // window w covers [len - from_end*K, len - (from_end-1)*K)
    for (int b = 0; b < batch.batch; ++b) {
      const int len = batch.lengths[static_cast<std::size_t>(b)];
      const int end = std::max(0, len - (from_end - 1) * K);
      const int start = std::max(0, len - from_end * K);
      win.start[static_cast<std::size_t>(b)] = start;
      win.lengths[static_cast<std::size_t>(b)] = end - start;
      win.max_len = std::max(win.max_len, end - start);
    }
  }
  return static_cast<std::size_t>(count);
}

void window_ids(const Batch& batch, const Window& window, std::vector<std::int32_t>& ids) {
  const auto B = static_cast<std::size_t>(batch.batch);
  ids.assign(static_cast<std::size_t>(window.max_len) * B, 0);
  for (std::size_t b = 0; b < B; ++b) {
    const int start = window.start[b];
    for (int t = 0; t < window.lengths[b]; ++t)
      ids[static_cast<std::size_t>(t) * B + b] = batch.ids[static_cast<std::size_t>(start + t) * B + b];
  }
}

}  // namespace gyre::data
