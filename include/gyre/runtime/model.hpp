#pragma once
// Embedded inference: load a model file, classify or tag text. C++17, standard library only.
//
//   auto model = gyre::runtime::Model::load("intents.gyre");   // memory-mapped, immutable
//   gyre::runtime::Context ctx(model);                          // one per thread, reusable
//   const auto& r = ctx.classify("my kettle stopped heating");
//   std::cout << model.labels()[r.best] << '\t' << r.probabilities[r.best] << '\n';
//
// A Model is immutable and may be shared by any number of threads (copies are cheap and share
// the weights). A Context holds all per-call buffers; it is not thread-safe, and once it has
// seen the longest input its calls allocate nothing on the token-id and token paths. Results
// returned by reference (and the spans inside them) stay valid until the next call on the same
// Context. Every function throws gyre::runtime::Error on bad input or misuse.

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/runtime/error.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/runtime/model_header.hpp"
#include "gyre/runtime/ngram_part.hpp"
#include "gyre/runtime/span.hpp"
#include "gyre/runtime/tokenizer.hpp"

namespace gyre::runtime {

/// Classification of one text. Spans point into the Context.
struct ClassifyResult {
  /// One per label, label order; calibrated (temperature-scaled) when the model file holds a
  /// temperature and the Context's set_calibrated is on (the default).
  Span<const float> probabilities;
  Span<const float> logits;          // the output layer's scores, before temperature and softmax/sigmoid
  Span<const float> features;        // the pooled representation the output layer reads
  std::uint32_t best = 0;            // arg-max label
  Span<const std::uint32_t> chosen;  // softmax: {best}; sigmoid: labels with p >= their threshold
                                     // (Architecture::threshold_of)
  std::size_t token_count = 0;
};

/// One labelled span of a tagged text: tokens [begin, end) of type `type` (e.g. "date"). After
/// tag(text), bytes [byte_begin, byte_end) of that text are the span as the user wrote it, from
/// the first byte of its first token to the last byte of its last token, before normalization
/// (text "on １４/03" gives "１４/03", not the tokens "14 / 03"); tag_tokens()/tag_ids() set 0, 0.
struct TagSpan {
  std::uint32_t begin = 0;
  std::uint32_t end = 0;
  std::string_view type;
  std::size_t byte_begin = 0;
  std::size_t byte_end = 0;
};

/// Tagging of one text. Spans point into the Context (type strings into the Model).
struct TagResult {
  Span<const std::string> tokens;  // empty for tag_ids()
  /// tag(text) only (empty otherwise): per token, the bytes of the text it came from.
  Span<const ByteRange> token_bytes;
  Span<const std::uint32_t> tags;  // label index per token
  /// [tokens x labels] row-major: softmax of the scores, or CRF posterior marginals
  /// (forward-backward) for output "crf".
  Span<const float> probabilities;
  Span<const TagSpan> spans;  // CoNLL-style extraction from the decoded tags (none if scheme "none")
};

class Context;

class Model {
 public:
  /// Memory-maps and validates an exported model file (header "format": "gyre-model"; a training
  /// checkpoint is refused: export it first). Throws Error naming the file and the problem.
  static Model load(const std::string& path);
  /// Uses the caller's bytes (no copy): they must outlive the Model and every copy of it.
  static Model from_buffer(const void* data, std::size_t size, std::string name = "<buffer>");
  static Model from_file(ModelFile file);

  const Architecture& architecture() const;
  const std::vector<std::string>& labels() const;
  /// The n-gram part the model applies (empty without one); from an int8 file its weights stay
  /// int8 (NgramPart::quantized()).
  const NgramPart& ngram_part() const;
  const TokenizerSettings& tokenizer_settings() const;
  const Tokenizer& tokenizer() const;
  std::size_t vocabulary_size() const;
  std::string_view token(std::uint32_t id) const;
  /// Id of a token; 1 (unknown) when absent.
  std::uint32_t token_id(std::string_view token) const;
  /// Character encoder only: entries of the character list ("<pad>", "<unk>" included), else 0.
  std::size_t character_count() const;
  const ModelFile& file() const;
  /// Multiply-adds of the forward pass for a sequence of n tokens (for GFLOP/s reports).
  double flops(std::size_t n) const;
  /// Name of the kernel set in use ("portable", "avx2", "avx512", "avx512-vnni").
  static const char* kernel_name();

  struct Impl;

 private:
  friend class Context;
  explicit Model(std::shared_ptr<const Impl> impl) : impl_(std::move(impl)) {}
  std::shared_ptr<const Impl> impl_;
};

class Context {
 public:
  explicit Context(const Model& model);
  ~Context();
  Context(Context&&) noexcept;
  Context& operator=(Context&&) noexcept;
  Context(const Context&) = delete;
  Context& operator=(const Context&) = delete;

  const Model& model() const { return model_; }

