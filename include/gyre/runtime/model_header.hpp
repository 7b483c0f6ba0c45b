#pragma once
// The model description: what the JSON header of a model file or checkpoint says about the network
// (docs/model-format.md "Model header schema"). This is the one reader, writer and validator of it
// and the one set of its enums: the embedded runtime and the training library (its ModelSpec, its
// checkpoint and export code) both go through it. C++17, standard library only.
//
//   const ModelHeader h = parse_model_header(file.header_json(), file.name());
//   check_model_tensors(h, file);   // every tensor the architecture needs, with its shape
//
// Every size is bounded (ModelHeaderLimits) so that a crafted header is refused with an Error
// before anything is allocated from it, and check_model_tensors ties the architecture to tensors
// that really exist in the file: memory needed to load a valid file is bounded by its size.

#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/runtime/error.hpp"
#include "gyre/runtime/tokenizer.hpp"

namespace gyre::runtime {

class ModelFile;

enum class Task { kClassify, kTag };
enum class Cell { kLstm, kGru };
enum class Pooling { kLast, kMean, kMax };
enum class Output { kSoftmax, kSigmoid, kCrf };
enum class TagScheme { kNone, kBio, kBioes };

/// The spellings used in headers, configs and messages: "classify"/"tag", "lstm"/"gru",
/// "last"/"mean"/"max", "softmax"/"sigmoid"/"crf", "none"/"bio"/"bioes".
const char* to_string(Task v);
const char* to_string(Cell v);
const char* to_string(Pooling v);
const char* to_string(Output v);
const char* to_string(TagScheme v);
/// Inverses of to_string; throw Error("'x' is not one of: a, b") on anything else.
Task task_from_string(std::string_view name);
Cell cell_from_string(std::string_view name);
Pooling pooling_from_string(std::string_view name);
Output output_from_string(std::string_view name);
TagScheme tag_scheme_from_string(std::string_view name);

/// The "architecture" object of the header.
struct Architecture {
  Task task = Task::kClassify;
  Cell cell = Cell::kLstm;
  std::size_t embedding_size = 0;
  std::size_t hidden_size = 0;
  std::size_t layers = 1;
  bool bidirectional = false;
  Pooling pooling = Pooling::kLast;    // classify only
  Output output = Output::kSoftmax;    // classify: softmax | sigmoid; tag: softmax | crf
  float multi_label_threshold = 0.5f;  // output sigmoid only, in (0, 1)
  /// Output sigmoid only: one decision threshold per label (label order), each in (0, 1), tuned
  /// on dev at the end of training (gyre/eval/classification.hpp tune_label_thresholds). Empty =
  /// every label uses multi_label_threshold. Optional header key "architecture.label_thresholds"
  /// (files written before it existed have none).
  std::vector<float> label_thresholds;
  TagScheme tag_scheme = TagScheme::kNone;  // tag only
  /// Temperature scaling fitted on dev (gyre/runtime/calibration.hpp): empty = none; one value
  /// for softmax and CRF outputs, one per label for sigmoid. Optional header key
  /// "architecture.temperature" (a reader that does not know it refuses the file).
  std::vector<float> temperature;
  /// Character encoder (gyre/runtime/char_tokens.hpp; a CNN over each token's grapheme clusters,
  /// max-pooled, joined to the word embedding): all three 0 when the model has none.
  std::size_t char_embedding_size = 0;
  std::size_t char_filters = 0;
  std::size_t char_width = 0;  // odd
  /// N-gram part (gyre/runtime/ngram_part.hpp; single-label classifiers, output softmax): its
  /// n-gram order, mix and number of keys; all 0 when the model has none. Optional header object
  /// "architecture.ngram" {"order", "mix", "keys"}; the keys and weights are tensors
  /// (read_ngram_part in gyre/runtime/ngram_part_file.hpp).
  int ngram_order = 0;
  float ngram_mix = 0.0f;
  std::size_t ngram_keys = 0;

