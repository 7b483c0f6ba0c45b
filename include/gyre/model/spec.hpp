#pragma once
// ModelSpec: the architecture of a gyre model, everything needed to rebuild it from its tensors.
// Stored as JSON in checkpoints and (through the exporter) in the model file header.

#include <string>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "gyre/data/reader.hpp"
#include "gyre/nn/pooling.hpp"
#include "gyre/nn/recurrent_layer.hpp"

namespace gyre::model {

enum class OutputKind { kSoftmax, kSigmoid, kCrf };

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
  std::vector<std::string> labels;  // class names, or tag names for taggers (id order)
  std::string tag_scheme;           // "bio" | "bioes" for taggers, empty otherwise
  float threshold = 0.5f;           // sigmoid (multi-label) decision threshold

  int num_labels() const noexcept { return static_cast<int>(labels.size()); }
  int directions() const noexcept { return bidirectional ? 2 : 1; }
  int features() const noexcept { return hidden_size * directions(); }
};

const char* to_string(OutputKind kind) noexcept;
const char* cell_name(nn::CellType cell) noexcept;
nn::CellType parse_cell(const std::string& name);  // throws ConfigError("cell", ...)

nlohmann::json spec_to_json(const ModelSpec& spec);
/// Throws gyre::FormatError-free ConfigError naming the key on bad or missing fields.
ModelSpec spec_from_json(const nlohmann::json& j);
/// Shape and range checks (throws ConfigError naming the setting).
void validate(const ModelSpec& spec);

}  // namespace gyre::model
