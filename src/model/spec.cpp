#include "gyre/model/spec.hpp"

#include "gyre/core/error.hpp"
#include "gyre/runtime/calibration.hpp"

namespace gyre::model {

nn::CellType parse_cell(const std::string& name) {
  try {
    return runtime::cell_from_string(name);
  } catch (const runtime::Error& e) {
    throw ConfigError("cell", e.what());
  }
}

runtime::Architecture architecture(const ModelSpec& s) {
  runtime::Architecture a;
  a.task = s.task;
  a.cell = s.cell;
  a.embedding_size = static_cast<std::size_t>(s.embedding_size);
  a.hidden_size = static_cast<std::size_t>(s.hidden_size);
  a.layers = static_cast<std::size_t>(s.layers);
  a.bidirectional = s.bidirectional;
  a.output = s.output;
  a.temperature = s.temperature;
  if (s.task == data::Task::kClassify) {
    a.pooling = s.pooling;
    if (s.output == OutputKind::kSigmoid) {
      a.multi_label_threshold = s.threshold;
      a.label_thresholds = s.label_thresholds;
    }
  } else {
    a.tag_scheme = s.tag_scheme;
  }
  if (s.has_char_encoder()) {
    a.char_embedding_size = static_cast<std::size_t>(s.char_embedding_size);
    a.char_filters = static_cast<std::size_t>(s.char_filters);
    a.char_width = static_cast<std::size_t>(s.char_width);
  }
  return a;
}

ModelSpec spec_from_architecture(const runtime::Architecture& a, const std::vector<std::string>& labels,
                                 std::size_t vocab_size, std::size_t char_vocab_size) {
  ModelSpec s;
  s.task = a.task;
  s.cell = a.cell;
  // The header reader bounds every size far below INT_MAX (runtime::ModelHeaderLimits).
  s.vocab_size = static_cast<int>(vocab_size);
  s.embedding_size = static_cast<int>(a.embedding_size);
  s.hidden_size = static_cast<int>(a.hidden_size);
  s.layers = static_cast<int>(a.layers);
  s.bidirectional = a.bidirectional;
  s.dropout = 0.0f;
  s.embedding_dropout = 0.0f;
  s.output = a.output;
  s.labels = labels;
  s.temperature = a.temperature;
  if (a.task == data::Task::kClassify) {
    s.pooling = a.pooling;
    s.threshold = a.output == OutputKind::kSigmoid ? a.multi_label_threshold : 0.5f;
    if (a.output == OutputKind::kSigmoid) s.label_thresholds = a.label_thresholds;
  } else {
    s.tag_scheme = a.tag_scheme;
  }
  if (a.has_char_encoder()) {
    s.char_vocab_size = static_cast<int>(char_vocab_size);
    s.char_embedding_size = static_cast<int>(a.char_embedding_size);
    s.char_filters = static_cast<int>(a.char_filters);
    s.char_width = static_cast<int>(a.char_width);
  }
  validate(s);
  return s;
}

ModelSpec spec_from_header(const runtime::ModelHeader& h) {
  return spec_from_architecture(h.architecture, h.labels, h.vocabulary.size(), h.characters.size());
}

void validate(const ModelSpec& s) {
  using L = runtime::ModelHeaderLimits;
  auto in_range = [](const char* key, int v, std::size_t lo, std::size_t hi) {
    if (v < 0 || static_cast<std::size_t>(v) < lo || static_cast<std::size_t>(v) > hi)
      throw ConfigError(key, "must be in [" + std::to_string(lo) + ", " + std::to_string(hi) + "] (found " +
                                 std::to_string(v) + ")");
  };
  in_range("vocab_size", s.vocab_size, 2, L::kMaxVocabulary);  // padding and unknown ids
  in_range("embedding_size", s.embedding_size, 1, L::kMaxEmbeddingSize);
  in_range("hidden_size", s.hidden_size, 1, L::kMaxHiddenSize);
  in_range("layers", s.layers, 1, L::kMaxLayers);
  if (s.labels.size() < 2 && s.output != OutputKind::kSigmoid)
    throw ConfigError("labels",
                      "a model needs at least two labels (found " + std::to_string(s.labels.size()) + ")");
  if (s.labels.empty()) throw ConfigError("labels", "a model needs at least one label");
  if (s.labels.size() > L::kMaxLabels)
    throw ConfigError("labels", std::to_string(s.labels.size()) + " labels; a model file holds at most " +
                                    std::to_string(L::kMaxLabels));
  if (!(s.dropout >= 0.0f && s.dropout < 1.0f)) throw ConfigError("dropout", "must be in [0, 1)");
  if (!(s.embedding_dropout >= 0.0f && s.embedding_dropout < 1.0f))
    throw ConfigError("embedding_dropout", "must be in [0, 1)");
  if (s.task == data::Task::kTag && s.output == OutputKind::kSigmoid)
    throw ConfigError("output", "taggers use softmax or crf outputs");
  if (s.task == data::Task::kClassify && s.output == OutputKind::kCrf)
    throw ConfigError("output", "a CRF output needs a tagging corpus");
  if (s.task == data::Task::kClassify && s.tag_scheme != data::TagScheme::kNone)
    throw ConfigError("tag_scheme", "only taggers have a tag scheme");
  if (!(s.threshold > 0.0f && s.threshold < 1.0f)) throw ConfigError("threshold", "must be in (0, 1)");
  if (!s.label_thresholds.empty()) {
    if (s.output != OutputKind::kSigmoid)
      throw ConfigError("label_thresholds", "only a multi-label (sigmoid) model has per-label thresholds");
    if (s.label_thresholds.size() != s.labels.size())
      throw ConfigError("label_thresholds", "needs " + std::to_string(s.labels.size()) + " values, found " +
                                                std::to_string(s.label_thresholds.size()));
    for (const float t : s.label_thresholds)
      if (!(t > 0.0f && t < 1.0f)) throw ConfigError("label_thresholds", "every threshold must be in (0, 1)");
  }
  const std::size_t temperatures = s.output == OutputKind::kSigmoid ? s.labels.size() : 1;
  if (!s.temperature.empty() && s.temperature.size() != temperatures)
    throw ConfigError("temperature", "needs " + std::to_string(temperatures) + " value(s), found " +
                                         std::to_string(s.temperature.size()));
  for (const float t : s.temperature)
    if (!(t >= runtime::kMinTemperature && t <= runtime::kMaxTemperature))
      throw ConfigError("temperature", "every temperature must be in [0.01, 100]");
  if (s.has_char_encoder()) {
    in_range("char_vocab_size", s.char_vocab_size, 2, L::kMaxCharacters);
    in_range("char_embedding_size", s.char_embedding_size, 1, L::kMaxEmbeddingSize);
    in_range("char_filters", s.char_filters, 1, L::kMaxEmbeddingSize);
    in_range("char_width", s.char_width, 1, L::kMaxCharWidth);
    if (s.char_width % 2 == 0) throw ConfigError("char_width", "must be odd");
  } else if (s.char_vocab_size != 0 || s.char_embedding_size != 0 || s.char_width != 0) {
    throw ConfigError("char_filters", "a model without a character encoder has no character sizes");
  }
}

}  // namespace gyre::model