  bool has_char_encoder() const { return char_filters > 0; }
  bool has_ngram_part() const { return ngram_order > 0; }
  /// Output sigmoid: the threshold label `label` is chosen at (probability >= it).
  float threshold_of(std::size_t label) const {
    return label < label_thresholds.size() ? label_thresholds[label] : multi_label_threshold;
  }
  /// Width of the recurrent stack's input: the word embedding, then the character features.
  std::size_t input_size() const { return embedding_size + char_filters; }
  std::size_t directions() const { return bidirectional ? 2 : 1; }
  std::size_t gates() const { return cell == Cell::kLstm ? 4 : 3; }
  std::size_t features() const { return hidden_size * directions(); }
};

/// Bounds the validator enforces (documented in docs/model-format.md). They are far above what
/// gyre trains on a CPU and low enough that sizes computed from them cannot overflow.
struct ModelHeaderLimits {
  static constexpr std::size_t kMaxLayers = 64;
  static constexpr std::size_t kMaxEmbeddingSize = 1U << 16;
  static constexpr std::size_t kMaxHiddenSize = 1U << 16;
  static constexpr std::size_t kMaxLabels = 1U << 20;
  static constexpr std::size_t kMaxLabelBytes = 1024;
  static constexpr std::size_t kMaxVocabulary = 1U << 28;
  static constexpr std::size_t kMaxTokenBytes = 1U << 16;
  static constexpr std::size_t kMaxTokensSetting = 1000000000;
  static constexpr std::size_t kMaxCharacters = 1U << 20;
  static constexpr std::size_t kMaxCharWidth = 31;
  static constexpr std::size_t kMaxNgramKeys = 1U << 28;
  static constexpr double kMaxNgramMix = 1000.0;  // our choice: mix is chosen on dev near 1
};

/// What the header says. `format` is "gyre-model" (exported) or "gyre-checkpoint" (training).
struct ModelHeader {
  std::string format = "gyre-model";
  Architecture architecture;
  /// Class names, or tag names of a tagger, in row order of the output layer.
  std::vector<std::string> labels;
  TokenizerSettings tokenizer;
  /// Token of id i at index i; [0] = "<pad>", [1] = "<unk>".
  std::vector<std::string> vocabulary;
  /// Character encoder only: grapheme cluster of id i at index i; [0] = "<pad>", [1] = "<unk>".
  std::vector<std::string> characters;
};

inline constexpr std::string_view kPaddingToken = "<pad>";
inline constexpr std::string_view kUnknownToken = "<unk>";

/// Parses and validates the model description in a header (strict JSON, see model_file.hpp).
/// Unknown keys inside "architecture" and "tokenizer" are refused (a newer writer may have added
/// something that changes the forward pass); other top-level keys are left to the caller. Checks:
/// every key present with its type, integers in the ModelHeaderLimits ranges, enums by name,
/// the keys of the task and output (pooling, threshold, tag_scheme) and no others, labels
/// non-empty, unique, without control characters, tags of a tagger in its scheme, a vocabulary
/// of unique tokens starting with "<pad>", "<unk>". Throws Error("NAME: header: what").
ModelHeader parse_model_header(std::string_view header_json, const std::string& name);

/// The header JSON of h (format, architecture, labels, tokenizer, vocabulary), compact. Callers
/// that store more (a checkpoint's training state) add members to this object. Throws Error
/// when h would not pass parse_model_header.
std::string model_header_json(const ModelHeader& h);

/// One tensor the architecture needs, with its shape [rows x cols].
struct ModelTensor {
  std::string name;
  std::uint64_t rows = 0;
  std::uint64_t cols = 0;
  /// A weight matrix (embedding, w_input, w_hidden, the output layer's weights): what
  /// `gyre export` stores in the chosen precision; biases and CRF scores stay f32.
  bool matrix = false;
  /// Raw bytes (dtype u8, rank 1) of a size the header does not fix: the n-gram part's encoded
  /// keys, of at least `cols` bytes. Every other tensor holds numbers (f32, f16 or i8).
  bool bytes = false;
};

/// The tensors of a model with this header, in a fixed order (docs/model-format.md "Tensors").
std::vector<ModelTensor> model_tensors(const ModelHeader& h);

/// Throws Error("FILE: ...") unless every tensor of model_tensors(h) is in the file with its shape.
/// Other tensors (a checkpoint's optimizer state) are allowed.
void check_model_tensors(const ModelHeader& h, const ModelFile& file);

}  // namespace gyre::runtime
