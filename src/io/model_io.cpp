#include "gyre/io/model_io.hpp"

#include <algorithm>
#include <optional>

#include "gyre/core/error.hpp"
#include "gyre/eval/tag_scheme.hpp"
#include "gyre/runtime/error.hpp"

namespace gyre::io {

namespace fs = std::filesystem;
using nlohmann::json;

json model_header(const model::ModelSpec& spec, const text::VocabFile& vocab) {
  json arch{{"task", data::to_string(spec.task)},
            {"cell", model::cell_name(spec.cell)},
            {"embedding_size", spec.embedding_size},
            {"hidden_size", spec.hidden_size},
            {"layers", spec.layers},
            {"bidirectional", spec.bidirectional},
            {"output", model::to_string(spec.output)}};
  if (spec.task == data::Task::kClassify) {
    arch["pooling"] = std::string(nn::pooling_name(spec.pooling));
    if (spec.output == model::OutputKind::kSigmoid) arch["multi_label_threshold"] = spec.threshold;
  } else {
    arch["tag_scheme"] = spec.tag_scheme.empty() ? "none" : spec.tag_scheme;
  }
  json tokens = json::array();
  for (std::size_t i = 0; i < vocab.vocab.size(); ++i)
    tokens.push_back(vocab.vocab.token(static_cast<std::int32_t>(i)));
  json tokenizer;
  runtime::to_json(tokenizer, vocab.tokenizer);
  return json{
      {"architecture", arch}, {"labels", spec.labels}, {"tokenizer", tokenizer}, {"vocabulary", tokens}};
}

namespace {

bool is_matrix_weight(const std::string& name) {
  auto ends_with = [&](std::string_view suffix) {
    return name.size() >= suffix.size() &&
           name.compare(name.size() - suffix.size(), suffix.size(), suffix) == 0;
  };
  return name == "embedding.weight" || name == "head.weight" || ends_with(".w_input") ||
         ends_with(".w_hidden");
}

template <typename T>
T header_field(const json& j, const char* key, const std::string& path) {
  if (!j.contains(key)) throw FormatError(path, std::string("header has no \"") + key + "\"");
  try {
    return j.at(key).get<T>();
  } catch (const json::exception&) {
    throw FormatError(path, std::string("header field \"") + key + "\" has the wrong type");
  }
}

// Rebuilds spec + vocabulary from a header (checkpoint or exported model).
void parse_header(const json& header, const std::string& path, model::ModelSpec& spec,
                  text::VocabFile& vocab) {
  const json arch = header_field<json>(header, "architecture", path);
  json spec_json;
  try {
    spec_json = json{{"task", arch.at("task")},
                     {"cell", arch.at("cell")},
                     {"embedding_size", arch.at("embedding_size")},
                     {"hidden_size", arch.at("hidden_size")},
                     {"layers", arch.at("layers")},
                     {"bidirectional", arch.at("bidirectional")},
                     {"output", arch.at("output")},
                     {"pooling", arch.value("pooling", "mean")},
                     {"tag_scheme", arch.value("tag_scheme", "")},
                     {"threshold", arch.value("multi_label_threshold", 0.5)},
                     {"labels", header.at("labels")},
                     {"vocab_size", header.at("vocabulary").size()}};
    const json training = header.value("training", json::object());
    spec_json["dropout"] = training.value("dropout", 0.0);
    spec_json["embedding_dropout"] = training.value("embedding_dropout", 0.0);
    if (spec_json["tag_scheme"] == "none") spec_json["tag_scheme"] = "";
  } catch (const json::exception& e) {
    throw FormatError(path, std::string("header is missing a model field: ") + e.what());
  }
  try {
    spec = model::spec_from_json(spec_json);
  } catch (const ConfigError& e) {
    throw FormatError(path, std::string("bad model description in header: ") + e.what());
  }
  try {
    runtime::from_json(header.at("tokenizer"), vocab.tokenizer);
  } catch (const std::exception& e) {
    throw FormatError(path, std::string("bad tokenizer settings in header: ") + e.what());
  }
  const auto tokens = header_field<std::vector<std::string>>(header, "vocabulary", path);
  if (tokens.size() < 2 || tokens[0] != text::Vocab::kPadToken || tokens[1] != text::Vocab::kUnkToken)
    throw FormatError(path, "vocabulary must start with \"<pad>\", \"<unk>\"");
  std::vector<std::uint64_t> counts = header.value("vocabulary_counts", std::vector<std::uint64_t>{});
  if (counts.empty()) counts.assign(tokens.size(), 0);
  if (counts.size() != tokens.size())
    throw FormatError(path, "vocabulary_counts and vocabulary differ in length");
  try {
    vocab.vocab = text::Vocab(std::vector<std::string>(tokens.begin() + 2, tokens.end()),
                              std::vector<std::uint64_t>(counts.begin() + 2, counts.end()));
  } catch (const Error& e) {
    throw FormatError(path, e.what());
  }
  text::LabelCounts label_counts;
  const auto label_count_list = header.value("label_counts", std::vector<std::uint64_t>{});
  for (std::size_t i = 0; i < spec.labels.size(); ++i)
    label_counts[spec.labels[i]] = i < label_count_list.size() ? label_count_list[i] : 0;
  vocab.labels = text::LabelSet(label_counts);
  if (vocab.labels.names() != spec.labels)
    throw FormatError(path, "labels must be unique and sorted by name (byte order)");
}

runtime::ModelFile open_file(const fs::path& path) {
  try {
    return runtime::ModelFile::open(path.string());
  } catch (const runtime::Error& e) {
    throw FormatError(path.string(), e.what());
  }
}

json header_of(const runtime::ModelFile& file) {
  try {
    return json::parse(file.header_json());
  } catch (const json::exception& e) {
    throw FormatError(file.name(), std::string("header is not valid JSON: ") + e.what());
  }
}

void load_parameters(const runtime::ModelFile& file, nn::ParameterStore& params) {
  for (auto& p : params) {
    const runtime::TensorInfo* t = file.find(p.name);
    if (t == nullptr) throw FormatError(file.name(), "tensor '" + p.name + "' is missing");
    if (t->rows != static_cast<std::uint64_t>(p.value.rows()) ||
        t->cols != static_cast<std::uint64_t>(p.value.cols()))
      throw FormatError(file.name(), "tensor '" + p.name + "' has shape " + t->shape_string() +
                                         ", the model needs [" + std::to_string(p.value.rows()) + " x " +
                                         std::to_string(p.value.cols()) + "]");
    file.read_f32(*t, gyre::Span<float>(p.value.data(), static_cast<std::size_t>(p.value.size())));
  }
}

}  // namespace

fs::path resolve_model_path(const fs::path& model_or_run) {
  std::error_code ec;
  if (fs::is_directory(model_or_run, ec)) {
    const fs::path best = model_or_run / "checkpoint-best.bin";
    if (!fs::exists(best, ec))
      throw IoError(model_or_run.string() +
                    " is a directory without checkpoint-best.bin (not a finished or resumable run)");
    return best;
  }
  if (!fs::exists(model_or_run, ec))
    throw IoError("cannot open " + model_or_run.string() + ": no such file or directory");
  return model_or_run;
}

TrainedModel load_trained_model(const fs::path& model_or_run) {
  TrainedModel out;
  out.path = resolve_model_path(model_or_run);
  const runtime::ModelFile file = open_file(out.path);
  out.header = header_of(file);
  const std::string format = out.header.value("format", "");
  if (format != "gyre-checkpoint" && format != "gyre-model")
    throw FormatError(out.path.string(), "not a gyre model or checkpoint (header format \"" + format + "\")");
  parse_header(out.header, out.path.string(), out.spec, out.vocab);
  out.model = std::make_unique<model::SequenceModel>(out.spec);
  load_parameters(file, out.model->params());
  return out;
}

void write_checkpoint(const fs::path& path, const model::SequenceModel& model, const text::VocabFile& vocab,
                      optim::Optimizer* optimizer, const json& trainer_state, const json& config) {
  json header = model_header(model.spec(), vocab);
  header["format"] = "gyre-checkpoint";
  header["training"] = {{"dropout", model.spec().dropout},
                        {"embedding_dropout", model.spec().embedding_dropout}};
  std::vector<std::uint64_t> counts;
  for (std::size_t i = 0; i < vocab.vocab.size(); ++i)
    counts.push_back(vocab.vocab.count(static_cast<std::int32_t>(i)));
  header["vocabulary_counts"] = counts;
  std::vector<std::uint64_t> label_counts;
  for (std::size_t i = 0; i < vocab.labels.size(); ++i)
    label_counts.push_back(vocab.labels.count(static_cast<std::int32_t>(i)));
  header["label_counts"] = label_counts;
  header["trainer"] = trainer_state;
  header["config"] = config;
  try {
    runtime::ModelFileWriter writer(header.dump());
    for (const auto& p : model.params())
      writer.add_tensor(p.name, static_cast<std::uint64_t>(p.value.rows()),
                        static_cast<std::uint64_t>(p.value.cols()),
                        gyre::Span<const float>(p.value.data(), static_cast<std::size_t>(p.value.size())));
    if (optimizer != nullptr && optimizer->bound()) {
      for (const auto& [name, tensor] : optimizer->state_tensors())
        writer.add_tensor(name, static_cast<std::uint64_t>(tensor->rows()),
                          static_cast<std::uint64_t>(tensor->cols()),
                          gyre::Span<const float>(tensor->data(), static_cast<std::size_t>(tensor->size())));
    }
    writer.write(path.string());
  } catch (const runtime::Error& e) {
    throw IoError("cannot write checkpoint " + path.string() + ": " + e.what());
  }
}

json restore_checkpoint(const fs::path& path, model::SequenceModel& model, optim::Optimizer* optimizer) {
  const runtime::ModelFile file = open_file(path);
  const json header = header_of(file);
  if (header.value("format", "") != "gyre-checkpoint")
    throw FormatError(path.string(), "not a gyre training checkpoint");
  model::ModelSpec spec;
  text::VocabFile vocab;
  parse_header(header, path.string(), spec, vocab);
  if (model::spec_to_json(spec) != model::spec_to_json(model.spec()))
    throw FormatError(path.string(), "the checkpoint's model differs from the configured one");
  load_parameters(file, model.params());
  if (optimizer != nullptr) {
    optimizer->bind(model.params());
    for (const auto& [name, tensor] : optimizer->state_tensors()) {
      const runtime::TensorInfo* t = file.find(name);
      if (t == nullptr) throw FormatError(path.string(), "optimizer state '" + name + "' is missing");
      if (t->elements() != static_cast<std::uint64_t>(tensor->size()))
        throw FormatError(path.string(), "optimizer state '" + name + "' has the wrong size");
      file.read_f32(*t, gyre::Span<float>(tensor->data(), static_cast<std::size_t>(tensor->size())));
    }
  }
  return json{{"trainer", header.value("trainer", json::object())},
              {"config", header.value("config", json::object())}};
}

std::size_t export_model(const TrainedModel& trained, const fs::path& out, runtime::DType precision,
                         const json& extra) {
  json header = model_header(trained.spec, trained.vocab);
  header["format"] = "gyre-model";
  for (const auto& [key, value] : extra.items())
    if (!header.contains(key)) header[key] = value;
  try {
    runtime::ModelFileWriter writer(header.dump());
    // The runtime decodes a CRF with plain Viterbi and forward-backward; forbidden transitions of
    // the tag scheme are written as kForbidden so it makes the same constrained choices as the
    // library (exp(-10000) is 0 in float).
    constexpr float kForbidden = -10000.0f;
    std::optional<eval::TransitionRules> rules;
    if (trained.spec.output == model::OutputKind::kCrf && !trained.spec.tag_scheme.empty())
      rules = eval::transition_rules(trained.spec.labels, eval::parse_tag_scheme(trained.spec.tag_scheme));
    for (const auto& p : trained.model->params()) {
      const runtime::DType dtype = is_matrix_weight(p.name) ? precision : runtime::DType::kF32;
      nn::Matrix values = p.value;
      if (rules) {
        const std::vector<std::uint8_t>* allowed = p.name == "crf.transitions" ? &rules->allowed
                                                   : p.name == "crf.start"     ? &rules->start
                                                   : p.name == "crf.end"       ? &rules->end
                                                                               : nullptr;
        if (allowed != nullptr)
          for (Eigen::Index i = 0; i < values.size(); ++i)
            if ((*allowed)[static_cast<std::size_t>(i)] == 0) values.data()[i] = kForbidden;
      }
      writer.add_tensor(
          p.name, static_cast<std::uint64_t>(values.rows()), static_cast<std::uint64_t>(values.cols()),
          gyre::Span<const float>(values.data(), static_cast<std::size_t>(values.size())), dtype);
    }
    writer.write(out.string());
  } catch (const runtime::Error& e) {
    throw IoError("cannot export to " + out.string() + ": " + e.what());
  }
  return static_cast<std::size_t>(fs::file_size(out));
}

}  // namespace gyre::io
