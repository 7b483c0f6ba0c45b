// "Zero allocation per step" (issue 13; DESIGN.md Numerics, STYLE.md Performance) for batches whose
// shape changes from step to step, as length-bucketed training produces: once every batch shape
// of the run has been seen (here: one warm-up pass over the batches), a training step - the batch
// filled from the corpus, SequenceModel::train_batch (embedding, recurrent stack, head, loss and
// their backward passes), the sparse rows made sorted and unique, and their lists cleared as the
// trainer does after the update - must not call malloc at all; with a character encoder (the
// batch's characters, the CNN's workspaces) and with truncated BPTT (windows, carried states)
// too. Counted by interposing malloc in
// this executable (glibc exports the real allocator as __libc_malloc); skipped under
// AddressSanitizer, which owns malloc itself.

#include <catch2/catch.hpp>
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/data/batcher.hpp"
#include "gyre/model/sequence_model.hpp"

#include "support/malloc_counter.hpp"  // defines malloc: this file only, in this executable

using gyre::data::EncodedExample;
using gyre::model::ModelSpec;
using gyre::model::OutputKind;
using gyre::model::SequenceModel;

namespace {

// Random ids in [2, vocab) and targets (one class, a label set, or one tag per token); with a
// character encoder, 1 to 6 character ids in [2, char vocab) per token.
std::vector<EncodedExample> examples_of(const ModelSpec& spec, const std::vector<int>& lengths,
                                        gyre::Rng& rng) {
  std::vector<EncodedExample> out;
  const auto C = static_cast<std::uint64_t>(spec.num_labels());
  for (const int len : lengths) {
    EncodedExample ex;
    for (int t = 0; t < len; ++t)
      ex.ids.push_back(2 +
                       static_cast<std::int32_t>(rng.below(static_cast<std::uint64_t>(spec.vocab_size - 2))));
    if (spec.has_char_encoder()) {
      ex.char_offsets.push_back(0);
      for (int t = 0; t < len; ++t) {
        const auto n = 1 + rng.below(6);
        for (std::uint64_t k = 0; k < n; ++k)
          ex.char_ids.push_back(
              2 + static_cast<std::int32_t>(rng.below(static_cast<std::uint64_t>(spec.char_vocab_size - 2))));
        ex.char_offsets.push_back(static_cast<std::int32_t>(ex.char_ids.size()));
      }
    }
    if (spec.task == gyre::data::Task::kTag) {
      for (int t = 0; t < len; ++t) ex.targets.push_back(static_cast<std::int32_t>(rng.below(C)));
    } else if (spec.output == OutputKind::kSigmoid) {
      ex.targets.push_back(static_cast<std::int32_t>(rng.below(C)));
      if (rng.below(2) == 1)
        ex.targets.push_back(static_cast<std::int32_t>((ex.targets[0] + 1) % spec.num_labels()));
    } else {
      ex.targets.push_back(static_cast<std::int32_t>(rng.below(C)));
    }
    out.push_back(std::move(ex));
  }
  return out;
}

struct StepCounts {
  std::size_t mallocs = 0;  // in the counted pass
  std::size_t steps = 0;
};

// Batches of several sizes and padded lengths (neither the largest first nor in any sorted
// order); a warm-up pass over all of them, then a counted pass in another order.
StepCounts run_steps(const ModelSpec& spec, int bptt_window) {
  gyre::Rng rng(11);
  // Example i has length lengths[i]; the batches below pick from them.
  const std::vector<int> lengths = {3, 17, 9, 1, 25, 6, 12, 4, 30, 8, 2, 14, 21, 5, 11, 7, 19, 10, 16, 13};
  const auto examples = examples_of(spec, lengths, rng);
  const std::vector<std::vector<std::size_t>> batches = {
      {0, 3, 10},                          // B 3, T 3
      {1, 2, 5, 7, 9, 13},                 // B 6, T 17
      {8, 4, 12, 18, 19, 16, 11, 6, 15},   // B 9, T 30
      {17},                                // B 1, T 10
      {14, 6, 11, 9},                      // B 4, T 12
      {4, 12},                             // B 2, T 25
      {0, 1, 2, 3, 5, 7, 10, 13, 15, 19},  // B 10, T 17
  };
  SequenceModel model(spec);
  gyre::Rng init(5);
  model.init_parameters(init);
  gyre::data::Batch batch;
  gyre::Rng dropout(99);
  auto step = [&](const std::vector<std::size_t>& indices) {
    gyre::data::fill_batch(examples, indices, batch);
    model.train_batch(batch, examples, bptt_window, model.loss_units(batch), dropout);
    for (gyre::nn::Parameter& p : model.params())
      if (p.sparse_rows) p.finalize_touched_rows();
    model.params().zero_grad();
    for (gyre::nn::Parameter& p : model.params())
      p.touched_rows.clear();  // capacity kept, as the trainer does
  };
  for (const auto& b : batches) step(b);  // warm-up: every shape once
  StepCounts counts;
#if GYRE_COUNT_MALLOC
  g_mallocs = 0;
  g_counting = true;
#endif
  for (const std::size_t k : {3u, 6u, 0u, 2u, 5u, 1u, 4u, 2u, 3u}) {
    step(batches[k]);
    ++counts.steps;
  }
#if GYRE_COUNT_MALLOC
  g_counting = false;
  counts.mallocs = g_mallocs;
#endif
  return counts;
}

ModelSpec base_spec() {
  ModelSpec spec;
  spec.vocab_size = 60;
  spec.embedding_size = 24;
  spec.hidden_size = 32;
  spec.labels = {"a", "b", "c", "d"};
  return spec;
}

ModelSpec with_char_encoder(ModelSpec spec) {
  spec.char_vocab_size = 20;
  spec.char_embedding_size = 8;
  spec.char_filters = 12;
  spec.char_width = 3;
  return spec;
}

}  // namespace

