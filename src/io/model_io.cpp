#include "gyre/io/model_io.hpp"

#include <algorithm>
#include <iterator>
#include <optional>
#include <set>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/data/tag_scheme.hpp"
#include "gyre/runtime/error.hpp"
#include "gyre/runtime/ngram_part_file.hpp"

namespace gyre::io {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

/// A runtime::Error about `path` as a FormatError (without naming the file twice).
FormatError format_error(const std::string& path, const std::exception& e) {
  std::string_view msg = e.what();
  const std::string prefix = path + ": ";
  if (msg.substr(0, prefix.size()) == prefix) msg.remove_prefix(prefix.size());
  return FormatError(path, msg);
}

runtime::ModelHeader description(const model::ModelSpec& spec, const text::VocabFile& vocab,
                                 const runtime::NgramPart* ngram_part) {
  runtime::ModelHeader h;
  h.architecture = model::architecture(spec);
  if (ngram_part != nullptr) runtime::describe_ngram_part(*ngram_part, h.architecture);
  h.labels = spec.labels;
  h.tokenizer = vocab.tokenizer;
  h.vocabulary.reserve(vocab.vocab.size());
  for (std::size_t i = 0; i < vocab.vocab.size(); ++i)
    h.vocabulary.push_back(vocab.vocab.token(static_cast<std::int32_t>(i)));
  if (spec.has_char_encoder()) h.characters = vocab.characters;
  return h;
}

}  // namespace

json model_header(const model::ModelSpec& spec, const text::VocabFile& vocab,
                  const runtime::NgramPart* ngram_part) {
  try {
    return json::parse(runtime::model_header_json(description(spec, vocab, ngram_part)));
  } catch (const runtime::Error& e) {
    throw Error(std::string("this model cannot be stored in a model file: ") + e.what());
  }
}

namespace {

/// Reads a number in [lo, hi) from an optional member of obj (default when absent).
double optional_fraction(const json& obj, const char* key, const std::string& path) {
  if (!obj.contains(key)) return 0.0;
  const json& v = obj.at(key);
  if (!v.is_number() || !(v.get<double>() >= 0.0 && v.get<double>() < 1.0))
    throw FormatError(path, std::string("header: \"training.") + key + "\" must be a number in [0, 1)");
  return v.get<double>();
}

/// counts[i] of an optional array member, all zero when absent; must have n unsigned entries.
std::vector<std::uint64_t> optional_counts(const json& header, const char* key, std::size_t n,
                                           const std::string& path) {
  if (!header.contains(key)) return std::vector<std::uint64_t>(n, 0);
  const json& v = header.at(key);
  if (!v.is_array() || v.size() != n)
    throw FormatError(
        path, std::string("header: \"") + key + "\" must be an array of " + std::to_string(n) + " counts");
  std::vector<std::uint64_t> out;
  out.reserve(n);
  for (const json& c : v) {
    if (!c.is_number_unsigned())
      throw FormatError(path, std::string("header: \"") + key + "\" must hold non-negative integers");
    out.push_back(c.get<std::uint64_t>());
  }
  return out;
}

struct ParsedHeader {
  model::ModelSpec spec;
  text::VocabFile vocab;
  runtime::NgramPart ngram_part;
  json header;  // the whole header, with the checkpoint's extra members
};

// The model description through the runtime's one reader and validator (which also checks that
// every tensor the architecture needs is in the file, so nothing below allocates more than the
// file holds); then the members only checkpoints have (dropout, counts, trainer state).
ParsedHeader parse_header(const runtime::ModelFile& file) {
  const std::string& path = file.name();
  runtime::ModelHeader h;
  try {
    h = runtime::parse_model_header(file.header_json(), path);
    runtime::check_model_tensors(h, file);
  } catch (const runtime::Error& e) {
    throw format_error(path, e);
  }
  ParsedHeader out;
  try {
    out.ngram_part = runtime::read_ngram_part(h, file);
  } catch (const runtime::Error& e) {
    throw format_error(path, e);
  }
  try {
    out.header = json::parse(file.header_json());
    out.spec = model::spec_from_header(h);
  } catch (const std::exception& e) {
    throw format_error(path, e);
  }
  const json training = out.header.value("training", json::object());
  if (!training.is_object()) throw FormatError(path, "header: \"training\" must be an object");
  out.spec.dropout = static_cast<float>(optional_fraction(training, "dropout", path));
  out.spec.embedding_dropout = static_cast<float>(optional_fraction(training, "embedding_dropout", path));
  out.vocab.tokenizer = h.tokenizer;
  out.vocab.characters = h.characters;
  auto counts = optional_counts(out.header, "vocabulary_counts", h.vocabulary.size(), path);
  auto label_counts = optional_counts(out.header, "label_counts", h.labels.size(), path);
  try {
    out.vocab.vocab = text::Vocab(std::vector<std::string>(std::make_move_iterator(h.vocabulary.begin() + 2),
                                                           std::make_move_iterator(h.vocabulary.end())),
                                  std::vector<std::uint64_t>(counts.begin() + 2, counts.end()));
    out.vocab.labels = text::LabelSet(h.labels, std::move(label_counts));
  } catch (const Error& e) {
    throw format_error(path, e);
  }
  return out;
}

runtime::ModelFile open_file(const fs::path& path) {
  try {
    return runtime::ModelFile::open(path.string());
  } catch (const runtime::Error& e) {
    throw format_error(path.string(), e);
  }
}

// Shapes were checked against the header by parse_header; the spec built from that header makes
// the same parameters.
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

void refuse_version1_run(const fs::path& dir) {
  std::error_code ec;
  for (const char* old_name : {"checkpoint-best.bin", "checkpoint-last.bin"})
    if (fs::exists(dir / old_name, ec) && !fs::exists(dir / kSelectedCheckpointFile, ec) &&
        !fs::exists(dir / kResumeCheckpointFile, ec))
      throw IoError(dir.string() + " is a run of an older gyre (its " + old_name +
                    " is model-format version 1, whose tensor names changed in version " +
                    std::to_string(runtime::kModelFormatVersion) + "); retrain it with this gyre");
}

fs::path resolve_model_path(const fs::path& model_or_run) {
  std::error_code ec;
  if (fs::is_directory(model_or_run, ec)) {
    const fs::path best = model_or_run / kSelectedCheckpointFile;
    refuse_version1_run(model_or_run);
    if (!fs::exists(best, ec))
      throw IoError(model_or_run.string() + " is a directory without " + kSelectedCheckpointFile +
                    " (not a finished or resumable run)");
    return best;
  }
  if (!fs::exists(model_or_run, ec))
    throw IoError("cannot open " + model_or_run.string() + ": no such file or directory");
  return model_or_run;
}

bool TrainedModel::exported() const {
  return header.value("format", "") == "gyre-model";
}

TrainedModel load_trained_model(const fs::path& model_or_run, Engine engine) {
  TrainedModel out;
  out.path = resolve_model_path(model_or_run);
  const runtime::ModelFile file = open_file(out.path);
  ParsedHeader parsed = parse_header(file);
  out.spec = std::move(parsed.spec);
  out.vocab = std::move(parsed.vocab);
  out.header = std::move(parsed.header);
  out.ngram_part = std::move(parsed.ngram_part);
  if (engine == Engine::kRuntimeForExported && out.exported()) {
    try {
      out.runtime = runtime::Model::from_file(file);
    } catch (const runtime::Error& e) {
      throw format_error(out.path.string(), e);
    }
    return out;
  }
  out.model = std::make_unique<model::SequenceModel>(out.spec);
  load_parameters(file, out.model->params());
  out.model->set_ngram_part_expected(!out.ngram_part.empty());
  return out;
}

void set_multi_label_threshold(TrainedModel& trained, float threshold) {
  if (trained.spec.task != data::Task::kClassify || trained.spec.output != model::OutputKind::kSigmoid)
    throw ConfigError("multi_label_threshold", trained.path.string() +
                                                   " is not a multi-label model (its output is " +
                                                   model::to_string(trained.spec.output) + ")");
  trained.spec.threshold = threshold;
  trained.spec.label_thresholds.clear();
  model::validate(trained.spec);
  if (trained.model) trained.model->set_thresholds(threshold, {});
}

void write_checkpoint(const fs::path& path, const model::SequenceModel& model, const text::VocabFile& vocab,
                      optim::Optimizer* optimizer, const json& trainer_state, const json& config,
                      const runtime::NgramPart* ngram_part) {
  json header = model_header(model.spec(), vocab, ngram_part);
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
    if (ngram_part != nullptr) runtime::add_ngram_part(writer, *ngram_part, runtime::DType::kF32);
    remove_stale_temp_files_of(path);  // what a killed earlier writer left
    writer.write(path.string());
  } catch (const runtime::Error& e) {
    throw IoError("cannot write checkpoint " + path.string() + ": " + e.what());
  }
}