  /// Classify models only.
  const ClassifyResult& classify(std::string_view text);
  const ClassifyResult& classify_tokens(Span<const std::string> tokens);
  const ClassifyResult& classify_ids(Span<const std::uint32_t> ids);
  /// A model with a character encoder (architecture().has_char_encoder()) needs each token's
  /// character ids too: those of token i are char_ids[char_offsets[i] .. char_offsets[i+1])
  /// (ids.size() + 1 offsets; gyre/runtime/char_tokens.hpp). The overloads without them throw for
  /// such a model. With a character encoder, classify_tokens()/tag_tokens()/push() take each given
  /// token as written (un-folded): the word is looked up after the tokenizer's normalization.
  const ClassifyResult& classify_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                     Span<const std::int32_t> char_offsets);
  /// A model with an n-gram part (architecture().has_ngram_part(); docs/model-format.md "N-gram
  /// part") adds the scores of a linear model over the text's word n-grams to the network's logits
  /// (before the softmax and the temperature). It reads words, which ids cannot give back (every
  /// token outside the vocabulary is id 1): classify(), classify_tokens(), the batched calls on
  /// text or tokens and push() apply it; the id-only calls (classify_ids, classify_batch_ids,
  /// occlusion_ids, push_id) throw for such a model rather than run without it. This overload
  /// takes the words with the ids: words[i] is token i as the vocabulary sees it (normalized, i.e.
  /// tokens() after a call on text, or Tokenizer::normalize of a token as written), one per id;
  /// char_ids / char_offsets are empty for a model without a character encoder. Throws for a model
  /// without an n-gram part.
  const ClassifyResult& classify_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                     Span<const std::int32_t> char_offsets, Span<const std::string> words);

  /// Why this label, without a backward pass: occlusion attribution (Zeiler & Fergus 2014,
  /// "Visualizing and Understanding Convolutional Networks", section 4.2, applied to tokens). Score
  /// t = p(target | ids) - p(target | ids with token t replaced by id 0), the padding id, whose
  /// embedding is zero (with a character encoder the token also loses its characters, which gives
  /// zero character features): the same baseline the library's integrated gradients use. Runs
  /// ids.size() + 1 forward passes; the probabilities are calibrated when calibrated() is on.
  /// Classify models only. The result (one score per token) stays valid until the next call;
  /// the last classify result is that of the whole text afterwards. The overload without
  /// characters throws for a model with a character encoder.
  Span<const float> occlusion_ids(Span<const std::uint32_t> ids, std::uint32_t target);
  Span<const float> occlusion_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                  Span<const std::int32_t> char_offsets, std::uint32_t target);
  /// With the words an n-gram part reads (see classify_ids above); occluding token t also leaves
  /// out every n-gram that contains it.
  Span<const float> occlusion_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                  Span<const std::int32_t> char_offsets, Span<const std::string> words,
                                  std::uint32_t target);
  /// The same on text (tokenized as classify() does; tokens() gives them).
  Span<const float> occlusion(std::string_view text, std::uint32_t target);
  /// Tokens of the last call on text (classify, tag, occlusion).
  Span<const std::string> tokens() const;

  /// Tag models only.
  const TagResult& tag(std::string_view text);
  const TagResult& tag_tokens(Span<const std::string> tokens);
  const TagResult& tag_ids(Span<const std::uint32_t> ids);
  const TagResult& tag_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                           Span<const std::int32_t> char_offsets);

  /// Batched calls: many texts through the model together, one result per text in input order,
  /// each equal to the matching one-text call (classify, classify_tokens, classify_ids, tag, ...)
  /// within float rounding: the same tokens, probabilities, tags, spans with their byte offsets,
  /// temperature and calibration. The texts are sorted by length, each layer's input product runs
  /// once over all tokens of the batch and the recurrent product once per time step over the texts
  /// still running (a shorter text keeps its final state), so the weights are read once per step
  /// for the whole batch instead of once per text. Every output is summed in the same order
  /// whatever else is in the batch, so a text's result does not depend on its batch mates.
  /// Empty texts are allowed (a classifier then sees the empty text, as classify("") does). The
  /// results, and the spans inside them, stay valid until the next call on this Context; after a
  /// warm-up with the largest batch the token-id and token paths allocate nothing. An error names
  /// the text ("text 3: ...").
  Span<const ClassifyResult> classify_batch(Span<const std::string_view> texts);
  Span<const ClassifyResult> classify_batch_tokens(Span<const Span<const std::string>> texts);
  Span<const ClassifyResult> classify_batch_ids(Span<const Span<const std::uint32_t>> texts);
  /// Character-encoder models: per text, the character ids and offsets that classify_ids takes.
  Span<const ClassifyResult> classify_batch_ids(Span<const Span<const std::uint32_t>> texts,
                                                Span<const Span<const std::int32_t>> char_ids,
                                                Span<const Span<const std::int32_t>> char_offsets);
  Span<const TagResult> tag_batch(Span<const std::string_view> texts);
  Span<const TagResult> tag_batch_tokens(Span<const Span<const std::string>> texts);
  Span<const TagResult> tag_batch_ids(Span<const Span<const std::uint32_t>> texts);
  Span<const TagResult> tag_batch_ids(Span<const Span<const std::uint32_t>> texts,
                                      Span<const Span<const std::int32_t>> char_ids,
                                      Span<const Span<const std::int32_t>> char_offsets);

  /// Temperature scaling (architecture().temperature, gyre/runtime/calibration.hpp) applied to
  /// every probability this Context returns: on by default; off gives the raw model outputs. It
  /// never changes a softmax arg-max, a tag or a span; multi-label decisions compare the
  /// calibrated probabilities with the threshold. No effect when the file has no temperature.
  void set_calibrated(bool on);
  bool calibrated() const;

  /// Step-wise use (unidirectional models only; throws for bidirectional ones): start a sequence,
  /// feed tokens one at a time, read the distribution. For classifiers the distribution is that
  /// of the text so far; for taggers it is the newest token's tag distribution (softmax, or the
  /// CRF filtered marginal p(y_t | tokens 1..t)).
  void reset();
  Span<const float> push(std::string_view token);
  Span<const float> push_id(std::uint32_t id);
  /// Current distribution; for a classifier before any token it is that of the empty text.
  Span<const float> distribution();
  std::size_t steps() const;

  struct Buffers;

 private:
  /// One step from the input row already in the step buffer.
  Span<const float> push_input();

  Model model_;
  std::unique_ptr<Buffers> b_;
};

}  // namespace gyre::runtime
