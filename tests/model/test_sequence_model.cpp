// SequenceModel::train_batch itself, checked by central differences on every parameter: the loss
// normaliser, softmax / sigmoid / CRF outputs, class weights and label smoothing, dropout (the same
// masks for every evaluation: a freshly seeded generator each time), and truncated BPTT (state
// carried across windows, gradient cut at their boundaries).

#include <catch2/catch.hpp>

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/data/batcher.hpp"
#include "gyre/model/sequence_model.hpp"
#include "nn/nn_test_util.hpp"

using gyre::data::EncodedExample;
using gyre::model::ModelSpec;
using gyre::model::OutputKind;
using gyre::model::SequenceModel;
using gyre::nn::CellType;
using gyre::nn::Matrix;
using gyre::nn::PoolingKind;
using gyre::nn::test::check_gradient;
using gyre::nn::test::GradCheckOptions;

namespace {

constexpr std::uint64_t kDropoutSeed = 99;

struct Setup {
  ModelSpec spec;
  std::vector<EncodedExample> examples;
  gyre::model::LossOptions loss;
  int window = 0;
  double normalizer = 1.0;
};

/// The batch of all examples, in order.
gyre::data::Batch batch_of(const std::vector<EncodedExample>& examples) {
  std::vector<std::size_t> all(examples.size());
  for (std::size_t i = 0; i < all.size(); ++i) all[i] = i;
  gyre::data::Batch batch;
  gyre::data::fill_batch(examples, all, batch);
  return batch;
}

/// Random ids in [2, vocab) and targets: one class, a multi-label set, or one tag per token.
std::vector<EncodedExample> random_examples(const ModelSpec& spec, const std::vector<int>& lengths,
                                            gyre::Rng& rng) {
  std::vector<EncodedExample> out;
  const auto C = static_cast<std::uint64_t>(spec.num_labels());
  for (const int len : lengths) {
    EncodedExample ex;
    for (int t = 0; t < len; ++t)
      ex.ids.push_back(2 +
                       static_cast<std::int32_t>(rng.below(static_cast<std::uint64_t>(spec.vocab_size - 2))));
    if (spec.task == gyre::data::Task::kTag) {
      for (int t = 0; t < len; ++t) ex.targets.push_back(static_cast<std::int32_t>(rng.below(C)));
    } else if (spec.output == OutputKind::kSigmoid) {
      for (std::int32_t c = 0; c < spec.num_labels(); ++c)
        if (rng.below(2) == 1) ex.targets.push_back(c);
    } else {
      ex.targets.push_back(static_cast<std::int32_t>(rng.below(C)));
    }
    out.push_back(std::move(ex));
  }
  return out;
}

/// Valid BIO sequences over {O, B-x, I-x, B-y} (targets of a constrained CRF must be paths it allows).
void bio_targets(std::vector<EncodedExample>& examples, gyre::Rng& rng) {
  for (auto& ex : examples) {
    std::int32_t prev = 0;
    for (auto& t : ex.targets) {
      const std::int32_t r = static_cast<std::int32_t>(rng.below(4));
      t = r == 2 && prev != 1 && prev != 2 ? 1 : r;  // I-x (2) only after B-x (1) or I-x
      prev = t;
    }
  }
}

/// (sum of the batch's losses) / normalizer, as train_batch defines its gradient.
double loss_of(SequenceModel& model, const gyre::data::Batch& batch, const Setup& s) {
  gyre::Rng dropout(kDropoutSeed);
  return model.train_batch(batch, s.examples, s.window, s.normalizer, dropout) / s.normalizer;
}

/// The character encoder's max-pooling winners after the last forward pass (GradCheckOptions::piece).
std::vector<std::int32_t> winners(SequenceModel& model) {
  const auto w = model.char_encoder()->winners();
  return {w.begin(), w.end()};
}

/// Every parameter's train_batch gradient against central differences of the same loss.
void check_all_parameters(Setup s) {
  SequenceModel model(s.spec);
  gyre::Rng init(5);
  model.init_parameters(init);
  // Larger weights than the initialisation, so that gates are away from their linear region.
  for (auto& p : model.params()) p.value *= 1.5f;
  model.set_loss_options(s.loss);
  const auto batch = batch_of(s.examples);
  model.params().zero_grad();
  loss_of(model, batch, s);
  std::vector<Matrix> analytic;
  for (const auto& p : model.params()) analytic.push_back(p.grad);
  GradCheckOptions opt;
  opt.max_entries = 12;
  if (model.char_encoder() != nullptr) opt.piece = [&] { return winners(model); };
  int checked = 0;
  std::size_t i = 0;
  for (auto& p : model.params()) {
    checked += check_gradient(
        p.name, p.value, analytic[i++], [&] { return loss_of(model, batch, s); }, opt);
  }
  REQUIRE(checked > 12 * static_cast<int>(model.params().size()) / 2);
}

ModelSpec small_spec(gyre::data::Task task, CellType cell, OutputKind output) {
  ModelSpec spec;
  spec.task = task;
  spec.cell = cell;
  spec.output = output;
  spec.vocab_size = 14;
  spec.embedding_size = 5;
  spec.hidden_size = 4;
  spec.dropout = 0.0f;
  spec.embedding_dropout = 0.0f;
  spec.labels = {"a", "b", "c"};
  return spec;
}

}  // namespace

