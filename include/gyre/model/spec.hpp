#pragma once
// ModelSpec: the architecture of a gyre model, everything needed to rebuild it from its tensors.
// Its enums are the runtime's, and in files it is stored as the runtime's model header
// (gyre/runtime/model_header.hpp): architecture() and spec_from_header() convert, so the training
// library and the embedded runtime read and validate a model description the same way.

#include <string>
#include <vector>

#include "gyre/data/tag_scheme.hpp"
#include "gyre/data/task.hpp"
#include "gyre/nn/pooling.hpp"
#include "gyre/nn/recurrent_layer.hpp"
#include "gyre/runtime/model_header.hpp"

namespace gyre::model {

using OutputKind = runtime::Output;
using runtime::to_string;

struct ModelSpec {
  data::Task task = data::Task::kClassify;
  nn::CellType cell = nn::CellType::kLstm;
  int vocab_size = 0;
  int embedding_size = 64;
  int hidden_size = 128;
  int layers = 1;
  bool bidirectional = false;
  float dropout = 0.2f;                              // between recurrent layers and on the head's input
  float embedding_dropout = 0.1f;                    // on embedding outputs
  nn::PoolingKind pooling = nn::PoolingKind::kMean;  // classifiers only
  OutputKind output = OutputKind::kSoftmax;
  std::vector<std::string> labels;                      // class names, or tag names for taggers (id order)
  data::TagScheme tag_scheme = data::TagScheme::kNone;  // taggers: kBio | kBioes (kNone: plain labels)
  float threshold = 0.5f;                               // sigmoid (multi-label) decision threshold
  /// Sigmoid only: one threshold per label, tuned on dev (runtime::Architecture::label_thresholds);
  /// empty = every label uses `threshold`.
  std::vector<float> label_thresholds;
  /// Temperature scaling fitted on dev at the end of training (runtime::Architecture::temperature):
  /// empty = none; 1 value (softmax, CRF) or one per label (sigmoid).
  std::vector<float> temperature;

  /// Character encoder (nn::CharCnn over each token's grapheme clusters, joined to the word
  /// embedding): char_filters == 0 means none; then the other three are 0 too.
  int char_vocab_size = 0;  // entries of the character list, "<pad>" and "<unk>" included
  int char_embedding_size = 0;
  int char_filters = 0;
  int char_width = 0;

  bool has_char_encoder() const noexcept { return char_filters > 0; }
  /// Width of the recurrent stack's input.
  int input_size() const noexcept { return embedding_size + char_filters; }

  /// Sigmoid: the threshold label `label` is chosen at (probability >= it).
  float threshold_of(std::size_t label) const noexcept {
    return label < label_thresholds.size() ? label_thresholds[label] : threshold;
  }

  int num_labels() const noexcept { return static_cast<int>(labels.size()); }
  int directions() const noexcept { return bidirectional ? 2 : 1; }
  int features() const noexcept { return hidden_size * directions(); }

  /// Same architecture, labels and dropout.
  bool operator==(const ModelSpec&) const = default;
};

/// Throws ConfigError("cell", ...) unless name is "lstm" or "gru".
nn::CellType parse_cell(const std::string& name);

/// The architecture part of the model header (sizes, enums; the classify-only and tag-only
/// fields set only for their task).
runtime::Architecture architecture(const ModelSpec& spec);
/// The spec a model header describes (dropout 0: it is a training setting, kept elsewhere).
ModelSpec spec_from_header(const runtime::ModelHeader& header);
/// The same from a loaded runtime::Model's architecture, labels and vocabulary size.
ModelSpec spec_from_architecture(const runtime::Architecture& arch, const std::vector<std::string>& labels,
                                 std::size_t vocab_size, std::size_t char_vocab_size);

/// Shape and range checks, including the model-file limits (runtime::ModelHeaderLimits), so that
/// every model that trains can be saved and read back. Throws ConfigError naming the setting.
void validate(const ModelSpec& spec);

}  // namespace gyre::model