TEST_CASE("a training step allocates nothing once every batch shape has been seen", "[model][alloc]") {
#if !GYRE_COUNT_MALLOC
  WARN("malloc counting unavailable (sanitizer build)");
#endif
  SECTION("LSTM classifier, 2 bidirectional layers, mean pooling, dropout") {
    ModelSpec spec = base_spec();
    spec.layers = 2;
    spec.bidirectional = true;
    const StepCounts c = run_steps(spec, 0);
    CHECK(c.steps == 9);
    CHECK(c.mallocs == 0);
  }
  SECTION("GRU classifier, last-state pooling, sigmoid outputs") {
    ModelSpec spec = base_spec();
    spec.cell = gyre::nn::CellType::kGru;
    spec.pooling = gyre::nn::PoolingKind::kLast;
    spec.output = OutputKind::kSigmoid;
    CHECK(run_steps(spec, 0).mallocs == 0);
  }
  SECTION("LSTM classifier, max pooling, no dropout") {
    ModelSpec spec = base_spec();
    spec.pooling = gyre::nn::PoolingKind::kMax;
    spec.dropout = 0.0f;
    spec.embedding_dropout = 0.0f;
    CHECK(run_steps(spec, 0).mallocs == 0);
  }
  SECTION("LSTM tagger, softmax per token") {
    ModelSpec spec = base_spec();
    spec.task = gyre::data::Task::kTag;
    CHECK(run_steps(spec, 0).mallocs == 0);
  }
  SECTION("GRU tagger, CRF output") {
    ModelSpec spec = base_spec();
    spec.task = gyre::data::Task::kTag;
    spec.cell = gyre::nn::CellType::kGru;
    spec.output = OutputKind::kCrf;
    CHECK(run_steps(spec, 0).mallocs == 0);
  }
  SECTION("LSTM tagger with a character encoder, CRF output, 2 bidirectional layers") {
    ModelSpec spec = with_char_encoder(base_spec());
    spec.task = gyre::data::Task::kTag;
    spec.output = OutputKind::kCrf;
    spec.layers = 2;
    spec.bidirectional = true;
    CHECK(run_steps(spec, 0).mallocs == 0);
  }
  SECTION("GRU classifier with a character encoder, max pooling") {
    ModelSpec spec = with_char_encoder(base_spec());
    spec.cell = gyre::nn::CellType::kGru;
    spec.pooling = gyre::nn::PoolingKind::kMax;
    CHECK(run_steps(spec, 0).mallocs == 0);
  }
  // Truncated BPTT: windows of 4 and 7 steps (several windows per batch; the earlier windows hold
  // fewer sequences, so the carried states change shape inside a step too). One direction, as the
  // trainer's settings require, and last-state pooling for a classifier.
  SECTION("truncated BPTT, LSTM classifier, 2 layers, last-state pooling, window 7") {
    ModelSpec spec = base_spec();
    spec.layers = 2;
    spec.pooling = gyre::nn::PoolingKind::kLast;
    CHECK(run_steps(spec, 7).mallocs == 0);
  }
  SECTION("truncated BPTT, GRU tagger with a character encoder, window 4") {
    ModelSpec spec = with_char_encoder(base_spec());
    spec.task = gyre::data::Task::kTag;
    spec.cell = gyre::nn::CellType::kGru;
    CHECK(run_steps(spec, 4).mallocs == 0);
  }
  SECTION("truncated BPTT, LSTM tagger, softmax per token, window 4") {
    ModelSpec spec = base_spec();
    spec.task = gyre::data::Task::kTag;
    CHECK(run_steps(spec, 4).mallocs == 0);
  }
}