TEST_CASE("train_batch gradients of classifiers match central differences", "[model][gradcheck]") {
  gyre::Rng rng(11);
  SECTION("LSTM, 2 bidirectional layers, mean pooling, dropout, normaliser 3.7") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kClassify, CellType::kLstm, OutputKind::kSoftmax);
    s.spec.layers = 2;
    s.spec.bidirectional = true;
    s.spec.dropout = 0.3f;
    s.spec.embedding_dropout = 0.2f;
    s.examples = random_examples(s.spec, {5, 3, 1, 4}, rng);
    s.normalizer = 3.7;
    check_all_parameters(s);
  }
  SECTION("GRU, last pooling, class weights and label smoothing") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kClassify, CellType::kGru, OutputKind::kSoftmax);
    s.spec.pooling = PoolingKind::kLast;
    s.examples = random_examples(s.spec, {4, 6, 2}, rng);
    s.loss.class_weights = {0.5f, 2.0f, 1.25f};
    s.loss.label_smoothing = 0.1f;
    s.normalizer = 3.0;
    check_all_parameters(s);
  }
  SECTION("multi-label sigmoid, max pooling") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kClassify, CellType::kLstm, OutputKind::kSigmoid);
    s.spec.pooling = PoolingKind::kMax;
    s.examples = random_examples(s.spec, {3, 5, 4}, rng);
    s.normalizer = 2.0;
    check_all_parameters(s);
  }
}

TEST_CASE("train_batch gradients of taggers match central differences", "[model][gradcheck]") {
  gyre::Rng rng(12);
  SECTION("GRU bidirectional, softmax per token (normaliser = tokens)") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kTag, CellType::kGru, OutputKind::kSoftmax);
    s.spec.bidirectional = true;
    s.examples = random_examples(s.spec, {4, 2, 5}, rng);
    s.normalizer = 11.0;
    check_all_parameters(s);
  }
  SECTION("LSTM with a BIO-constrained CRF, dropout") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kTag, CellType::kLstm, OutputKind::kCrf);
    s.spec.labels = {"O", "B-x", "I-x", "B-y"};
    s.spec.tag_scheme = gyre::data::TagScheme::kBio;
    s.spec.dropout = 0.25f;
    s.examples = random_examples(s.spec, {5, 3, 4}, rng);
    bio_targets(s.examples, rng);
    s.normalizer = 3.0;
    check_all_parameters(s);
  }
  SECTION("a window longer than every sequence is full BPTT") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kTag, CellType::kLstm, OutputKind::kSoftmax);
    s.examples = random_examples(s.spec, {4, 6}, rng);
    s.window = 50;
    s.normalizer = 10.0;
    check_all_parameters(s);
  }
}

