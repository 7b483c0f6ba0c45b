#include "gyre/model/spec.hpp"

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"

namespace gyre::model {

using nlohmann::json;

const char* to_string(OutputKind kind) noexcept {
  switch (kind) {
    case OutputKind::kSoftmax:
      return "softmax";
    case OutputKind::kSigmoid:
      return "sigmoid";
    case OutputKind::kCrf:
      return "crf";
  }
  return "?";
}

const char* cell_name(nn::CellType cell) noexcept {
  return cell == nn::CellType::kLstm ? "lstm" : "gru";
}

nn::CellType parse_cell(const std::string& name) {
  if (name == "lstm") return nn::CellType::kLstm;
  if (name == "gru") return nn::CellType::kGru;
  throw ConfigError("cell", "'" + name + "' is not one of: lstm, gru");
}

namespace {
OutputKind parse_output(const std::string& name) {
  if (name == "softmax") return OutputKind::kSoftmax;
  if (name == "sigmoid") return OutputKind::kSigmoid;
  if (name == "crf") return OutputKind::kCrf;
  throw ConfigError("output", "'" + name + "' is not one of: softmax, sigmoid, crf");
}

template <typename T>
T field(const json& j, const char* key) {
  if (!j.contains(key)) throw ConfigError(key, "missing from the model description");
  try {
    return j.at(key).get<T>();
  } catch (const json::exception& e) {
    throw ConfigError(key, std::string("wrong type in the model description: ") + e.what());
  }
}
}  // namespace

json spec_to_json(const ModelSpec& s) {
  return json{{"task", data::to_string(s.task)},
              {"cell", cell_name(s.cell)},
              {"vocab_size", s.vocab_size},
              {"embedding_size", s.embedding_size},
              {"hidden_size", s.hidden_size},
              {"layers", s.layers},
              {"bidirectional", s.bidirectional},
              {"dropout", s.dropout},
              {"embedding_dropout", s.embedding_dropout},
              {"pooling", std::string(nn::pooling_name(s.pooling))},
              {"output", to_string(s.output)},
              {"labels", s.labels},
              {"tag_scheme", s.tag_scheme},
              {"threshold", s.threshold}};
}

ModelSpec spec_from_json(const json& j) {
  if (!j.is_object()) throw ConfigError("model", "expected a JSON object");
  ModelSpec s;
  const auto task = field<std::string>(j, "task");
  if (task == "classify") {
    s.task = data::Task::kClassify;
  } else if (task == "tag") {
    s.task = data::Task::kTag;
  } else {
    throw ConfigError("task", "'" + task + "' is not one of: classify, tag");
  }
  s.cell = parse_cell(field<std::string>(j, "cell"));
  s.vocab_size = field<int>(j, "vocab_size");
  s.embedding_size = field<int>(j, "embedding_size");
  s.hidden_size = field<int>(j, "hidden_size");
  s.layers = field<int>(j, "layers");
  s.bidirectional = field<bool>(j, "bidirectional");
  s.dropout = field<float>(j, "dropout");
  s.embedding_dropout = field<float>(j, "embedding_dropout");
  s.pooling = nn::parse_pooling(field<std::string>(j, "pooling"));
  s.output = parse_output(field<std::string>(j, "output"));
  s.labels = field<std::vector<std::string>>(j, "labels");
  s.tag_scheme = field<std::string>(j, "tag_scheme");
  s.threshold = field<float>(j, "threshold");
  validate(s);
  return s;
}

void validate(const ModelSpec& s) {
  if (s.vocab_size < 2) throw ConfigError("vocab_size", "must be >= 2 (padding and unknown ids)");
  if (s.embedding_size < 1) throw ConfigError("embedding_size", "must be >= 1");
  if (s.hidden_size < 1) throw ConfigError("hidden_size", "must be >= 1");
  if (s.layers < 1) throw ConfigError("layers", "must be >= 1");
  if (s.labels.size() < 2 && s.output != OutputKind::kSigmoid)
    throw ConfigError("labels",
                      "a model needs at least two labels (found " + std::to_string(s.labels.size()) + ")");
  if (s.labels.empty()) throw ConfigError("labels", "a model needs at least one label");
  if (!(s.dropout >= 0.0f && s.dropout < 1.0f)) throw ConfigError("dropout", "must be in [0, 1)");
  if (!(s.embedding_dropout >= 0.0f && s.embedding_dropout < 1.0f))
    throw ConfigError("embedding_dropout", "must be in [0, 1)");
  if (s.task == data::Task::kTag && s.output == OutputKind::kSigmoid)
    throw ConfigError("output", "taggers use softmax or crf outputs");
  if (s.task == data::Task::kClassify && s.output == OutputKind::kCrf)
    throw ConfigError("output", "a CRF output needs a tagging corpus");
  if (!(s.threshold > 0.0f && s.threshold < 1.0f)) throw ConfigError("threshold", "must be in (0, 1)");
}

}  // namespace gyre::model
