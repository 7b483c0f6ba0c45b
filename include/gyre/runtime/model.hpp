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
#include "gyre/runtime/span.hpp"
#include "gyre/runtime/tokenizer.hpp"

namespace gyre::runtime {

enum class Task { kClassify, kTag };
enum class Cell { kLstm, kGru };
enum class Pooling { kLast, kMean, kMax };
enum class Output { kSoftmax, kSigmoid, kCrf };
enum class TagScheme { kNone, kBio, kBioes };

const char* to_string(Task v);
const char* to_string(Cell v);
const char* to_string(Pooling v);
const char* to_string(Output v);
const char* to_string(TagScheme v);

/// The "architecture" object of the model header (docs/model-format.md).
struct Architecture {
  Task task = Task::kClassify;
  Cell cell = Cell::kLstm;
  std::size_t embedding_size = 0;
  std::size_t hidden_size = 0;
  std::size_t layers = 1;
  bool bidirectional = false;
  Pooling pooling = Pooling::kLast;  // classify only
  Output output = Output::kSoftmax;
  float multi_label_threshold = 0.5f;  // sigmoid only
  TagScheme tag_scheme = TagScheme::kNone;  // tag only

  std::size_t directions() const { return bidirectional ? 2 : 1; }
  std::size_t gates() const { return cell == Cell::kLstm ? 4 : 3; }
  std::size_t features() const { return hidden_size * directions(); }
};

/// Classification of one text. Spans point into the Context.
struct ClassifyResult {
  Span<const float> probabilities;   // one per label, label order
  std::uint32_t best = 0;            // arg-max label
  Span<const std::uint32_t> chosen;  // softmax: {best}; sigmoid: labels with p >= threshold
  std::size_t token_count = 0;
};

/// One labelled span of a tagged text: tokens [begin, end) of type `type` (e.g. "date").
struct TagSpan {
  std::uint32_t begin = 0;
  std::uint32_t end = 0;
  std::string_view type;
};

/// Tagging of one text. Spans point into the Context (type strings into the Model).
struct TagResult {
  Span<const std::string> tokens;  // empty for tag_ids()
  Span<const std::uint32_t> tags;  // label index per token
  /// [tokens x labels] row-major: softmax of the scores, or CRF posterior marginals
  /// (forward-backward) for output "crf".
  Span<const float> probabilities;
  Span<const TagSpan> spans;  // CoNLL-style extraction from the decoded tags (none if scheme "none")
};

class Context;

class Model {
 public:
  /// Memory-maps and validates a model file. Throws Error naming the file and the problem.
  static Model load(const std::string& path);
  /// Uses the caller's bytes (no copy): they must outlive the Model and every copy of it.
  static Model from_buffer(const void* data, std::size_t size, std::string name = "<buffer>");
  static Model from_file(ModelFile file);

  const Architecture& architecture() const;
  const std::vector<std::string>& labels() const;
  const TokenizerSettings& tokenizer_settings() const;
  const Tokenizer& tokenizer() const;
  std::size_t vocabulary_size() const;
  std::string_view token(std::uint32_t id) const;
  /// Id of a token; 1 (unknown) when absent.
  std::uint32_t token_id(std::string_view token) const;
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

  /// Tag models only.
  const TagResult& tag(std::string_view text);
  const TagResult& tag_tokens(Span<const std::string> tokens);
  const TagResult& tag_ids(Span<const std::uint32_t> ids);

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
  Model model_;
  std::unique_ptr<Buffers> b_;
};

}  // namespace gyre::runtime