TEST_CASE("truncated BPTT in train_batch: state carries across windows, the gradient stops at them",
          "[model][tbptt]") {
  // A classifier on sequences of 12 tokens with a window of 4: windows hold positions 0-3, 4-7 and
  // 8-11 (end-aligned), and each window's tokens come from their own part of the vocabulary:
  // ids 2-5 in the first window, 6-9 in the second, 10-13 in the last. Only the last window has a
  // loss (classifier); Williams & Peng (1990) truncation cuts the gradient at the window start.
  ModelSpec spec = small_spec(gyre::data::Task::kClassify, CellType::kLstm, OutputKind::kSoftmax);
  spec.pooling = PoolingKind::kLast;
  gyre::Rng rng(13);
  std::vector<EncodedExample> examples(3);
  for (std::size_t e = 0; e < examples.size(); ++e) {
    for (int t = 0; t < 12; ++t)
      examples[e].ids.push_back(2 + 4 * (t / 4) + static_cast<std::int32_t>(rng.below(4)));
    examples[e].targets = {static_cast<std::int32_t>(e % 3)};
  }
  const auto batch = batch_of(examples);
  SequenceModel model(spec);
  gyre::Rng init(3);
  model.init_parameters(init);
  for (auto& p : model.params()) p.value *= 1.5f;

  auto run = [&](int window) {
    model.params().zero_grad();
    gyre::Rng dropout(kDropoutSeed);
    const double loss = model.train_batch(batch, examples, window, 1.0, dropout);
    std::vector<Matrix> grads;
    for (const auto& p : model.params()) grads.push_back(p.grad);
    return std::make_pair(loss, grads);
  };
  const auto [loss_full, grad_full] = run(0);
  const auto [loss_cut, grad_cut] = run(4);
  const Matrix& emb_full = grad_full[0];
  const Matrix& emb_cut = grad_cut[0];
  REQUIRE(model.params()[0].name == "tokens.vectors");

  // The forward pass is the same computation in three pieces: the same loss (float rounding of
  // differently shaped products aside; relative 1e-5 is common practice, no source).
  REQUIRE_THAT(loss_cut, Catch::Matchers::WithinRel(loss_full, 1e-5));

  // Tokens of the first two windows reach the loss only through the carried state, which the
  // truncated gradient treats as a constant: their embedding rows get exactly zero. Full BPTT
  // (a window that is ignored) gives them a gradient.
  for (int id = 2; id < 10; ++id) {
    CAPTURE(id);
    REQUIRE(emb_cut.row(id).cwiseAbs().maxCoeff() == 0.0f);
  }
  REQUIRE(emb_full.block(2, 0, 8, spec.embedding_size).cwiseAbs().maxCoeff() > 1e-4f);

  // Last-window tokens: the loss depends on them only inside that window, so the truncated
  // gradient of their rows is the true derivative (central differences).
  Matrix& table = model.params()[0].value;
  GradCheckOptions opt;
  opt.max_entries = 20;
  Matrix last_values = table.bottomRows(4);
  Matrix last_analytic = emb_cut.bottomRows(4);
  check_gradient(
      "embedding rows 10-13", last_values, last_analytic,
      [&] {
        table.bottomRows(4) = last_values;
        gyre::Rng dropout(kDropoutSeed);
        return model.train_batch(batch, examples, 4, 1.0, dropout);
      },
      opt);
  table.bottomRows(4) = last_values;

  // The recurrent weights' gradient loses the paths through earlier windows.
  const Matrix& w_hidden_full = grad_full[2];
  const Matrix& w_hidden_cut = grad_cut[2];
  REQUIRE(model.params()[2].name == "rnn.l0.fwd.w_hidden");
  REQUIRE((w_hidden_full - w_hidden_cut).cwiseAbs().maxCoeff() > 1e-4f);
}

TEST_CASE("truncated BPTT in train_batch: a tagger's windows add up to the whole sequence's loss",
          "[model][tbptt]") {
  // Every token's loss lands in exactly one window, and the state is carried, so the summed loss
  // equals full BPTT's; with the state reset at each window it would not.
  ModelSpec spec = small_spec(gyre::data::Task::kTag, CellType::kGru, OutputKind::kSoftmax);
  gyre::Rng rng(14);
  const auto examples = random_examples(spec, {9, 4, 7}, rng);
  const auto batch = batch_of(examples);
  SequenceModel model(spec);
  gyre::Rng init(4);
  model.init_parameters(init);
  for (auto& p : model.params()) p.value *= 2.0f;
  gyre::Rng d1(kDropoutSeed), d2(kDropoutSeed);
  const double full = model.train_batch(batch, examples, 0, 1.0, d1);
  const double cut = model.train_batch(batch, examples, 3, 1.0, d2);
  REQUIRE_THAT(cut, Catch::Matchers::WithinRel(full, 1e-5));
}