json restore_checkpoint(const fs::path& path, model::SequenceModel& model, optim::Optimizer* optimizer) {
  const runtime::ModelFile file = open_file(path);
  const ParsedHeader parsed = parse_header(file);
  if (parsed.header.value("format", "") != "gyre-checkpoint")
    throw FormatError(path.string(), "not a gyre training checkpoint");
  if (!(parsed.spec == model.spec()))
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
  return json{{"trainer", parsed.header.value("trainer", json::object())},
              {"config", parsed.header.value("config", json::object())}};
}

std::size_t export_model(const TrainedModel& trained, const fs::path& out, runtime::DType precision,
                         const json& extra) {
  json header = model_header(trained.spec, trained.vocab, &trained.ngram_part);
  header["format"] = "gyre-model";
  for (const auto& [key, value] : extra.items())
    if (!header.contains(key)) header[key] = value;
  try {
    runtime::ModelFileWriter writer(header.dump());
    // The runtime decodes a CRF with plain Viterbi and forward-backward; forbidden transitions of
    // the tag scheme are written as kForbidden so it makes the same constrained choices as the
    // library (exp(-10000) is 0 in float).
    constexpr float kForbidden = -10000.0f;
    std::optional<data::TransitionRules> rules;
    if (trained.spec.output == model::OutputKind::kCrf && trained.spec.tag_scheme != data::TagScheme::kNone)
      rules = data::transition_rules(trained.spec.labels, trained.spec.tag_scheme);
    std::set<std::string, std::less<>> matrices;
    for (const auto& t : runtime::model_tensors(description(trained.spec, trained.vocab, nullptr)))
      if (t.matrix) matrices.insert(t.name);
    for (const auto& p : trained.model->params()) {
      const runtime::DType dtype = matrices.count(p.name) ? precision : runtime::DType::kF32;
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
    runtime::add_ngram_part(writer, trained.ngram_part, precision);
    remove_stale_temp_files_of(out);  // what a killed earlier writer left
    writer.write(out.string());
  } catch (const runtime::Error& e) {
    throw IoError("cannot export to " + out.string() + ": " + e.what());
  }
  return static_cast<std::size_t>(fs::file_size(out));
}

}  // namespace gyre::io
