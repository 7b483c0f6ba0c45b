// How the pieces compose into a model, forward and backward (the model/trainer code follows the
// same sequence), checked end to end by central differences on every parameter:
//   classifier: ids -> Embedding -> Dropout -> RnnStack -> Pooling -> Linear -> softmax CE
//   tagger:     ids -> Embedding -> RnnStack -> per-token Linear -> token CE

#include <catch2/catch.hpp>
#include <vector>

#include "gyre/nn/dropout.hpp"
#include "gyre/nn/embedding.hpp"
#include "gyre/nn/linear.hpp"
#include "gyre/nn/loss.hpp"
#include "gyre/nn/pooling.hpp"
#include "gyre/nn/rnn_stack.hpp"
#include "nn_test_util.hpp"

using namespace gyre;
using namespace gyre::nn;
using gyre::nn::test::check_gradient;
using gyre::nn::test::random_matrix;

namespace {

struct Classifier {
  ParameterStore store;
  Embedding embedding;
  Dropout embedding_dropout;
  RnnStack rnn;
  Pooling pooling;
  Linear head;
  // Activations and their gradients, reused across batches.
  Matrix emb, seq, pooled, logits, d_logits, d_pooled, d_seq, d_emb;

  Classifier(CellType cell, PoolingKind pool, int vocab, int E, int H, int classes)
      : embedding(store, vocab, E),
        embedding_dropout(0.2f),
        rnn(RnnStackConfig{cell, E, H, 2, true, 0.3f}, store),
        pooling(pool, rnn.directions()),
        head(store, rnn.output_size(), classes) {}

  void init(Rng& rng) {
    embedding.init_parameters(rng);
    rnn.init_parameters(rng);
    head.init_parameters(rng);
  }

  // ids: time-major [T*B], padding id 0 beyond each length.
  double forward(std::span<const std::int32_t> ids, int T, std::span<const int> lengths,
                 std::span<const int> labels, bool training, Rng* rng) {
    embedding.forward(ids, emb);
    embedding_dropout.forward(emb, training, rng);
    rnn.forward(emb, T, lengths, seq, training, rng);
    pooling.forward(seq, T, lengths, pooled);
    head.forward(pooled, logits);
    return softmax_cross_entropy(logits, labels, d_logits);
  }

  void backward() {
    head.backward(d_logits, &d_pooled);
    pooling.backward(d_pooled, d_seq);
    rnn.backward(d_seq, d_emb);
    embedding_dropout.backward(d_emb);
    embedding.backward(d_emb);
  }
};

}  // namespace

TEST_CASE("classifier composed from nn pieces: end-to-end gradients match central differences",
          "[nn][gradcheck]") {
  const int T = 5, V = 9, E = 4, H = 3, C = 3;
  const std::vector<int> lengths = {5, 2, 3};
  const std::vector<std::int32_t> ids = {3, 1, 7,  //
                                         8, 2, 2,  //
                                         4, 0, 6,  //
                                         5, 0, 0,  //
                                         2, 0, 0};
  const std::vector<int> labels = {2, 0, 1};
  for (const CellType cell : {CellType::kLstm, CellType::kGru}) {
    for (const PoolingKind pool : {PoolingKind::kLast, PoolingKind::kMean, PoolingKind::kMax}) {
      DYNAMIC_SECTION((cell == CellType::kLstm ? "lstm " : "gru ") << gyre::runtime::to_string(pool)) {
        Classifier model(cell, pool, V, E, H, C);
        Rng init_rng(31);
        model.init(init_rng);
        for (auto& p : model.store) p.value += random_matrix(p.value.rows(), p.value.cols(), init_rng, 0.2f);
        model.store.at("tokens.vectors").value.row(0).setZero();
        // Re-seeding before each forward keeps the dropout masks fixed (training mode).
        auto loss = [&] {
          Rng rng(5);
          return model.forward(ids, T, lengths, labels, true, &rng);
        };
        model.store.zero_grad();
        const double l = loss();
        CHECK(std::isfinite(l));
        model.backward();
        model.store.at("tokens.vectors").finalize_touched_rows();
        CHECK(model.store.at("tokens.vectors").touched_rows ==
              std::vector<std::int32_t>{1, 2, 3, 4, 5, 6, 7, 8});
        test::GradCheckOptions opt;
        opt.max_entries = 30;
        if (pool == PoolingKind::kMax) {
          // Max pooling has kinks where the argmax switches: a smaller step stays on one side of
          // them, at the price of more float32 rounding noise in the difference (larger floor).
          opt.eps = 1e-3f;
          opt.atol = 1e-3;
        }
        for (auto& p : model.store) check_gradient(p.name, p.value, p.grad, loss, opt);
      }
    }
  }
}

TEST_CASE("tagger composed from nn pieces: per-token head and masked loss", "[nn][gradcheck]") {
  const int T = 4, V = 7, E = 3, H = 3, C = 4;
  const std::vector<int> lengths = {2, 4};
  const std::vector<std::int32_t> ids = {1, 2, 3, 4, 0, 5, 0, 6};
  const std::vector<int> tags = {0, 1, 2, 3, 1, 0, 3, 2};  // padded positions hold anything
  ParameterStore store;
  Embedding embedding(store, V, E);
  RnnStack rnn(RnnStackConfig{CellType::kLstm, E, H, 1, true, 0.0f}, store);
  Linear head(store, rnn.output_size(), C);
  Rng rng(12);
  embedding.init_parameters(rng);
  rnn.init_parameters(rng);
  head.init_parameters(rng);
  Matrix emb, seq, logits, d_logits, d_seq, d_emb;
  auto loss = [&] {
    embedding.forward(ids, emb);
    rnn.forward(emb, T, lengths, seq, false, nullptr);
    head.forward(seq, logits);  // [T*B x C], one row per token
    return token_cross_entropy(logits, tags, T, lengths, d_logits);
  };
  store.zero_grad();
  loss();
  head.backward(d_logits, &d_seq);
  rnn.backward(d_seq, d_emb);
  embedding.backward(d_emb);
  for (auto& p : store) check_gradient(p.name, p.value, p.grad, loss);
}