namespace {

/// Character ids in [1, Vc) for each token, 1 to 5 per token (the character encoder's input).
void random_characters(const ModelSpec& spec, std::vector<EncodedExample>& examples, gyre::Rng& rng) {
  for (auto& ex : examples) {
    ex.char_offsets.assign(1, 0);
    for (std::size_t t = 0; t < ex.ids.size(); ++t) {
      const auto n = 1 + rng.below(5);
      for (std::uint64_t k = 0; k < n; ++k)
        ex.char_ids.push_back(
            1 + static_cast<std::int32_t>(rng.below(static_cast<std::uint64_t>(spec.char_vocab_size - 1))));
      ex.char_offsets.push_back(static_cast<std::int32_t>(ex.char_ids.size()));
    }
  }
}

void with_char_encoder(ModelSpec& spec) {
  spec.char_vocab_size = 9;
  spec.char_embedding_size = 3;
  spec.char_filters = 4;
  spec.char_width = 3;
}

}  // namespace

TEST_CASE("train_batch gradients with the character encoder match central differences",
          "[model][gradcheck]") {
  gyre::Rng rng(13);
  SECTION("classifier: LSTM, mean pooling, embedding dropout over [word, chars]") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kClassify, CellType::kLstm, OutputKind::kSoftmax);
    with_char_encoder(s.spec);
    s.spec.embedding_dropout = 0.2f;
    s.examples = random_examples(s.spec, {5, 3, 1, 4}, rng);
    random_characters(s.spec, s.examples, rng);
    s.normalizer = 4.0;
    check_all_parameters(s);
  }
  SECTION("tagger: bidirectional GRU with a BIO-constrained CRF, width 5") {
    Setup s;
    s.spec = small_spec(gyre::data::Task::kTag, CellType::kGru, OutputKind::kCrf);
    with_char_encoder(s.spec);
    s.spec.char_width = 5;
    s.spec.bidirectional = true;
    s.spec.labels = {"O", "B-x", "I-x", "B-y"};
    s.spec.tag_scheme = gyre::data::TagScheme::kBio;
    s.examples = random_examples(s.spec, {4, 2, 5}, rng);
    bio_targets(s.examples, rng);
    random_characters(s.spec, s.examples, rng);
    s.normalizer = 3.0;
    check_all_parameters(s);
  }
}

TEST_CASE("truncated BPTT with the character encoder: each window reads its own tokens' characters",
          "[model][tbptt]") {
  // As the truncated-BPTT test above, with characters: sequences of 12 tokens, a window of 4
  // (positions 0-3, 4-7, 8-11), and each window's tokens spelled with characters of their own:
  // ids 1-4 in the first window, 5-8 in the second, 9-12 in the last. A central difference of the
  // whole loss is the truncated gradient only for what the loss reaches inside the last window
  // (Williams & Peng 1990), so that is what is compared; the earlier windows' characters are
  // checked through the loss (the forward pass in pieces equals the whole) and, for a classifier,
  // through their exactly zero gradient.
  ModelSpec spec = small_spec(gyre::data::Task::kClassify, CellType::kLstm, OutputKind::kSoftmax);
  SECTION("classifier") {
    spec.pooling = PoolingKind::kLast;
  }
  SECTION("tagger") {
    spec = small_spec(gyre::data::Task::kTag, CellType::kLstm, OutputKind::kSoftmax);
  }
  with_char_encoder(spec);
  spec.char_vocab_size = 13;
  gyre::Rng rng(17);
  std::vector<EncodedExample> examples(3);
  for (std::size_t e = 0; e < examples.size(); ++e) {
    auto& ex = examples[e];
    ex.char_offsets.assign(1, 0);
    for (int t = 0; t < 12; ++t) {
      ex.ids.push_back(2 + static_cast<std::int32_t>(rng.below(12)));
      const auto n = 1 + rng.below(4);
      for (std::uint64_t k = 0; k < n; ++k)
        ex.char_ids.push_back(1 + 4 * (t / 4) + static_cast<std::int32_t>(rng.below(4)));
      ex.char_offsets.push_back(static_cast<std::int32_t>(ex.char_ids.size()));
      if (spec.task == gyre::data::Task::kTag) ex.targets.push_back(static_cast<std::int32_t>(rng.below(3)));
    }
    if (spec.task == gyre::data::Task::kClassify) ex.targets = {static_cast<std::int32_t>(e % 3)};
  }
  const auto batch = batch_of(examples);
  SequenceModel model(spec);
  gyre::Rng init(3);
  model.init_parameters(init);
  for (auto& p : model.params()) p.value *= 1.5f;
  gyre::nn::Parameter* table = model.params().find("chars.vectors");
  REQUIRE(table != nullptr);

  auto run = [&](int window) {
    model.params().zero_grad();
    gyre::Rng dropout(kDropoutSeed);
    const double loss = model.train_batch(batch, examples, window, 1.0, dropout);
    return std::make_pair(loss, Matrix(table->grad));
  };
  const auto [loss_full, grad_full] = run(0);
  const auto [loss_cut, grad_cut] = run(4);
  // Relative 1e-5: float rounding of differently shaped products (common practice, no source).
  REQUIRE_THAT(loss_cut, Catch::Matchers::WithinRel(loss_full, 1e-5));
  if (spec.task == gyre::data::Task::kClassify) {
    REQUIRE(grad_cut.middleRows(1, 8).cwiseAbs().maxCoeff() == 0.0f);
    REQUIRE(grad_full.middleRows(1, 8).cwiseAbs().maxCoeff() > 1e-4f);
  }
  REQUIRE(grad_cut.row(0).cwiseAbs().maxCoeff() == 0.0f);  // the padding character

  Matrix last_values = table->value.bottomRows(4);
  Matrix last_analytic = grad_cut.bottomRows(4);
  REQUIRE(last_analytic.cwiseAbs().maxCoeff() > 1e-4f);
  GradCheckOptions opt;
  opt.piece = [&] { return winners(model); };
  const int checked = check_gradient(
      "characters 9-12", last_values, last_analytic,
      [&] {
        table->value.bottomRows(4) = last_values;
        gyre::Rng dropout(kDropoutSeed);
        return model.train_batch(batch, examples, 4, 1.0, dropout);
      },
      opt);
  table->value.bottomRows(4) = last_values;
  REQUIRE(checked >= 9);
}

TEST_CASE("the character encoder sees each token's own characters", "[model]") {
  // Two batches that differ only in the characters of one token of one sequence: a tagger's
  // predictions change at that token (the chars reach the model) and a padded batch predicts the
  // same as each sequence alone (padding cells and other sequences do not leak in).
  ModelSpec spec = small_spec(gyre::data::Task::kTag, CellType::kLstm, OutputKind::kSoftmax);
  with_char_encoder(spec);
  SequenceModel model(spec);
  gyre::Rng init(3);
  model.init_parameters(init);
  for (auto& p : model.params()) p.value *= 2.0f;
  gyre::Rng rng(21);
  auto examples = random_examples(spec, {4, 2}, rng);
  random_characters(spec, examples, rng);
  gyre::model::Prediction both, alone;
  model.predict(batch_of(examples), both);
  for (std::size_t b = 0; b < examples.size(); ++b) {
    model.predict(batch_of({examples[b]}), alone);
    for (int t = 0; t < static_cast<int>(examples[b].ids.size()); ++t)
      for (int c = 0; c < spec.num_labels(); ++c)
        REQUIRE_THAT(both.probs(t * 2 + static_cast<int>(b), c),
                     Catch::Matchers::WithinAbs(alone.probs(t, c), 1e-6));  // same arithmetic, reordered rows
  }
  auto changed = examples;
  changed[1].char_ids[static_cast<std::size_t>(changed[1].char_offsets[1])] =
      changed[1].char_ids[static_cast<std::size_t>(changed[1].char_offsets[1])] == 2 ? 3 : 2;
  gyre::model::Prediction after;
  model.predict(batch_of(changed), after);
  float moved = 0;
  for (int c = 0; c < spec.num_labels(); ++c)
    moved = std::max(moved, std::abs(after.probs(1 * 2 + 1, c) - both.probs(1 * 2 + 1, c)));
  REQUIRE(moved > 1e-5f);
  // Sequence 0 is untouched in its unidirectional past and future tokens.
  for (int t = 0; t < 4; ++t)
    for (int c = 0; c < spec.num_labels(); ++c)
      REQUIRE_THAT(after.probs(t * 2, c), Catch::Matchers::WithinAbs(both.probs(t * 2, c), 1e-7));
}
